"""Preparing a tree for the trait diagnostics: keep the tips that have a
value, root the result at their most recent common ancestor, and fold away
nodes left with a single child.

This is the diagnostics' own pruning routine on the array view (the trees
stage may offer a general one later); it works on any numbering in which
every parent comes before its children, and keeps that property.

Everything here is vectorised: upward sums over subtrees run as one sparse
triangular solve (compiled code, linear in the number of nodes), and
skipping over removed nodes uses pointer jumping (O(n log height)).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp
from scipy.sparse.linalg import spsolve_triangular

from curation.errors import InputError, Problem
from curation.trees.arrays import TreeArrays, path_sums

__all__ = ["PreparedTree", "prepare_tree", "subtree_sums", "nearest_kept_ancestor"]


@dataclass(frozen=True)
class PreparedTree:
    """A tree ready for the Brownian computations.

    Attributes:
        parent: parent of each node (-1 for the root, node 0); parents come
            before children.
        length: branch length above each node (0 at the root), all finite
            and non-negative.
        tip_nodes: node index of each tip, in the order of ``labels``.
        labels: tip labels, in the order the values are given to the engine.
        depth: distance from the root to every node.
    """

    parent: np.ndarray
    length: np.ndarray
    tip_nodes: np.ndarray
    labels: list[str]
    depth: np.ndarray

    @property
    def node_count(self) -> int:
        """Number of nodes, tips included."""
        return len(self.parent)

    @property
    def tip_count(self) -> int:
        """Number of tips."""
        return len(self.tip_nodes)

    @property
    def is_tip(self) -> np.ndarray:
        """Boolean mask of tip nodes."""
        mask = np.zeros(self.node_count, dtype=bool)
        mask[self.tip_nodes] = True
        return mask

    @property
    def height(self) -> float:
        """Largest root-to-tip distance."""
        return float(self.depth[self.tip_nodes].max()) if self.tip_count else 0.0


def subtree_sums(parent: np.ndarray, values: np.ndarray) -> np.ndarray:
    """Return, for every node, the sum of ``values`` over its subtree
    (itself included).

    ``values`` may be one-dimensional or have one row per node. Runs as one
    sparse unit lower-triangular solve in postorder, linear in the nodes.
    """
    n = len(parent)
    if n == 0:
        return np.asarray(values, dtype=np.float64).copy()
    # Postorder position of node v is n-1-v (children have larger indices
    # than their parents, so they come first).
    child = np.arange(1, n)
    rows = n - 1 - parent[child]
    cols = n - 1 - child
    matrix = sp.csr_matrix(
        (
            np.concatenate([np.ones(n), -np.ones(n - 1)]),
            (np.concatenate([np.arange(n), rows]), np.concatenate([np.arange(n), cols])),
        ),
        shape=(n, n),
    )
    rhs = np.asarray(values, dtype=np.float64)[::-1]
    solved = spsolve_triangular(matrix, rhs, lower=True, unit_diagonal=True)
    return np.asarray(solved)[::-1].copy()


def nearest_kept_ancestor(parent: np.ndarray, kept: np.ndarray) -> np.ndarray:
    """Return, for every node, its nearest proper ancestor that is ``kept``
    (-1 when there is none), by pointer jumping in O(n log height).

    Invariant: ``up[v]`` is a proper ancestor of ``v`` and no node strictly
    between them is kept, so following a pointer that lands on a node that
    is not kept keeps it true while the remaining path halves.
    """
    up = parent.copy()
    while True:
        moving = (up >= 0) & ~kept[np.maximum(up, 0)]
        if not moving.any():
            return up
        up = np.where(moving, up[np.maximum(up, 0)], up)


def prepare_tree(arrays: TreeArrays, keep: list[str]) -> PreparedTree:
    """Restrict ``arrays`` to the tips labelled in ``keep``.

    The result is rooted at the most recent common ancestor of the kept
    tips (the stem above it is dropped, since a shared stem only shifts
    every covariance and is not part of the species' shared history among
    themselves), and nodes left with one child are folded into their child
    (the branch lengths add up). The order of ``keep`` becomes the order of
    :attr:`PreparedTree.labels`.

    Raises:
        InputError: a label of ``keep`` is not a tip of the tree, tip labels
            repeat, fewer than two tips are kept, or a kept branch has no
            length or a negative length (every problem listed).
    """
    n = arrays.node_count
    labels = arrays.labels
    is_tip = arrays.is_tip
    tip_index = np.flatnonzero(is_tip)
    problems: list[Problem] = []
    position: dict[str, int] = {}
    for node in tip_index:
        label = labels[node]
        if label in position:
            problems.append(
                Problem(
                    f"tip label {label!r} appears more than once on the tree",
                    field="tip label",
                    value=label,
                    hint="make tip labels unique (see `tipledger check-trees`)",
                )
            )
        position[label] = int(node)
    missing = [label for label in keep if label not in position]
    for label in missing[:20]:
        problems.append(
            Problem(f"{label!r} is not a tip of the tree", field="tip label", value=label)
        )
    if len(missing) > 20:
        problems.append(Problem(f"... and {len(missing) - 20} more labels not on the tree"))
    if len(set(keep)) != len(keep):
        problems.append(Problem("the values name some tip more than once", field="tip label"))
    if problems:
        raise InputError(
            "the tree and the trait values do not fit together",
            problems=problems,
            hint="give one value per tip label of the tree",
        )
    if len(keep) < 2:
        raise InputError(
            f"only {len(keep)} tip has a value: the diagnostics need at least two species",
            field="values",
            hint="give values for more tips of the tree",
        )
    kept_tips = np.array([position[label] for label in keep], dtype=np.int64)
    mark = np.zeros(n)
    mark[kept_tips] = 1.0
    below = subtree_sums(arrays.parent, mark)
    # New root: the deepest node holding every kept tip (largest index among
    # those, since ancestors come before descendants).
    holds_all = np.flatnonzero(below >= len(keep) - 0.5)
    root = int(holds_all.max())
    # Children count within the kept part decides which nodes fold away.
    # Ancestors come before descendants, so an in-tree node after the root
    # is below it and one before it is above it.
    in_tree = below > 0.5
    child_in = np.zeros(n, dtype=np.int64)
    nonroot = np.arange(1, n)
    live = nonroot[in_tree[nonroot]]
    np.add.at(child_in, arrays.parent[live], 1)
    lengths = arrays.edge_length
    index = np.arange(n)
    # Branches below the new root inside the kept part are the ones used
    # (folded single-child nodes add theirs to their child's branch).
    counted = in_tree & (index > root)
    check = np.flatnonzero(counted)
    nan = check[np.isnan(lengths[check])]
    neg = check[lengths[check] < 0]
    bad_length: list[Problem] = []
    if len(nan):
        bad_length.append(
            Problem(
                f"{len(nan)} branches have no length (the first above "
                f"{_node_name(arrays, int(nan[0]))})",
                field="branch length",
                hint="give the tree branch lengths, or repair it with the trees stage",
            )
        )
    if len(neg):
        bad_length.append(
            Problem(
                f"{len(neg)} branches have negative lengths (e.g. "
                f"{float(lengths[neg[0]])!r} above {_node_name(arrays, int(neg[0]))})",
                field="branch length",
                hint="repair negative branch lengths with the trees stage first",
            )
        )
    if bad_length:
        raise InputError(
            "the tree's branch lengths cannot carry a Brownian model",
            problems=bad_length,
        )
    used = np.where(counted, np.nan_to_num(lengths, nan=0.0), 0.0)
    depth_full = path_sums(arrays.parent, used)
    kept = in_tree & (index >= root) & ((child_in != 1) | (index == root))
    # Each kept node's new parent is its nearest kept ancestor; its new
    # branch is the difference of depths (the folded branches added up).
    up = nearest_kept_ancestor(arrays.parent, kept)
    nodes = np.flatnonzero(kept)
    renumber = np.full(n, -1, dtype=np.int64)
    renumber[nodes] = np.arange(len(nodes))
    parent_new = np.where(nodes == root, -1, renumber[np.maximum(up[nodes], 0)]).astype(np.int64)
    depth_new = depth_full[nodes]
    length_new = np.where(parent_new >= 0, depth_new - depth_new[np.maximum(parent_new, 0)], 0.0)
    length_new = np.maximum(length_new, 0.0)
    tip_nodes = renumber[kept_tips]
    return PreparedTree(
        parent=parent_new.astype(np.int64),
        length=length_new,
        tip_nodes=tip_nodes,
        labels=list(keep),
        depth=depth_new - depth_new[0],
    )


def _node_name(arrays: TreeArrays, node: int) -> str:
    label = arrays.labels[node]
    return repr(label) if label else f"node {node}"
