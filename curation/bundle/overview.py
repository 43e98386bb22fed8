"""An overview of a tree too large to draw tip by tip: the tree cut down to
at most a few hundred clades, each standing for all the tips below it.

The largest clade is opened (replaced by its children) again and again,
passing over any clade whose opening would exceed the limit, so the big
clades are split and the small ones stay whole. Every tip of the tree lies below exactly one
shown clade; each shown clade carries how many of its tips have trait data
and how many a written name reaches, and is named as findings name nodes
(two tips and the tip count, :mod:`curation.trees.nodes`).
"""

from __future__ import annotations

import heapq
from dataclasses import dataclass

import numpy as np
import pandas as pd

from curation.trees.arrays import TreeArrays
from curation.trees.nodes import name_nodes

__all__ = ["TreeOverview", "overview_tree"]


@dataclass(frozen=True)
class TreeOverview:
    """A tree cut down to its shown clades (see the module notes).

    Attributes:
        tree: the opened nodes and the shown clades, in preorder, with their
            branch lengths; the shown clades are its tips.
        original: for each node of ``tree``, its index in the full tree.
        tips: tips of the full tree below each node.
        with_data: of those, the tips with trait data.
        named: of those, the tips a written name reaches.
        reach: the largest root distance of a tip below each node (where
            a clade's wedge ends).
        subjects: the stable name of each node of ``tree``.
    """

    tree: TreeArrays
    original: np.ndarray
    tips: np.ndarray
    with_data: np.ndarray
    named: np.ndarray
    reach: np.ndarray
    subjects: list[str]


def _children(parent: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Children of every node as (order, starts): node k's children are
    ``order[starts[k]:starts[k + 1]]``, in preorder."""
    n = len(parent)
    order = np.argsort(parent[1:], kind="stable") + 1
    starts = np.searchsorted(parent[order], np.arange(n + 1))
    return order, starts


def _opened(tree: TreeArrays, tip_count: np.ndarray, limit: int) -> np.ndarray:
    """Mask of the nodes opened: largest clade first, while the number of
    shown clades stays within ``limit``."""
    order, starts = _children(tree.parent)
    is_tip = tree.is_tip
    opened = np.zeros(tree.node_count, dtype=bool)
    shown = 1
    # A heap of closed internal clades, the largest first (ties: preorder).
    heap = [(-int(tip_count[0]), 0)] if not is_tip[0] else []
    while heap:
        _, node = heapq.heappop(heap)
        kids = order[starts[node] : starts[node + 1]]
        if shown - 1 + len(kids) > limit:
            continue  # a smaller clade may still fit
        opened[node] = True
        shown += len(kids) - 1
        for kid in kids:
            if not is_tip[kid]:
                heapq.heappush(heap, (-int(tip_count[kid]), int(kid)))
    return opened


def overview_tree(
    tree: TreeArrays, with_data: set[str], named: set[str], *, limit: int = 150
) -> TreeOverview:
    """Cut ``tree`` down to at most ``limit`` shown clades (the whole tree
    as one clade when even the root has more children than that).

    Returns:
        :class:`TreeOverview`.
    """
    names = name_nodes(tree)
    labels = np.asarray(tree.labels, dtype=object)
    is_tip = tree.is_tip

    def below(mark: np.ndarray) -> np.ndarray:
        # Tips below each node with a property: a difference of cumulative
        # sums over the contiguous preorder block of each subtree.
        before = np.concatenate([[0], np.cumsum(mark)])
        return before[names.ends] - before[np.arange(tree.node_count)]

    # Hashed look-ups (numpy's isin compares objects pairwise).
    has_data = is_tip & pd.Series(labels).isin(with_data).to_numpy()
    reached = is_tip & pd.Series(labels).isin(named).to_numpy()
    opened = _opened(tree, names.tip_count, max(limit, 1))
    parent = tree.parent
    keep = opened.copy()
    keep[0] = True
    keep[1:] |= opened[parent[1:]]  # the children of opened nodes are shown
    original = np.flatnonzero(keep)
    position = np.full(tree.node_count, -1, dtype=np.int64)
    position[original] = np.arange(len(original))
    new_parent = position[parent[original]]
    new_parent[0] = -1  # the root (its parent index -1 read the last entry)
    depths = tree.depths()
    reach = np.array([depths[node : names.ends[node]].max() for node in original], dtype=float)
    small = TreeArrays(
        new_parent,
        np.asarray(tree.edge_length, dtype=float)[original],
        [str(labels[i]) if is_tip[i] else "" for i in original],
        tree.rooted,
    )
    return TreeOverview(
        tree=small,
        original=original,
        tips=names.tip_count[original],
        with_data=below(has_data)[original],
        named=below(reached)[original],
        reach=reach,
        subjects=names.subjects(original),
    )
