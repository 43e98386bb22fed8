"""Stable names for the nodes of a tree, and the subtree ranges that most
checks and repairs are built on.

A node index changes whenever a tree is re-read with its children in
another order, so a finding about a node names it instead by two tips whose
most recent common ancestor it is, and by how many tips descend from it:
``node Aus_bus + Cus_dus (12 tips)``. The two tips are chosen from the tips'
labels alone (the smallest label below the node, and the largest of its
children's smallest labels), so the name does not depend on child order and
survives sorting, reordering and a Newick round trip. The two tips lie below
different children, hence their most recent common ancestor is the node.

Everything here is vectorised NumPy over the preorder arrays of
:class:`~curation.trees.arrays.TreeArrays`: in preorder the descendants of
a node are the contiguous block of indices ``[node, end)``, and the tips
below it a contiguous block of the tips in preorder.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from curation.trees.arrays import TreeArrays

__all__ = ["NodeNames", "name_nodes", "subtree_ends", "node_subject"]


def subtree_ends(parent: np.ndarray) -> np.ndarray:
    """Return, for each node of a preorder parent array, one past the last
    index of its subtree: its descendants are ``range(node, end[node])``.

    The end of a node's subtree is its next sibling, or else the end of its
    parent's subtree. Following parents up to the first node that has a
    next sibling is done by pointer jumping, O(n log height) vectorised.
    """
    n = len(parent)
    if n == 0:
        return np.zeros(0, dtype=np.int64)
    # Siblings are in increasing index order in preorder; a stable sort by
    # parent puts each node just before its next sibling.
    order = np.argsort(parent, kind="stable")
    next_sibling = np.full(n, -1, dtype=np.int64)
    same = parent[order[1:]] == parent[order[:-1]]
    next_sibling[order[:-1][same]] = order[1:][same]
    has_next = next_sibling >= 0
    target = np.where(has_next, np.arange(n), parent)
    target[0] = 0
    settled = has_next | (np.arange(n) == 0)
    while True:
        moving = ~settled[target]
        if not moving.any():
            break
        target = np.where(moving, target[target], target)
    ends = np.where(has_next[target], next_sibling[target], n)
    return ends.astype(np.int64)


@dataclass(frozen=True)
class NodeNames:
    """Stable names of every node of one tree (see the module notes).

    Attributes:
        first: preorder index of the tip with the smallest label below each
            node (the node itself for a tip).
        second: preorder index of the second naming tip (the node itself
            for a tip; the largest of the children's ``first`` tips otherwise).
        tip_count: number of tips below each node (1 for a tip).
        ends: one past the last preorder index of each node's subtree.
        tip_start: for each node, the position of its first tip among the
            tips in preorder; its tips are ``tips[tip_start:tip_start+tip_count]``.
    """

    first: np.ndarray
    second: np.ndarray
    tip_count: np.ndarray
    ends: np.ndarray
    tip_start: np.ndarray
    is_tip: np.ndarray
    labels: list[str]

    def subject(self, node: int) -> str:
        """Return the stable subject string of ``node``."""
        return node_subject(
            self.labels[self.first[node]],
            self.labels[self.second[node]],
            int(self.tip_count[node]),
            is_tip=bool(self.is_tip[node]),
        )

    def subjects(self, nodes: np.ndarray) -> list[str]:
        """Return the subject strings of several nodes."""
        return [self.subject(int(i)) for i in nodes]

    def tips_of(self, node: int) -> tuple[str, str]:
        """Return the labels of the two tips that name ``node``."""
        return self.labels[self.first[node]], self.labels[self.second[node]]


def node_subject(first: str, second: str, tip_count: int, *, is_tip: bool = False) -> str:
    """Return how a finding names a node: ``tip 'A'`` for a tip, else
    ``node 'A' + 'B' (k tips)`` (``node 'A' (1 tip)`` for an internal node
    above a single tip)."""
    if is_tip:
        return f"tip {first!r}"
    if tip_count == 1:
        return f"node {first!r} (1 tip)"
    return f"node {first!r} + {second!r} ({tip_count} tips)"


def _range_minimum(values: np.ndarray, starts: np.ndarray, stops: np.ndarray) -> np.ndarray:
    """Minimum of ``values[starts[k]:stops[k]]`` for every k (non-empty
    ranges), by a sparse table: O(n log n) vectorised, O(1) per query."""
    table = [values]
    width = 1
    while 2 * width <= len(values):
        previous = table[-1]
        table.append(np.minimum(previous[:-width], previous[width:]))
        width *= 2
    lengths = stops - starts
    level = np.floor(np.log2(np.maximum(lengths, 1))).astype(np.int64)
    out = np.empty(len(starts), dtype=values.dtype)
    for k in np.unique(level):
        pick = level == k
        row = table[k]
        a = starts[pick]
        b = stops[pick] - (1 << int(k))
        out[pick] = np.minimum(row[a], row[b])
    return out


def name_nodes(tree: TreeArrays) -> NodeNames:
    """Compute the stable name of every node of ``tree``.

    Returns:
        :class:`NodeNames`; ties between equal tip labels (a defect the
        checks report) are broken by position.
    """
    n = tree.node_count
    parent = tree.parent
    ends = subtree_ends(parent)
    is_tip = tree.is_tip
    tips = np.flatnonzero(is_tip)
    tip_before = np.concatenate([[0], np.cumsum(is_tip)])  # tips among nodes < k
    tip_start = tip_before[np.arange(n)]
    tip_count = tip_before[ends] - tip_start
    # Rank tips by label (stable for ties) and take range minima over the
    # contiguous block of tips below each node.
    tip_labels = np.asarray([tree.labels[i] for i in tips], dtype=object)
    order = np.argsort(tip_labels, kind="stable")
    rank = np.empty(len(tips), dtype=np.int64)
    rank[order] = np.arange(len(tips))
    min_rank = _range_minimum(rank, tip_start, tip_start + tip_count)
    first = tips[order[min_rank]]
    second_rank = min_rank.copy()
    if n > 1:
        largest = np.full(n, -1, dtype=np.int64)
        np.maximum.at(largest, parent[1:], min_rank[1:])
        second_rank = np.where(is_tip, min_rank, largest)
    second = tips[order[second_rank]]
    return NodeNames(
        first=first,
        second=second,
        tip_count=tip_count.astype(np.int64),
        ends=ends,
        tip_start=tip_start.astype(np.int64),
        is_tip=is_tip,
        labels=tree.labels,
    )
