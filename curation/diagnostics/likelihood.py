"""The linear-time Brownian pass over a tree.

Under Brownian motion on a tree the tip values are multivariate normal with
covariance V = sum over branches of (branch variance) x (indicator of the
tips below it). Everything the diagnostics need (the generalised-least-
squares root state, 1'V^-1 1, the quadratic form r'V^-1 r, log det V) comes
out of one postorder pruning recursion (Felsenstein 1973, 1985), here
generalised to any number of children per node:

    s_c^2 = d_c + 1 / W_c            (variance of child c's subtree mean, seen
                                       from its parent; 1/W = 0 at a tip)
    w_c   = 1 / s_c^2
    W_v   = sum over children c of w_c
    x_v   = sum_c w_c x_c / W_v       (the subtree's weighted mean)

so that x_root is the GLS estimate of the root state, 1'V^-1 1 = W_root,
r'V^-1 r = sum over non-root nodes c of w_c (x_c - x_parent(c))^2, and
log det V = sum_c log s_c^2 + sum over non-root internal v of log W_v.

The recursion for W is not linear, but it is exactly the sequence of pivots
of the sparse Cholesky-like (LU) elimination, in postorder, of the
precision matrix of the internal node states (a tree-structured sparse
matrix, so the elimination has no fill): pivot_v = 1/d_v + W_v. SuperLU
does that elimination in compiled code in time linear in the nodes, and one
sparse triangular solve gives every x_v for many value columns at once
(permutations as matrix columns). Neither step depends on the tree's shape
(a caterpillar costs what a balanced tree costs).

Zero-variance branches are handled exactly: a zero-length internal branch
merges its child into its parent (a polytomy), and a tip at the end of a
zero-variance branch pins its parent's state to the tip's value. Two tips
pinned to one node (or one pinned at the root) make V singular; that is an
:class:`~curation.errors.InputError` naming the tips.

Precision: extracting W_v from a pivot subtracts 1/d_v, so a branch of
relative length e loses about log10(1/e) digits; branches shorter than
1e-12 of the largest root-to-tip variance are treated as zero length.
"""

from __future__ import annotations

import numpy as np
import scipy.sparse as sp
from scipy.sparse.linalg import splu, spsolve_triangular

from curation.diagnostics.pruning import PreparedTree, nearest_kept_ancestor
from curation.errors import InputError, Problem
from curation.trees.arrays import path_sums

__all__ = ["BrownianPass", "edge_variances", "ZERO_TOLERANCE"]

ZERO_TOLERANCE = 1e-12
# Columns are solved in chunks of at most this many numbers (80 MB of
# float64), so 1,000 permutations of 50,000 tips stay within memory.
_CHUNK_NUMBERS = 10_000_000


def edge_variances(
    tree: PreparedTree,
    *,
    lam: float = 1.0,
    rate: float = 1.0,
    tip_variance: np.ndarray | None = None,
) -> np.ndarray:
    """Return the variance of each branch under Brownian motion with
    Pagel's lambda transformation (Pagel 1999) and measurement error.

    Internal branches are multiplied by ``lam``; each terminal branch is
    lengthened by (1 - lam) times its parent's depth, so root-to-tip
    distances (the variances of the tips) are kept: V_lambda = lam * V
    off the diagonal, V's diagonal unchanged, for ultrametric and
    non-ultrametric trees alike. Everything is multiplied by ``rate`` and
    ``tip_variance`` (species' squared standard errors) is added to the
    terminal branches.

    Returns:
        float64 array, one variance per node (0 at the root).
    """
    is_tip = tree.is_tip
    length = tree.length
    out = length * lam
    parent_depth = tree.depth[np.maximum(tree.parent, 0)]
    out = np.where(is_tip, length + (1.0 - lam) * parent_depth, out) * rate
    if tip_variance is not None:
        extra = np.zeros(tree.node_count)
        extra[tree.tip_nodes] = tip_variance
        out = out + extra
    out[0] = 0.0
    return out


class BrownianPass:
    """The pruning recursion for one set of branch variances.

    Build once per set of branch variances (linear time), then
    :meth:`solve` any number of value columns.

    Attributes:
        log_det: log det V.
        precision_sum: 1'V^-1 1 (= W at the root).
        trace: trace of V (sum of root-to-tip variances).

    Raises:
        InputError: V is singular (two tips joined by zero-variance paths,
            or a tip at zero variance from the root), naming the tips.
    """

    def __init__(self, tree: PreparedTree, variance: np.ndarray) -> None:
        n = tree.node_count
        parent = tree.parent
        index = np.arange(n)
        is_tip = tree.is_tip
        tip_total = path_sums(parent, variance)[tree.tip_nodes]
        self.trace = float(tip_total.sum())
        scale = float(tip_total.max()) if len(tip_total) else 0.0
        zero = variance <= ZERO_TOLERANCE * scale
        zero[0] = False
        kept = ~zero
        up = nearest_kept_ancestor(parent, kept)
        rep = np.where(kept, index, up)
        self._check_singular(tree, zero, rep, tip_total, scale)
        tip_of_node = np.full(n, -1, dtype=np.int64)
        tip_of_node[tree.tip_nodes] = np.arange(tree.tip_count)
        # Pinned nodes: internal nodes whose state equals a tip's value.
        zero_tips = tree.tip_nodes[zero[tree.tip_nodes]]
        pinned_to = np.full(n, -1, dtype=np.int64)
        pinned_to[rep[zero_tips]] = tip_of_node[zero_tips]
        nodes = np.flatnonzero(kept)  # ascending: parents before children
        k = len(nodes)
        renumber = np.full(n, -1, dtype=np.int64)
        renumber[nodes] = np.arange(k)
        new_parent = np.full(k, -1, dtype=np.int64)
        new_parent[1:] = renumber[rep[parent[nodes[1:]]]]
        d = variance[nodes]
        node_tip = tip_of_node[nodes]  # value column feeding each kept node
        pinned = pinned_to[nodes] >= 0
        node_tip = np.where(pinned, pinned_to[nodes], node_tip)
        observed = node_tip >= 0  # tips and pinned nodes
        free = ~observed
        free[0] = False  # the root is handled apart
        if is_tip[0]:  # pragma: no cover - a prepared tree's root has children
            raise InputError("the tree has a single node")
        inv_d = np.zeros(k)
        inv_d[1:] = 1.0 / d[1:]
        big_w = np.full(k, np.inf)
        free_nodes = np.flatnonzero(free)
        if len(free_nodes):
            big_w[free_nodes] = self._pivots(free_nodes, new_parent, inv_d, k) - inv_d[free_nodes]
        big_w[0] = np.nan
        s2 = np.zeros(k)
        s2[1:] = d[1:] + np.where(np.isinf(big_w[1:]), 0.0, 1.0 / big_w[1:])
        w = np.zeros(k)
        w[1:] = 1.0 / s2[1:]
        big_w[0] = float(w[new_parent == 0].sum())
        self.precision_sum = float(big_w[0])
        self.log_det = float(np.log(s2[1:]).sum() + np.log(big_w[free_nodes]).sum())
        self._k = k
        self._nodes = nodes
        self._tip_nodes = tree.tip_nodes
        self._new_parent = new_parent
        self._w = w
        self._s2 = s2
        self._big_w = big_w
        self._node_tip = node_tip
        self._observed = observed
        self._triangular = self._averaging_matrix()

    @staticmethod
    def _check_singular(
        tree: PreparedTree, zero: np.ndarray, rep: np.ndarray, tip_total: np.ndarray, scale: float
    ) -> None:
        problems: list[Problem] = []
        at_root = tip_total <= ZERO_TOLERANCE * scale
        for i in np.flatnonzero(at_root)[:20]:
            problems.append(
                Problem(
                    f"tip {tree.labels[i]!r} is at zero distance from the root",
                    field="branch length",
                    value=tree.labels[i],
                )
            )
        zero_tips = np.flatnonzero(zero[tree.tip_nodes] & ~at_root)
        if len(zero_tips):
            meet = rep[tree.tip_nodes[zero_tips]]
            order = np.argsort(meet, kind="stable")
            meet_sorted = meet[order]
            starts = np.flatnonzero(np.r_[True, meet_sorted[1:] != meet_sorted[:-1]])
            sizes = np.diff(np.r_[starts, len(meet_sorted)])
            for start, size in zip(starts, sizes, strict=True):
                if size > 1 and len(problems) < 20:
                    names = [tree.labels[zero_tips[order[j]]] for j in range(start, start + size)]
                    problems.append(
                        Problem(
                            "tips "
                            + ", ".join(repr(x) for x in names[:5])
                            + (" ..." if size > 5 else "")
                            + " are joined by zero-length branches, so their "
                            "values would have to be equal",
                            field="branch length",
                            value=names,
                        )
                    )
        if problems:
            raise InputError(
                "the Brownian covariance matrix of this tree is singular",
                problems=problems,
                hint="give species standard errors (se), or repair zero-length terminal "
                "branches with the trees stage, or keep one of each set of identical tips",
            )

    @staticmethod
    def _pivots(
        free_nodes: np.ndarray, new_parent: np.ndarray, inv_d: np.ndarray, k: int
    ) -> np.ndarray:
        """Pivots of the postorder elimination of the free internal nodes'
        precision matrix (diagonal: 1/d of the node's branch plus its
        children's; off-diagonal: -1/d of a free child's branch)."""
        f = len(free_nodes)
        position = np.full(k, -1, dtype=np.int64)
        # Postorder: descending node index, so children are eliminated first.
        position[free_nodes] = f - 1 - np.arange(f)
        diagonal = np.empty(f)
        diagonal[position[free_nodes]] = inv_d[free_nodes]
        children = np.arange(1, k)
        to_free = position[new_parent[children]] >= 0
        np.add.at(diagonal, position[new_parent[children[to_free]]], inv_d[children[to_free]])
        link = children[(position[children] >= 0) & to_free]
        rows = np.concatenate([np.arange(f), position[new_parent[link]], position[link]])
        cols = np.concatenate([np.arange(f), position[link], position[new_parent[link]]])
        vals = np.concatenate([diagonal, -inv_d[link], -inv_d[link]])
        matrix = sp.csc_matrix((vals, (rows, cols)), shape=(f, f))
        factor = splu(
            matrix,
            permc_spec="NATURAL",
            diag_pivot_thresh=0.0,
            options={"SymmetricMode": True},
        )
        # Pr A Pc = L U; with diagonal pivoting the k-th pivot belongs to
        # column perm_c[k] of A.
        pivots_in_order = factor.U.diagonal()
        pivots = np.empty(f)
        pivots[factor.perm_c] = pivots_in_order
        if not np.array_equal(factor.perm_r[factor.perm_c], np.arange(f)):
            raise RuntimeError("the elimination pivoted off the diagonal")  # pragma: no cover
        return pivots[position[free_nodes]]

    def _averaging_matrix(self) -> sp.csr_matrix:
        """I - A in postorder positions, where row v of A holds w_c / W_v
        for the children c of an averaging node v (free or the root)."""
        k = self._k
        children = np.arange(1, k)
        par = self._new_parent[children]
        averaging = ~self._observed[par]
        children = children[averaging]
        par = par[averaging]
        weight = self._w[children] / self._big_w[par]
        rows = np.concatenate([np.arange(k), k - 1 - par])
        cols = np.concatenate([np.arange(k), k - 1 - children])
        vals = np.concatenate([np.ones(k), -weight])
        return sp.csr_matrix((vals, (rows, cols)), shape=(k, k))

    def node_values(self, values: np.ndarray) -> np.ndarray:
        """Return x_v for every kept node (rows) and value column (columns).

        ``values`` has one row per tip in the prepared tree's label order.
        """
        values = np.asarray(values, dtype=np.float64)
        single = values.ndim == 1
        if single:
            values = values[:, None]
        k = self._k
        rhs = np.zeros((k, values.shape[1]))
        observed = np.flatnonzero(self._observed)
        rhs[k - 1 - observed] = values[self._node_tip[observed]]
        solved = spsolve_triangular(self._triangular, rhs, lower=True, unit_diagonal=True)
        x = np.asarray(solved).reshape(k, -1)[::-1]
        return x[:, 0] if single else x

    def solve(self, values: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Return (GLS root state, r'V^-1 r) for each value column.

        ``values``: (tips,) or (tips, columns), tips in the label order.
        Columns are processed in chunks to bound memory.
        """
        values = np.asarray(values, dtype=np.float64)
        single = values.ndim == 1
        if single:
            values = values[:, None]
        columns = values.shape[1]
        chunk = max(1, _CHUNK_NUMBERS // max(self._k, 1))
        means = np.empty(columns)
        rss = np.empty(columns)
        children = np.arange(1, self._k)
        par = self._new_parent[children]
        w = self._w[children][:, None]
        for start in range(0, columns, chunk):
            x = self.node_values(values[:, start : start + chunk])
            means[start : start + chunk] = x[0]
            rss[start : start + chunk] = (w * (x[children] - x[par]) ** 2).sum(axis=0)
        if single:
            return means[:1], rss[:1]
        return means, rss

    def contrast_parts(self, values: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Return (parent, child value, child variance s^2) for every edge of
        the contracted tree, plus a virtual zero-variance child for each
        pinned node carrying its tip's value; the input of the standardised
        contrasts."""
        x = self.node_values(values)
        children = np.arange(1, self._k)
        par = self._new_parent[children]
        xs = x[children]
        s2 = self._s2[children]
        pinned = np.flatnonzero(self._observed & (np.arange(self._k) > 0))
        pinned = pinned[self._has_children(pinned)]
        values = np.asarray(values, dtype=np.float64)
        return (
            np.concatenate([par, pinned]),
            np.concatenate([xs, values[self._node_tip[pinned]]]),
            np.concatenate([s2, np.zeros(len(pinned))]),
        )

    def contrast_nodes(self) -> tuple[np.ndarray, np.ndarray]:
        """Return (parent, child) as nodes of the prepared tree for every row
        of :meth:`contrast_parts`, in the same order; a pinned node's
        virtual child is the tip pinned to it."""
        children = np.arange(1, self._k)
        par = self._new_parent[children]
        pinned = np.flatnonzero(self._observed & (np.arange(self._k) > 0))
        pinned = pinned[self._has_children(pinned)]
        nodes = self._nodes
        return (
            np.concatenate([nodes[par], nodes[pinned]]),
            np.concatenate([nodes[children], self._tip_nodes[self._node_tip[pinned]]]),
        )

    def _has_children(self, nodes: np.ndarray) -> np.ndarray:
        counts = np.bincount(self._new_parent[1:], minlength=self._k)
        return counts[nodes] > 0
