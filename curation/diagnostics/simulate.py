"""Seeded random trees and Brownian traits, for tests and benchmarks.

Trees come from a coalescent-style random joining of lineages (Kingman
1982: waiting times exponential with rate k(k-1)/2 while k lineages
remain), which gives ultrametric binary trees; options make polytomies
(collapsing random internal branches) and non-ultrametric trees (tips
lengthened at random). Labels are invented (``sp00001`` ...). Everything is
vectorised apart from the joining loop itself, so 100,000 tips take well
under a second.
"""

from __future__ import annotations

import numpy as np

from curation.diagnostics.pruning import nearest_kept_ancestor, subtree_sums
from curation.trees.arrays import TreeArrays, path_sums

__all__ = ["random_tree", "caterpillar_tree", "simulate_brownian", "to_preorder"]


def random_tree(
    tips: int,
    rng: np.random.Generator,
    *,
    collapse: float = 0.0,
    tip_noise: float = 0.0,
) -> TreeArrays:
    """Return a random rooted tree with ``tips`` tips, nodes in preorder.

    Args:
        collapse: probability that each internal branch is collapsed (its
            children join the parent), making polytomies.
        tip_noise: each terminal branch is lengthened by a uniform amount up
            to this fraction of the tree height (0 keeps it ultrametric).
    """
    if tips < 2:
        raise ValueError("a random tree needs at least two tips")
    total = 2 * tips - 1
    parent = np.full(total, -1, dtype=np.int64)
    height = np.zeros(total)
    lineages = list(range(tips))
    waits = rng.exponential(size=tips - 1)
    picks = rng.random((tips - 1, 2))
    now = 0.0
    for step in range(tips - 1):
        k = len(lineages)
        now += waits[step] / (k * (k - 1) / 2)
        i = int(picks[step, 0] * k)
        j = int(picks[step, 1] * (k - 1))
        j = j + 1 if j >= i else j
        a, b = lineages[i], lineages[j]
        node = tips + step
        parent[a] = node
        parent[b] = node
        height[node] = now
        lineages[min(i, j)] = node
        lineages.pop(max(i, j))
    # Reverse the numbering: the root (made last) becomes 0 and every
    # parent precedes its children.
    order = np.arange(total - 1, -1, -1)
    new_index = np.empty(total, dtype=np.int64)
    new_index[order] = np.arange(total)
    par = np.where(parent[order] >= 0, new_index[np.maximum(parent[order], 0)], -1)
    hgt = height[order]
    is_tip = order < tips
    labels = [f"sp{int(o) + 1:05d}" if o < tips else "" for o in order]
    keep = np.ones(total, dtype=bool)
    if collapse > 0:
        internal = ~is_tip
        internal[0] = False
        keep &= ~(internal & (rng.random(total) < collapse))
    up = nearest_kept_ancestor(par, keep)
    nodes = np.flatnonzero(keep)
    renumber = np.full(total, -1, dtype=np.int64)
    renumber[nodes] = np.arange(len(nodes))
    par2 = np.where(nodes == 0, -1, renumber[np.maximum(up[nodes], 0)])
    hgt2 = hgt[nodes]
    length = np.where(par2 >= 0, hgt2[np.maximum(par2, 0)] - hgt2, np.nan)
    tip2 = is_tip[nodes]
    if tip_noise > 0:
        length = np.where(tip2, length + rng.uniform(0, tip_noise * hgt[0], len(nodes)), length)
    return to_preorder(par2, length, [labels[i] for i in nodes])


def caterpillar_tree(tips: int) -> TreeArrays:
    """Return the fully unbalanced (caterpillar) ultrametric tree of height
    ``tips - 1``: the deepest case for any level-by-level method."""
    internal = tips - 1
    total = 2 * tips - 1
    parent = np.full(total, -1, dtype=np.int64)
    # Internal nodes 0..internal-1 form a chain; tip i hangs from node i
    # (the last internal node carries two tips).
    parent[1:internal] = np.arange(internal - 1)
    tip_parent = np.r_[np.arange(internal), internal - 1]
    parent[internal:] = tip_parent
    node_height = np.r_[np.arange(internal, 0, -1, dtype=float), np.zeros(tips)]
    length = np.where(parent >= 0, node_height[np.maximum(parent, 0)] - node_height, np.nan)
    labels = [""] * internal + [f"sp{i + 1:05d}" for i in range(tips)]
    return to_preorder(parent, length, labels)


def to_preorder(parent: np.ndarray, length: np.ndarray, labels: list[str]) -> TreeArrays:
    """Renumber a tree (root 0, parents before children) into depth-first
    preorder, children in index order, as :class:`TreeArrays` holds it."""
    n = len(parent)
    size = subtree_sums(parent, np.ones(n))
    child = np.arange(1, n)
    order = np.lexsort((child, parent[child]))
    sorted_child = child[order]
    sorted_parent = parent[sorted_child]
    sizes = size[sorted_child]
    cumulative = np.cumsum(sizes) - sizes
    first = np.r_[True, sorted_parent[1:] != sorted_parent[:-1]]
    group_start = np.maximum.accumulate(np.where(first, np.arange(len(first)), 0))
    earlier = cumulative - cumulative[group_start]
    step = np.zeros(n)
    step[sorted_child] = 1.0 + earlier
    position = np.rint(path_sums(parent, step)).astype(np.int64)
    new_parent = np.full(n, -1, dtype=np.int64)
    new_parent[position[1:]] = position[parent[1:]]
    new_length = np.empty(n)
    new_length[position] = length
    new_labels = [""] * n
    for old, new in enumerate(position):
        new_labels[new] = labels[old]
    return TreeArrays(parent=new_parent, edge_length=new_length, labels=new_labels, rooted=True)


def simulate_brownian(
    arrays: TreeArrays,
    rng: np.random.Generator,
    *,
    rate: float = 1.0,
    lam: float = 1.0,
    columns: int = 1,
    root: float = 0.0,
) -> np.ndarray:
    """Simulate Brownian motion (with Pagel's lambda applied to the tree)
    down ``arrays``; return values at the tips, one row per tip in
    :attr:`TreeArrays.tips` order and ``columns`` columns (or a vector when
    ``columns`` is 1).

    Each node's value is the root value plus the sum of independent normal
    increments on the branches above it (variance rate x length), summed in
    linear time by path sums.
    """
    n = arrays.node_count
    length = np.nan_to_num(arrays.edge_length, nan=0.0).copy()
    length[0] = 0.0
    is_tip = arrays.is_tip
    depth = path_sums(arrays.parent, length)
    parent_depth = depth[np.maximum(arrays.parent, 0)]
    scaled = np.where(is_tip, length + (1 - lam) * parent_depth, lam * length)
    scaled[0] = 0.0
    noise = rng.normal(size=(n, columns)) * np.sqrt(rate * scaled)[:, None]
    values = np.stack([path_sums(arrays.parent, noise[:, j]) for j in range(columns)], axis=1)
    values = values[arrays.tips] + root
    return values[:, 0] if columns == 1 else values
