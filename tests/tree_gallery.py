"""Shared by the tree tests: a named gallery of edge-case trees, slow and
obviously correct recursive references, random trees, and DendroPy helpers.

The references walk children lists recursively in plain Python, one node
at a time, with none of the vectorised tricks of curation.trees.
"""

from __future__ import annotations

import sys

import dendropy
import numpy as np

from curation.trees.arrays import TreeArrays

sys.setrecursionlimit(10_000)

# Each gallery tree is drawn above its entry; lengths on the branches.
GALLERY: dict[str, str] = {
    # A
    "one tip": "A;",
    # A:1 --+
    #       +-- root
    # B:1 --+
    "two tips": "(A:1,B:1);",
    # a star: four tips straight from the root
    #   A:1  B:1  C:1  D:1
    #    \    |    |    /
    #         root
    "star": "(A:1,B:1,C:1,D:1);",
    # ((A,B),(C,D)) with every branch 0
    "all zero lengths": "((A:0,B:0):0,(C:0,D:0):0);",
    # ((A,B),C) with no lengths at all
    "no lengths": "((A,B),C);",
    #        +-- A:1
    #   +-1--+
    #   |    +-- B:1
    # --+
    #   +-- C:2
    "balanced ultrametric": "((A:1,B:1):1,C:2);",
    #   +-- A:1
    #   +-- B:1        polytomy of three under one branch
    #   +-- C:1
    # --+ (those three joined by 1.5)
    #   +-- D:2.5
    "polytomy": "((A:1,B:1,C:1):1.5,D:2.5);",
    # (A,B,C) at the root: a basal trifurcation
    "basal trifurcation": "((A:1,B:1):1,C:2,D:2);",
    # B hangs from a node with a single child
    #   +-- A:2
    # --+
    #   +--1-- (one child) --1-- B
    "single child": "(A:2,(B:1):1);",
    # a caterpillar ((((A,B),C),D),E), ultrametric with height 4
    "caterpillar": "((((A:1,B:1):1,C:2):1,D:3):1,E:4);",
    # sister tips with zero-length terminal branches
    "zero tips": "((A:0,B:0):2,(C:1,D:1):1);",
    # labels that need quotes; a negative branch; a duplicate label
    "awkward labels": "(('Aus bus':1,B_c:1):1,('D''e':1,B_c:-0.5):1);",
    # not ultrametric: a fossil tip D ends at 1 instead of 3
    "fossil tip": "((A:1.0,B:1.0):2.0,(C:2.0,D:0.5):1.0);",
    # rounding: the true lengths were 1/3 and 2/3, written with 2 decimals
    "rounded": "((A:0.33,B:0.33):0.67,C:1.0);",
    # one branch 1000 times the rest
    "long branch": "((((A:1,B:1):1,(C:1,D:1):1):1,((E:1,F:1):1,(G:1,H:1000):1):1):1,I:4);",
}


# Deviations from ultrametric written with different decimals, and the
# verdict each must get: rounding-level when the written decimals can hide
# the spread and it is small beside the height, substantive otherwise
# (whatever the decimals). Depths are worked out beside each; the tests
# measure them with DendroPy too.
ROUNDING_GALLERY: dict[str, tuple[str, str]] = {
    # A, B at 5000 and C, D at 5001: off by 1 in 5001 (0.02%), each path
    # allowed 1 (two whole-number lengths, each +-0.5).
    "integers, rounding": (
        "((Aa_a:2500,Bb_b:2500):2500,(Cc_c:1667,Dd_d:1667):3334);",
        "rounding-level",
    ),
    # A, B at 15 and C, D at 13: off by 2 in 15 (13%), though each path is
    # allowed 1 and so 14 lies within both.
    "integers, substantive": ("((Aa_a:10,Bb_b:10):5,(Cc_c:7,Dd_d:7):6);", "substantive"),
    # A, B at 20.0 and C, D at 19.9: off by 0.1 in 20 (0.5%), allowance 0.1.
    "one decimal, rounding": (
        "((Aa_a:12.3,Bb_b:12.3):7.7,(Cc_c:5.1,Dd_d:5.1):14.8);",
        "rounding-level",
    ),
    # A, B at 2.0 and C, D at 1.8: off by 0.2 in 2 (10%), allowance 0.1.
    "one decimal, substantive": (
        "((Aa_a:1.5,Bb_b:1.5):0.5,(Cc_c:1.2,Dd_d:1.2):0.6);",
        "substantive",
    ),
    # A, B at 1.000000 and C at 1.000001: one unit of the sixth decimal.
    "six decimals, rounding": (
        "((Aa_a:0.333333,Bb_b:0.333333):0.666667,Cc_c:1.000001);",
        "rounding-level",
    ),
    # A, B at 0.75 and C, D at 0.7, written to six decimals.
    "six decimals, substantive": (
        "((Aa_a:0.500000,Bb_b:0.500000):0.250000,(Cc_c:0.400000,Dd_d:0.400000):0.300000);",
        "substantive",
    ),
    # A, B at 15.25 and C, D at 15.3: off by 0.05 (0.3%); A's path is
    # allowed 0.505 (a whole number and two decimals), C's 0.1.
    "mixed, rounding": ("((Aa_a:10,Bb_b:10):5.25,(Cc_c:7.5,Dd_d:7.5):7.8);", "rounding-level"),
    # A, B at 15 and C, D at 14.4: off by 0.6 (4%); allowances 1 and 0.55
    # would overlap at 14.
    "mixed, substantive": ("((Aa_a:10,Bb_b:10):5,(Cc_c:7.4,Dd_d:7.4):7);", "substantive"),
}


def children_of(tree: TreeArrays) -> list[list[int]]:
    kids: list[list[int]] = [[] for _ in range(tree.node_count)]
    for node in range(1, tree.node_count):
        kids[int(tree.parent[node])].append(node)
    return kids


def ref_depths(tree: TreeArrays) -> list[float]:
    """Distance from the root to every node, by recursion (missing = 0)."""
    kids = children_of(tree)
    out = [0.0] * tree.node_count

    def walk(node: int, depth: float) -> None:
        out[node] = depth
        for child in kids[node]:
            length = float(tree.edge_length[child])
            walk(child, depth + (0.0 if length != length else length))

    walk(0, 0.0)
    return out


def ref_tip_labels_below(tree: TreeArrays) -> list[list[str]]:
    kids = children_of(tree)
    out: list[list[str]] = [[] for _ in range(tree.node_count)]

    def walk(node: int) -> list[str]:
        if not kids[node]:
            out[node] = [tree.labels[node]]
        else:
            out[node] = [label for child in kids[node] for label in walk(child)]
        return out[node]

    walk(0)
    return out


def ref_subjects(tree: TreeArrays) -> list[str]:
    """Each node named by the smallest tip label below it and the largest of
    its children's smallest labels, by recursion."""
    kids = children_of(tree)
    below = ref_tip_labels_below(tree)
    names = []
    for node in range(tree.node_count):
        if not kids[node]:
            names.append(f"tip {tree.labels[node]!r}")
        elif len(below[node]) == 1:
            names.append(f"node {below[node][0]!r} (1 tip)")
        else:
            first = min(below[node])
            second = max(min(below[c]) for c in kids[node])
            names.append(f"node {first!r} + {second!r} ({len(below[node])} tips)")
    return names


def ref_subtree_sizes(tree: TreeArrays) -> list[int]:
    kids = children_of(tree)
    sizes = [0] * tree.node_count

    def walk(node: int) -> int:
        sizes[node] = 1 + sum(walk(c) for c in kids[node])
        return sizes[node]

    walk(0)
    return sizes


def ref_covariance(tree: TreeArrays) -> np.ndarray:
    """Depth of the most recent common ancestor of every pair of tips, by
    intersecting their ancestor lists."""
    depths = ref_depths(tree)
    tips = [i for i in range(tree.node_count) if not children_of(tree)[i]]

    def ancestors(node: int) -> list[int]:
        path = [node]
        while tree.parent[path[-1]] >= 0:
            path.append(int(tree.parent[path[-1]]))
        return path

    paths = {t: ancestors(t) for t in tips}
    out = np.zeros((len(tips), len(tips)))
    for i, a in enumerate(tips):
        for j, b in enumerate(tips):
            common = [x for x in paths[a] if x in set(paths[b])]
            out[i, j] = depths[common[0]]
    return out


def random_newick(
    tips: int,
    seed: int,
    *,
    ultrametric: bool = True,
    decimals: int | None = None,
    polytomy_chance: float = 0.0,
) -> str:
    """A random tree of ``tips`` tips as Newick, by recursive random splits
    of the tip set (plain Python, independent of curation.trees).

    Ultrametric trees get node ages drawn at random below their parent's;
    others get independent exponential lengths. ``decimals`` rounds every
    written length; ``polytomy_chance`` splits a clade into three or more.
    """
    rng = np.random.default_rng(seed)
    labels = [f"T{k}_{'abcdefghij'[k % 10]}" for k in range(tips)]

    def fmt(x: float) -> str:
        return repr(float(x)) if decimals is None else f"{x:.{decimals}f}"

    def build(members: list[str], age: float) -> tuple[str, float]:
        # returns (text, age of this node)
        if len(members) == 1:
            return members[0], 0.0
        node_age = age * rng.uniform(0.3, 0.95) if ultrametric else 0.0
        parts = 2
        if polytomy_chance and len(members) >= 3 and rng.random() < polytomy_chance:
            parts = int(rng.integers(3, min(len(members), 5) + 1))
        cuts = sorted(rng.choice(np.arange(1, len(members)), size=parts - 1, replace=False))
        groups = [members[a:b] for a, b in zip([0, *cuts], [*cuts, len(members)], strict=True)]
        texts = []
        for group in groups:
            text, child_age = build(group, node_age)
            length = node_age - child_age if ultrametric else rng.exponential(1.0)
            texts.append(f"{text}:{fmt(length)}")
        return "(" + ",".join(texts) + ")", node_age

    order = list(rng.permutation(labels))
    if tips == 1:
        return f"{order[0]};"
    text, _ = build(order, 10.0 / 0.95)
    return text + ";"


def read_dendropy(newick: str) -> dendropy.Tree:
    """Read Newick with DendroPy the project's way: underscores kept."""
    return dendropy.Tree.get(data=newick, schema="newick", preserve_underscores=True)


def dendropy_distances(tree: dendropy.Tree) -> dict[frozenset[str], float]:
    """Patristic distance of every pair of tips from DendroPy's
    PhylogeneticDistanceMatrix (Sukumaran and Holder 2010)."""
    pdm = tree.phylogenetic_distance_matrix()
    taxa = list(tree.taxon_namespace)
    out: dict[frozenset[str], float] = {}
    for i, a in enumerate(taxa):
        for b in taxa[i + 1 :]:
            out[frozenset((a.label, b.label))] = pdm.patristic_distance(a, b)
    return out


def dendropy_root_distances(tree: dendropy.Tree) -> dict[str, float]:
    """Root-to-tip distance of every tip from DendroPy."""
    return {leaf.taxon.label: leaf.distance_from_root() for leaf in tree.leaf_node_iter()}
