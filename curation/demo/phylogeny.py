"""Simulated time trees for the demo scenario and the benchmarks.

A tree is held as node heights (ages, 0 at the present) and a parent
array, so that the defects the scenario plants are simple edits that keep
the tree ultrametric: collapsing a branch (a polytomy), raising a node to
its parent's height (a zero-length internal branch), lowering a cherry to
the present (two zero-length terminal branches). Branch lengths are the
differences of heights; rounding them when written gives the
rounding-level deviation from ultrametricity that real files carry.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

__all__ = [
    "TimeTree",
    "children_lists",
    "collapse_branch",
    "simulate_pure_birth",
    "write_newick_body",
]


@dataclass
class TimeTree:
    """A rooted time tree as arrays over nodes (node 0 is the root).

    Attributes:
        parent: parent of each node, -1 for the root and for removed nodes.
        height: age of each node (0 at the present).
        group: clade index of each node below the cut that defines genera
            (-1 above it).
        alive: False for nodes removed by collapsing their branch.
        labels: tip labels by node ('' for internal nodes).
    """

    parent: np.ndarray
    height: np.ndarray
    group: np.ndarray
    alive: np.ndarray
    labels: list[str] = field(default_factory=list)

    def copy(self) -> TimeTree:
        """Return an independent copy."""
        return TimeTree(
            self.parent.copy(),
            self.height.copy(),
            self.group.copy(),
            self.alive.copy(),
            list(self.labels),
        )

    def tips(self) -> np.ndarray:
        """Indices of the living tips (nodes with no living child)."""
        counts = np.bincount(
            self.parent[self.alive & (self.parent >= 0)], minlength=len(self.parent)
        )
        return np.flatnonzero(self.alive & (counts == 0))


def simulate_pure_birth(
    n_tips: int, rng: np.random.Generator, *, root_age: float = 40.0, groups: int = 1
) -> TimeTree:
    """Simulate a pure-birth (Yule) tree of ``n_tips`` tips scaled to
    ``root_age``, forward in time: with k lineages the next split comes
    after an exponential wait of mean 1/k and takes a lineage at random
    (Yule 1925). The ``groups`` lineages alive when there are that many
    define clades, used as genera.

    Returns:
        A :class:`TimeTree` with ``2 * n_tips - 1`` nodes.
    """
    if n_tips < 2:
        height = np.zeros(1)
        return TimeTree(np.array([-1]), height, np.zeros(1, np.int64), np.ones(1, bool), [""])
    total = 2 * n_tips - 1
    parent = np.full(total, -1, dtype=np.int64)
    time = np.zeros(total)
    group = np.full(total, -1, dtype=np.int64)
    groups = max(1, min(groups, n_tips))
    waits = rng.exponential(size=n_tips)
    picks = rng.random(size=n_tips)
    open_nodes = [1, 2]
    parent[1] = parent[2] = 0
    created = 3
    t = 0.0
    if groups == 1:
        group[:] = 0
    elif groups == 2:
        group[1], group[2] = 0, 1
    step = 0
    while len(open_nodes) < n_tips:
        k = len(open_nodes)
        t += waits[step] / k
        i = int(picks[step] * k)
        step += 1
        node = open_nodes[i]
        time[node] = t
        a, b = created, created + 1
        created += 2
        parent[a] = parent[b] = node
        group[a] = group[b] = group[node]
        open_nodes[i] = a
        open_nodes.append(b)
        if len(open_nodes) == groups:
            for index, lineage in enumerate(open_nodes):
                group[lineage] = index
    end = t + waits[step] / n_tips
    time[open_nodes] = end
    height = (end - time) * (root_age / end)
    height[open_nodes] = 0.0
    return TimeTree(parent, height, group, np.ones(total, bool), [""] * total)


def children_lists(tree: TimeTree) -> list[list[int]]:
    """Children of every node (living nodes only), in node order."""
    nodes = np.flatnonzero(tree.alive & (tree.parent >= 0))
    parents = tree.parent[nodes]
    order = np.argsort(parents, kind="stable")
    starts = np.searchsorted(parents[order], np.arange(len(tree.parent) + 1))
    grouped = nodes[order].tolist()
    bounds = starts.tolist()
    return [grouped[bounds[i] : bounds[i + 1]] for i in range(len(tree.parent))]


def collapse_branch(tree: TimeTree, node: int) -> None:
    """Remove internal ``node``: its children join its parent (a polytomy).
    Heights are unchanged, so the tree stays ultrametric."""
    up = tree.parent[node]
    tree.parent[tree.parent == node] = up
    tree.alive[node] = False
    tree.parent[node] = -1


def write_newick_body(
    tree: TimeTree,
    *,
    decimals: int,
    names: dict[int, str] | None = None,
    comments: dict[int, str] | None = None,
) -> tuple[str, dict[int, tuple[int, int]]]:
    """Write the tree as Newick text (without the final ';').

    Args:
        decimals: digits after the point for branch lengths.
        names: text written for each tip (defaults to its label).
        comments: a bracketed comment written after a node's label.

    Returns:
        The text and, for every internal node, the first tip of its first
        child and the first tip of its last child: two tips whose most
        recent common ancestor it is, a stable name for the node.
    """
    children = children_lists(tree)
    names = names or {}
    comments = comments or {}
    # Lengths formatted once, from Python floats (much faster than NumPy
    # scalars one by one); the root has none.
    up = tree.parent.tolist()
    heights = tree.height.tolist()
    length_text = [
        f":{heights[p] - h:.{decimals}f}" if p >= 0 else ""
        for p, h in zip(up, heights, strict=True)
    ]
    parts: list[str] = []
    first_tip: dict[int, int] = {}
    pairs: dict[int, tuple[int, int]] = {}
    stack: list[tuple[int, int]] = [(0, 0)]
    while stack:
        node, state = stack.pop()
        kids = children[node]
        if kids and state == 0:
            parts.append("(")
            stack.append((node, 1))
            stack.append((kids[0], 0))
            continue
        if kids and state < len(kids):
            parts.append(",")
            stack.append((node, state + 1))
            stack.append((kids[state], 0))
            continue
        if kids:
            parts.append(")")
            first_tip[node] = first_tip[kids[0]]
            pairs[node] = (first_tip[kids[0]], first_tip[kids[-1]])
        else:
            first_tip[node] = node
            parts.append(names.get(node, tree.labels[node]))
        if node in comments:
            parts.append(comments[node])
        parts.append(length_text[node])
    return "".join(parts), pairs
