"""Invented trees, from a seed: the one home of the random trees that the
demo scenario, the benchmarks and the tests use.

Two forms:

- :class:`TimeTree`: node heights (ages, 0 at the present) and a parent
  array, so that the defects the demo scenario plants are simple edits
  that keep the tree ultrametric: collapsing a branch (a polytomy),
  raising a node to its parent's height (a zero-length internal branch),
  lowering a cherry to the present (two zero-length terminal branches).
  Branch lengths are the differences of heights; rounding them when
  written gives the rounding-level deviation from ultrametricity that real
  files carry. :func:`simulate_pure_birth` makes one,
  :func:`perturbed_copy` a posterior-like copy, :func:`time_tree_arrays`
  turns one into the array view.
- :class:`~curation.trees.arrays.TreeArrays`, the array view the library
  reads: :func:`random_tree` (pure-birth or coalescent, with polytomies,
  uneven tips and zero-length tips on request) and
  :func:`caterpillar_tree`.

Text is written by the library's one Newick writer,
:func:`curation.trees.arrays.to_newick`, with lengths at a fixed number of
decimals as the demo files carry them: :func:`generate_tree` and
:func:`generate_tree_set` give benchmark-sized Newick and NEXUS text.
:func:`simulate_brownian` evolves trait values down a tree. Labels come
from :mod:`curation.demo.naming` or are plain numbers (``sp00001``).
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Literal, get_args

import numpy as np

from curation.demo.naming import BENCH_SEED, invent_tip_labels
from curation.errors import InputError, check_choice
from curation.trees.arrays import TreeArrays, path_sums, to_newick

__all__ = [
    "TREE_MODELS",
    "TimeTree",
    "TreeModel",
    "caterpillar_tree",
    "children_lists",
    "collapse_branch",
    "generate_tree",
    "generate_tree_set",
    "nexus_text",
    "nexus_token",
    "numbered_tips",
    "perturbed_copy",
    "random_tree",
    "simulate_brownian",
    "simulate_pure_birth",
    "time_tree_arrays",
    "to_preorder",
]

TreeModel = Literal["coalescent", "pure_birth"]
TREE_MODELS: tuple[str, ...] = get_args(TreeModel)


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
        A :class:`TimeTree` with ``2 * n_tips - 1`` nodes, every parent
        numbered before its children.
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


def perturbed_copy(base: TimeTree, rng: np.random.Generator, swaps: int, jitter: float) -> TimeTree:
    """A copy of ``base`` as an MCMC sample might hold it: ``swaps``
    nearest-neighbour interchanges and node ages jittered by a lognormal
    factor of sd ``jitter``; still ultrametric."""
    tree = base.copy()
    for _ in range(swaps):
        # Nearest-neighbour interchange, kept only where the heights allow it.
        node = int(rng.integers(1, len(tree.parent)))
        children = children_lists(tree)
        up = int(tree.parent[node])
        if not children[node] or up < 0:
            continue
        siblings = [c for c in children[up] if c != node]
        moved = children[node][int(rng.integers(len(children[node])))]
        sibling = siblings[0]
        if tree.height[sibling] < tree.height[node]:
            tree.parent[moved], tree.parent[sibling] = up, node
    # Jitter the ages: scale each node's gap above its oldest child, from
    # the present backwards. Ascending age is a valid order for that (every
    # child is younger than its parent); node numbers are not, once
    # interchanges have moved subtrees.
    children = children_lists(tree)
    old = tree.height.tolist()
    new = list(old)
    internal = [n for n in np.argsort(tree.height, kind="stable").tolist() if children[n]]
    factors = rng.lognormal(0.0, jitter, size=len(internal)).tolist()
    for node, factor in zip(internal, factors, strict=True):
        kids = children[node]
        oldest = max(old[c] for c in kids)
        new[node] = max(new[c] for c in kids) + (old[node] - oldest) * factor
    tree.height = np.asarray(new)
    return tree


def to_preorder(
    parent: np.ndarray,
    length: np.ndarray,
    labels: list[str],
    comments: dict[int, list[str]] | None = None,
) -> TreeArrays:
    """Renumber a tree into depth-first preorder, children in index order,
    as :class:`TreeArrays` holds it.

    Args:
        parent: parent of each node, -1 for the root, which is node 0;
            parents may come after their children.
        length: branch length above each node (NaN for none).
        labels: label of each node.
        comments: bracketed comments by node.

    Returns:
        A rooted :class:`TreeArrays`.
    """
    # Imported here: the diagnostics stage is not loaded when the demo
    # scenario is written.
    from curation.diagnostics.pruning import subtree_sums

    n = len(parent)
    notes = dict(comments or {})
    if n > 1 and (parent[1:] >= np.arange(1, n)).any():
        # Number parents before children first (by depth, which keeps
        # siblings in index order), as the subtree sums need.
        by_depth = np.argsort(path_sums(parent, np.ones(n)), kind="stable")
        new_index = np.empty(n, dtype=np.int64)
        new_index[by_depth] = np.arange(n)
        parent = np.where(parent[by_depth] >= 0, new_index[np.maximum(parent[by_depth], 0)], -1)
        length = length[by_depth]
        labels = [labels[i] for i in by_depth.tolist()]
        notes = {int(new_index[k]): v for k, v in notes.items()}
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
    for old, new in enumerate(position.tolist()):
        new_labels[new] = labels[old]
    return TreeArrays(
        parent=new_parent,
        edge_length=new_length,
        labels=new_labels,
        rooted=True,
        comments={int(position[k]): v for k, v in notes.items()},
    )


def time_tree_arrays(
    tree: TimeTree,
    *,
    labels: dict[int, str] | None = None,
    comments: dict[int, str] | None = None,
) -> TreeArrays:
    """Return the living nodes of ``tree`` as a rooted :class:`TreeArrays`,
    children in node order; each branch's length is the difference of the
    heights at its ends (the root has none).

    Args:
        labels: a label for some nodes instead of their own (the numbers
            of a TRANSLATE table).
        comments: a bracketed comment for some nodes, written after their
            label by ``to_newick(..., comments=True)``.
    """
    nodes = np.flatnonzero(tree.alive)
    index = np.full(len(tree.parent), -1, dtype=np.int64)
    index[nodes] = np.arange(len(nodes))
    up = tree.parent[nodes]
    parent = np.where(up >= 0, index[np.maximum(up, 0)], -1)
    length = np.where(up >= 0, tree.height[np.maximum(up, 0)] - tree.height[nodes], np.nan)
    names = labels or {}
    text = [names.get(node, tree.labels[node]) for node in nodes.tolist()]
    notes = {
        int(index[node]): [note] for node, note in (comments or {}).items() if tree.alive[node]
    }
    return to_preorder(parent, length, text, notes)


def _coalescent(tips: int, rng: np.random.Generator) -> tuple[np.ndarray, np.ndarray, list[str]]:
    """Parent array, heights and labels of a coalescent tree, root 0 and
    parents before children: lineages joined at random, the waiting time
    exponential with rate k(k-1)/2 while k lineages remain (Kingman 1982)."""
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
    labels = [f"sp{int(o) + 1:05d}" if o < tips else "" for o in order]
    return par, height[order], labels


def _pure_birth(tips: int, rng: np.random.Generator) -> tuple[np.ndarray, np.ndarray, list[str]]:
    """Parent array, heights and labels of a pure-birth tree of root age 1
    (see :func:`simulate_pure_birth`); tips numbered in node order."""
    tree = simulate_pure_birth(tips, rng, root_age=1.0)
    labels = list(tree.labels)
    for number, node in enumerate(tree.tips().tolist(), start=1):
        labels[node] = f"sp{number:05d}"
    return tree.parent, tree.height, labels


def random_tree(
    tips: int,
    rng: np.random.Generator,
    *,
    model: TreeModel = "coalescent",
    collapse: float = 0.0,
    tip_noise: float = 0.0,
    zero_tips: float = 0.0,
) -> TreeArrays:
    """Return a random rooted tree with ``tips`` tips (labelled ``sp00001``
    ...), nodes in preorder. Everything is vectorised apart from the
    joining or splitting loop itself, so 100,000 tips take about a second.

    Args:
        model: 'coalescent' (random joining of lineages, Kingman 1982) or
            'pure_birth' (random splitting, Yule 1925, root age 1); both
            give ultrametric binary trees.
        collapse: probability that each internal branch is collapsed (its
            children join the parent), making polytomies.
        tip_noise: each terminal branch is lengthened by a uniform amount up
            to this fraction of the tree height (0 keeps it ultrametric).
        zero_tips: probability that each terminal branch gets length 0.

    Raises:
        InputError: fewer than two tips, or another ``model``.
    """
    # Imported here: the diagnostics stage is not loaded when the demo
    # scenario is written.
    from curation.diagnostics.pruning import nearest_kept_ancestor

    check_choice(model, TREE_MODELS, "model")
    if tips < 2:
        raise InputError(
            f"a random tree needs at least two tips, not {tips}",
            field="tips",
            hint="give tips=2 or more",
        )
    par, hgt, labels = (_coalescent if model == "coalescent" else _pure_birth)(tips, rng)
    total = len(par)
    is_tip = np.bincount(par[par >= 0], minlength=total) == 0
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
    if zero_tips > 0:
        length = np.where(tip2 & (rng.random(len(nodes)) < zero_tips), 0.0, length)
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


def simulate_brownian(
    arrays: TreeArrays,
    rng: np.random.Generator,
    *,
    rate: float = 1.0,
    lam: float = 1.0,
    columns: int = 1,
    root: float = 0.0,
) -> np.ndarray:
    """Simulate Brownian motion (Felsenstein 1973) down ``arrays``, with
    Pagel's lambda (Pagel 1999) applied to the tree: internal branches
    scaled by ``lam``, tips lengthened to keep their depth.

    Each node's value is the root value plus the sum of independent normal
    increments on the branches above it (variance rate x length), summed in
    linear time by path sums.

    Returns:
        Values at the tips, one row per tip in :attr:`TreeArrays.tips`
        order and ``columns`` columns (a vector when ``columns`` is 1).
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


# --------------------------------------------------------------------------
# text


def nexus_token(text: str) -> str:
    """``text`` as a NEXUS word: as it is when it holds only letters,
    digits, underscores and points, else quoted (with '' for ')."""
    if text.replace("_", "").replace(".", "").isalnum():
        return text
    return "'" + text.replace("'", "''") + "'"


def nexus_text(
    tree_lines: list[str], labels: list[str], comment: str, translate: dict[str, int]
) -> str:
    """A NEXUS file: a TAXA block of ``labels``, then a TREES block with a
    TRANSLATE table (number -> label) and ``tree_lines``."""
    lines = ["#NEXUS", "", f"[{comment}]", "", "BEGIN TAXA;"]
    lines.append(f"    DIMENSIONS NTAX={len(labels)};")
    lines.append("    TAXLABELS")
    lines += [f"        {nexus_token(label)}" for label in labels]
    lines += ["    ;", "END;", "", "BEGIN TREES;", "    TRANSLATE"]
    entries = [f"        {translate[label]} {nexus_token(label)}" for label in labels]
    lines += [entry + ("," if i < len(entries) - 1 else "") for i, entry in enumerate(entries)]
    lines += ["    ;"]
    lines += tree_lines
    lines += ["END;", ""]
    return "\n".join(lines)


def numbered_tips(tree: TimeTree, translate: dict[str, int]) -> dict[int, str]:
    """The TRANSLATE number written for each tip node."""
    return {int(n): str(translate[tree.labels[n]]) for n in tree.tips()}


def _named_pure_birth(n_tips: int, rng: np.random.Generator) -> TimeTree:
    """A pure-birth tree of root age 100 whose genera (about 25 tips each)
    are clades, its tips labelled with invented names."""
    tree = simulate_pure_birth(n_tips, rng, root_age=100.0, groups=max(1, n_tips // 25))
    tips = tree.tips()
    for node, label in zip(tips, invent_tip_labels(tree.group[tips], rng), strict=True):
        tree.labels[int(node)] = label
    return tree


def generate_tree(n_tips: int, *, seed: int = BENCH_SEED, decimals: int = 6) -> str:
    """Return a pure-birth ultrametric tree of ``n_tips`` tips as one line of
    Newick text (``[&R] (...);``), root age 100, lengths written with
    ``decimals`` digits; genera (about 25 tips each) are clades."""
    rng = np.random.default_rng(seed)
    return to_newick(time_tree_arrays(_named_pure_birth(n_tips, rng)), decimals=decimals)


def generate_tree_set(
    n_trees: int, n_tips: int, *, seed: int = BENCH_SEED, decimals: int = 5
) -> str:
    """Return NEXUS text of a posterior-like sample: ``n_trees`` trees over
    the same ``n_tips`` tips (TAXA and TRANSLATE blocks), each a perturbed
    copy of one pure-birth tree (a few interchanges, jittered ages), with
    ``[&lnP=...]`` header and ``[&rate=...]`` branch comments.
    """
    rng = np.random.default_rng(seed)
    base = _named_pure_birth(n_tips, rng)
    labels = sorted(base.labels[int(n)] for n in base.tips())
    translate = {label: i + 1 for i, label in enumerate(labels)}
    lines = []
    for index in range(n_trees):
        tree = perturbed_copy(base, rng, int(rng.integers(0, 4)), 0.08)
        rates = rng.lognormal(-4.5, 0.3, size=len(tree.parent))
        comments = {n: f"[&rate={rates[n]:.4f}]" for n in range(1, len(tree.parent))}
        arrays = time_tree_arrays(tree, labels=numbered_tips(tree, translate), comments=comments)
        newick = to_newick(arrays, decimals=decimals, comments=True)
        lnp = -6150.0 + float(rng.normal(0, 6))
        lines.append(f"    TREE STATE_{index * 1000} [&lnP={lnp:.2f}] = {newick}")
    return nexus_text(lines, labels, "Invented benchmark tree set.", translate)
