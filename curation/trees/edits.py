"""Pure repairs of one tree: each takes a :class:`TreeArrays` and returns a
new one, leaving the input untouched. :mod:`curation.trees.repairs` applies
them to stored trees and records them.

The names say what the returned tree is (``pruned(tree, tips)`` is the
tree pruned to ``tips``), in the way ``sorted`` returns a sorted list.

Removing nodes keeps the preorder: a node's new parent is its nearest kept
ancestor, found by pointer jumping, and its new branch the sum of the
branches it replaces, so distances between the remaining nodes do not change.
"""

from __future__ import annotations

from typing import Literal, get_args

import numpy as np

from curation.errors import ConflictError, InputError, Problem, check_choice
from curation.trees.arrays import TreeArrays, path_sums
from curation.trees.checks import (
    DEFAULT_NEAR_ZERO,
    DEFAULT_TOLERANCE,
    measure_ultrametricity,
    near_zero_branches,
    near_zero_cutoff,
    ultrametric_explanation,
    validate_near_zero,
)
from curation.trees.nodes import name_nodes

__all__ = [
    "DEFAULT_TIP_LENGTH_SHARE",
    "ULTRAMETRIC_METHODS",
    "UltrametricMethod",
    "children_sorted",
    "made_ultrametric",
    "polytomies_resolved",
    "pruned",
    "short_branches_collapsed",
    "zero_tips_lengthened",
]

#: How :func:`made_ultrametric` makes a tree ultrametric.
UltrametricMethod = Literal["extend", "least_squares"]
ULTRAMETRIC_METHODS: tuple[str, ...] = get_args(UltrametricMethod)

DEFAULT_TIP_LENGTH_SHARE = 1e-3
"""Length given to a near-zero terminal branch when none is named, as a
share of the tree's height: a hundred times the near-zero cut-off
(:data:`~curation.trees.checks.DEFAULT_NEAR_ZERO`), so the branch is
plainly real-sized to the checks and no longer dominates a sister
contrast, yet short (40,000 years on a tree 40 million years deep), so
the tree changes little (our reasoning)."""


def _contract(tree: TreeArrays, remove: np.ndarray) -> TreeArrays:
    """Remove the nodes marked in ``remove`` (never the root): each kept
    node hangs from its nearest kept ancestor, its branch lengthened by
    the removed branches between them (NaN if any of them is missing)."""
    n = tree.node_count
    keep = ~remove
    keep[0] = True
    parent = tree.parent
    up = np.where(keep, np.arange(n), parent)
    up[0] = 0
    while True:
        moving = ~keep[up]
        if not moving.any():
            break
        up = np.where(moving, up[up], up)
    lengths = tree.edge_length
    removed_lengths = np.where(remove, np.nan_to_num(lengths, nan=0.0), 0.0)
    removed_missing = np.where(remove, np.isnan(lengths), False).astype(np.float64)
    removed_lengths[0] = removed_missing[0] = 0.0
    above = path_sums(parent, removed_lengths)  # removed length from node up to the root
    missing_above = path_sums(parent, removed_missing)
    old_parent = np.where(np.arange(n) > 0, parent, 0)
    new_parent_old = up[old_parent]
    extra = above[old_parent] - above[new_parent_old]
    extra_missing = missing_above[old_parent] - missing_above[new_parent_old]
    moved = new_parent_old != old_parent
    new_lengths = np.where(moved, lengths + extra, lengths)
    new_lengths = np.where(moved & (extra_missing > 0), np.nan, new_lengths)
    kept = np.flatnonzero(keep)
    index = np.full(n, -1, dtype=np.int64)
    index[kept] = np.arange(len(kept))
    new_parent = index[new_parent_old[kept]]
    new_parent[0] = -1
    comments = {int(index[k]): v for k, v in tree.comments.items() if keep[k]}
    decimals = None
    if tree.length_decimals is not None:
        decimals = np.where(moved, -1, tree.length_decimals)[kept].astype(np.int16)
        decimals = np.where(np.isnan(new_lengths[kept]), -1, decimals).astype(np.int16)
    return TreeArrays(
        parent=new_parent,
        edge_length=new_lengths[kept],
        labels=[tree.labels[k] for k in kept],
        rooted=tree.rooted,
        comments=comments,
        length_decimals=decimals,
    )


def _from_children(
    children: list[list[int]],
    lengths: list[float],
    labels: list[str],
    tree: TreeArrays,
    comments: dict[int, list[str]] | None = None,
) -> TreeArrays:
    """Number a tree given as children lists (node 0 the root) in preorder."""
    order: list[int] = []
    parents: list[int] = []
    stack = [(0, -1)]
    while stack:
        node, par = stack.pop()
        order.append(node)
        parents.append(par)
        here = len(order) - 1
        for child in reversed(children[node]):
            stack.append((child, here))
    source_comments = tree.comments if comments is None else comments
    position = {old: new for new, old in enumerate(order)}
    return TreeArrays(
        parent=np.asarray(parents, dtype=np.int64),
        edge_length=np.asarray([lengths[k] for k in order], dtype=np.float64),
        labels=[labels[k] for k in order],
        rooted=tree.rooted,
        comments={position[k]: v for k, v in source_comments.items() if k in position},
    )


def _children_lists(tree: TreeArrays) -> list[list[int]]:
    children: list[list[int]] = [[] for _ in range(tree.node_count)]
    for node, par in enumerate(tree.parent.tolist()):
        if par >= 0:
            children[par].append(node)
    return children


def pruned(tree: TreeArrays, tips: list[str] | set[str]) -> TreeArrays:
    """Return ``tree`` pruned to the tips labelled ``tips``.

    Nodes left with a single child are suppressed and their branch lengths
    summed, so every distance between kept tips is unchanged; the root
    becomes the most recent common ancestor of the kept tips.

    Raises:
        InputError: a label in ``tips`` is not a tip of the tree (all such
            labels are listed), or ``tips`` is empty.
    """
    wanted = set(tips)
    if not wanted:
        raise InputError("no tips to keep were given", field="tips", hint="name the tips to keep")
    labels = tree.labels
    present = {labels[i] for i in tree.tips}
    unknown = sorted(wanted - present)
    if unknown:
        raise InputError(
            f"{len(unknown)} of the tips to keep are not in the tree",
            field="tips",
            problems=[
                Problem(f"{label!r} is not a tip of the tree", value=label) for label in unknown
            ],
            hint="check the spelling against the tree's tip labels",
        )
    names = name_nodes(tree)
    is_tip = tree.is_tip
    kept_tip = np.asarray([labels[i] in wanted for i in tree.tips], dtype=np.int64)
    before = np.concatenate([[0], np.cumsum(kept_tip)])
    below = before[names.tip_start + names.tip_count] - before[names.tip_start]
    retained = below > 0
    retained_children = (
        np.bincount(tree.parent[1:][retained[1:]], minlength=tree.node_count)
        if tree.node_count > 1
        else np.zeros(1, dtype=np.int64)
    )
    unary = retained & ~is_tip & (retained_children == 1)
    remove = ~retained | unary
    root_removed = bool(remove[0])
    result = _contract(tree, remove)
    if root_removed and result.node_count > 1:
        # The old root kept one line of descent: the new root is node 1.
        result = TreeArrays(
            parent=np.where(result.parent[1:] > 0, result.parent[1:] - 1, -1).astype(np.int64),
            edge_length=np.concatenate([[tree.edge_length[0]], result.edge_length[2:]]),
            labels=result.labels[1:],
            rooted=result.rooted,
            comments={k - 1: v for k, v in result.comments.items() if k > 0},
            length_decimals=None
            if result.length_decimals is None
            else np.concatenate([[-1], result.length_decimals[2:]]).astype(np.int16),
        )
    elif root_removed:
        # One tip kept: the tree is that tip alone.
        only = int(np.flatnonzero(retained & is_tip)[0])
        result = TreeArrays(
            parent=np.asarray([-1], dtype=np.int64),
            edge_length=np.asarray([np.nan]),
            labels=[labels[only]],
            rooted=tree.rooted,
        )
    return result


def polytomies_resolved(
    tree: TreeArrays,
    *,
    branch_length: float = 0.0,
    seed: int | None = None,
) -> TreeArrays:
    """Return ``tree`` with every node of more than two children resolved
    into dichotomies joined by new branches of ``branch_length``.

    With ``seed`` None the resolution is deterministic (children joined in
    their written order: ((a,b),c),d ...); with a seed, pairs are joined at
    random, each resolution equally likely to pick any two of the remaining
    lineages (as in a coalescent), reproducibly for a given seed.

    A positive ``branch_length`` is taken from the original children's own
    branches (each loses the new branches above it) where they are long
    enough, so root-to-tip distances stay as they were; a branch too short
    to give it is left as written, and the tips below it end deeper.

    Raises:
        InputError: ``branch_length`` is negative or not finite.
    """
    if not np.isfinite(branch_length) or branch_length < 0:
        raise InputError(
            f"the branch length {branch_length!r} for new branches is not a number >= 0",
            field="branch length",
            hint="give --branch-length 0 or a small positive length",
        )
    rng = np.random.default_rng(seed) if seed is not None else None
    children = _children_lists(tree)
    original = len(children)
    lengths = tree.edge_length.tolist()
    labels = list(tree.labels)
    for node in np.flatnonzero(tree.child_count > 2).tolist():
        pool = list(children[node])
        while len(pool) > 2:
            if rng is None:
                i, j = 0, 1
            else:
                i, j = sorted(rng.choice(len(pool), size=2, replace=False).tolist())
            a, b = pool[i], pool[j]
            rest = [x for k, x in enumerate(pool) if k not in (i, j)]
            new = len(children)
            children.append([a, b])
            labels.append("")
            lengths.append(branch_length)
            pool = [new, *rest] if rng is None else [*rest, new]
        children[node] = pool
        if branch_length > 0:
            # Each original child now lies below some new branches: take
            # their length from its own branch so its depth is unchanged.
            stack = [(child, 0) for child in pool]
            while stack:
                item, above = stack.pop()
                if item >= original:
                    stack.extend((c, above + 1) for c in children[item])
                    continue
                needed = above * branch_length
                if lengths[item] == lengths[item] and lengths[item] >= needed:
                    lengths[item] -= needed
    return _from_children(children, lengths, labels, tree)


def short_branches_collapsed(tree: TreeArrays, threshold: float) -> TreeArrays:
    """Return ``tree`` with every internal branch shorter than ``threshold``
    collapsed (its node removed, its children joined to its parent).

    The collapsed length is added to the children's branches so that
    root-to-tip distances are kept; the result has polytomies where the
    short branches were.

    Raises:
        InputError: ``threshold`` is negative or not finite.
    """
    if not np.isfinite(threshold) or threshold < 0:
        raise InputError(
            f"the threshold {threshold!r} is not a number >= 0",
            field="threshold",
            hint="give --threshold as a branch length, e.g. 1e-6",
        )
    lengths = tree.edge_length
    short = ~tree.is_tip & (lengths < threshold)
    short[0] = False
    return _contract(tree, short)


def made_ultrametric(
    tree: TreeArrays,
    *,
    method: UltrametricMethod = "extend",
    tolerance: float = DEFAULT_TOLERANCE,
    force: bool = False,
) -> TreeArrays:
    """Return ``tree`` made ultrametric.

    Methods:
        ``extend``: lengthen each terminal branch so every tip reaches the
        deepest tip's distance from the root (internal branches untouched).
        ``least_squares``: choose node ages that change the branch lengths
        least in the sum of squares (each branch becomes the difference of
        its end nodes' ages, tips at age 0), solved as one sparse linear
        least-squares problem.

    Raises:
        ConflictError: the deviation is substantive (more than the written
            decimals explain, or more than 1% of the height whatever the
            decimals, see :func:`~curation.trees.checks.measure_ultrametricity`)
            and ``force`` is false; the least-squares fit needs a negative
            branch.
        InputError: an unknown method, a negative tolerance, or missing
            branch lengths.
    """
    check_choice(method, ULTRAMETRIC_METHODS, "method")
    if not np.isfinite(tolerance) or tolerance < 0:
        raise InputError(
            f"the tolerance {tolerance!r} is not a number >= 0",
            field="tolerance",
            hint=f"give --tolerance as a relative spread, e.g. {DEFAULT_TOLERANCE}",
        )
    if np.isnan(tree.edge_length[1:]).any():
        raise InputError(
            "the tree has branches without a length; it cannot be made ultrametric",
            field="branch lengths",
        )
    report = measure_ultrametricity(tree)
    if report["relative_spread"] <= tolerance and report["spread"] == 0:
        return tree
    if report["verdict"] == "substantive" and not force:
        raise ConflictError(
            f"the tree's root-to-tip distances spread by {report['spread']:.6g} "
            f"({report['relative_spread']:.3g} of its height), "
            f"{ultrametric_explanation(report)}; making it ultrametric would change it "
            "substantively",
            field="tree",
            hint="check whether the tree is meant to be time-scaled (fossil tips?); "
            "use --force to make it ultrametric anyway",
        )
    if method == "extend":
        depths = tree.depths()
        lengths = tree.edge_length.copy()
        tips = tree.tips
        lengths[tips] = lengths[tips] + (report["height"] - depths[tips])
        return TreeArrays(
            parent=tree.parent.copy(),
            edge_length=lengths,
            labels=list(tree.labels),
            rooted=tree.rooted,
            comments=dict(tree.comments),
        )
    return _least_squares_ultrametric(tree)


def _least_squares_ultrametric(tree: TreeArrays) -> TreeArrays:
    from scipy.sparse import coo_matrix
    from scipy.sparse.linalg import spsolve

    n = tree.node_count
    internal = np.flatnonzero(~tree.is_tip)
    column = np.full(n, -1, dtype=np.int64)
    column[internal] = np.arange(len(internal))
    edges = np.arange(1, n)
    parents = tree.parent[1:]
    # One row per branch: age(parent) - age(child) should equal its length.
    rows = [edges - 1]
    cols = [column[parents]]
    vals = [np.ones(len(edges))]
    child_internal = column[edges] >= 0
    rows.append((edges - 1)[child_internal])
    cols.append(column[edges][child_internal])
    vals.append(-np.ones(int(child_internal.sum())))
    design = coo_matrix(
        (np.concatenate(vals), (np.concatenate(rows), np.concatenate(cols))),
        shape=(len(edges), len(internal)),
    ).tocsc()
    target = tree.edge_length[1:]
    normal = (design.T @ design).tocsc()
    ages_internal = np.atleast_1d(spsolve(normal, design.T @ target))
    ages = np.zeros(n)
    ages[internal] = ages_internal
    lengths = tree.edge_length.copy()
    lengths[1:] = ages[parents] - ages[edges]
    height = float(ages[0])
    negative = lengths[1:] < -1e-12 * max(abs(height), 1.0)
    if negative.any():
        raise ConflictError(
            f"the least-squares fit needs {int(negative.sum())} negative branch lengths",
            field="method",
            hint="use --method extend, which only lengthens terminal branches",
        )
    lengths[1:] = np.maximum(lengths[1:], 0.0)
    return TreeArrays(
        parent=tree.parent.copy(),
        edge_length=lengths,
        labels=list(tree.labels),
        rooted=tree.rooted,
        comments=dict(tree.comments),
    )


def zero_tips_lengthened(
    tree: TreeArrays,
    length: float | None = None,
    *,
    near_zero: float = DEFAULT_NEAR_ZERO,
    keep_depths: bool = True,
) -> TreeArrays:
    """Return ``tree`` with every zero or near-zero terminal branch (see
    :func:`~curation.trees.checks.near_zero_branches`) made ``length`` long;
    other tips are left as they are. Without ``length`` it is
    :data:`DEFAULT_TIP_LENGTH_SHARE` of the tree's height. A tree without
    such a branch is returned as it is.

    With ``keep_depths`` (the default) every root-to-tip distance is kept,
    so an ultrametric tree stays ultrametric: the parent of the short tips
    moves towards the root by the length they need (its own branch gives
    it, every child branch of the parent takes it). Where the parent's
    branch cannot give it without becoming near zero itself (or the
    parent is the root), the tip's branch is lengthened alone and the tip
    ends further from the root. Without ``keep_depths`` every short tip
    is lengthened alone.

    Raises:
        InputError: ``length`` is not a number > 0, or is itself near zero
            for this tree (below the near-zero cut-off); ``near_zero`` is
            not a share in [0, 1); the tree has height 0 and no ``length``
            is given.
    """
    if length is not None and (not np.isfinite(length) or length <= 0):
        raise InputError(
            f"the new length {length!r} is not a number > 0",
            field="length",
            hint="give --length as a branch length in the tree's units, e.g. 0.01",
        )
    validate_near_zero(near_zero)
    n = tree.node_count
    if n <= 1:
        return tree
    lengths = tree.edge_length
    height = float(tree.depths()[tree.tips].max())
    cutoff = near_zero_cutoff(height, near_zero)
    target = DEFAULT_TIP_LENGTH_SHARE * height if length is None else float(length)
    if target <= 0:
        raise InputError(
            "the tree has height 0, so a length relative to its height is 0",
            field="length",
            hint="give --length as a branch length in the tree's units",
        )
    if target < cutoff:
        raise InputError(
            f"the new length {target:.3g} is itself near zero for this tree: shorter than "
            f"{near_zero:g} of its height {height:.6g} ({cutoff:.3g})",
            field="length",
            hint="give a longer --length, or a smaller --near-zero share",
        )
    short = tree.is_tip & near_zero_branches(lengths, height, near_zero) & (lengths < target)
    short[0] = False
    if not short.any():
        return tree
    parent = tree.parent
    new = lengths.copy()
    shortened = np.flatnonzero(short)
    if keep_depths:
        # What each parent must give: the most any of its short tips needs.
        give = np.zeros(n)
        np.maximum.at(give, parent[shortened], target - lengths[shortened])
        left = lengths - give
        movable = (
            (np.arange(n) > 0)
            & (give > 0)
            & (left > 0)
            & ~near_zero_branches(left, height, near_zero)
        )
        new = np.where(movable, left, new)
        shift = np.zeros(n)
        shift[1:] = np.where(movable[parent[1:]], give[parent[1:]], 0.0)
        new = new + shift
        alone = shortened[~movable[parent[shortened]]]
    else:
        alone = shortened
    new[alone] = target
    return TreeArrays(
        parent=parent.copy(),
        edge_length=new,
        labels=list(tree.labels),
        rooted=tree.rooted,
        comments=dict(tree.comments),
        length_decimals=None,
    )


def children_sorted(tree: TreeArrays) -> TreeArrays:
    """Return ``tree`` with the children of every node in a fixed order:
    fewer tips first, ties broken by the smallest tip label below each
    child. The order depends on labels and shape only, so two files of the
    same tree give the same Newick text."""
    if tree.node_count <= 1:
        return tree
    names = name_nodes(tree)
    rank = {label: r for r, label in enumerate(sorted({tree.labels[i] for i in tree.tips}))}
    smallest = np.asarray([rank[tree.labels[i]] for i in names.first], dtype=np.int64)
    nodes = np.arange(1, tree.node_count)
    order = np.lexsort((nodes, smallest[nodes], names.tip_count[nodes], tree.parent[nodes]))
    children: list[list[int]] = [[] for _ in range(tree.node_count)]
    for node in nodes[order].tolist():
        children[int(tree.parent[node])].append(node)
    return _from_children(children, tree.edge_length.tolist(), list(tree.labels), tree)
