"""The tree files of the demo scenario: the dated tree with its planted
defects and the posterior sample, written as NEXUS with TAXA and
TRANSLATE blocks (their trees by the library's Newick writer), and the
ground truth of what was planted. The trees themselves come from
:mod:`curation.demo.phylogeny`."""

from __future__ import annotations

from pathlib import Path

import numpy as np

from curation.demo.phylogeny import (
    TimeTree,
    children_lists,
    collapse_branch,
    nexus_text,
    nexus_token,
    numbered_tips,
    perturbed_copy,
    time_tree_arrays,
)
from curation.demo.scenario import POSTERIOR_DECIMALS, ROOT_AGE, TREE_DECIMALS, VOUCHER_SUFFIX
from curation.trees.arrays import to_newick

__all__ = ["write_tree_files"]


def _plant_tree_defects(tree: TimeTree, rng: np.random.Generator) -> dict[str, list[int]]:
    children = children_lists(tree)
    internal = [n for n in range(1, len(tree.parent)) if children[n]]
    # Candidates away from the root (no basal trifurcation), with distinct parents.
    chosen: list[int] = []
    used: set[int] = set()
    for node in rng.permutation(internal):
        node = int(node)
        up = int(tree.parent[node])
        if up == 0 or node in used or up in used:
            continue
        chosen.append(node)
        used.update({node, up, *children[node]})
        if len(chosen) == 5:
            break
    polytomy_children = chosen[:3]
    zero_internal = chosen[3:5]
    polytomies = [int(tree.parent[n]) for n in polytomy_children]
    for node in polytomy_children:
        collapse_branch(tree, node)
    for node in zero_internal:
        tree.height[node] = tree.height[tree.parent[node]]
    children = children_lists(tree)
    cherries = [
        n
        for n in range(1, len(tree.parent))
        if tree.alive[n]
        and len(children[n]) == 2
        and all(not children[c] for c in children[n])
        and n not in used
        and int(tree.parent[n]) not in used
    ]
    cherry = int(cherries[int(rng.integers(len(cherries)))])
    tree.height[cherry] = 0.0
    return {
        "polytomies": polytomies,
        "zero_internal": zero_internal,
        "zero_terminal": children[cherry],
    }


def _pair_labels(tree: TimeTree, children: list[list[int]], node: int) -> list[str]:
    """The first tip of the first and of the last child of ``node``: two
    tips whose most recent common ancestor it is, a stable name for it."""

    def first_tip(below: int) -> int:
        while children[below]:
            below = children[below][0]
        return below

    kids = children[node]
    return [tree.labels[first_tip(kids[0])], tree.labels[first_tip(kids[-1])]]


def _max_spread(tree: TimeTree, decimals: int) -> float:
    # Root-to-tip distances from the lengths as written (rounded).
    children = children_lists(tree)
    depth = {0: 0.0}
    stack = [0]
    spread: list[float] = []
    while stack:
        node = stack.pop()
        for child in children[node]:
            length = round(float(tree.height[node] - tree.height[child]), decimals)
            depth[child] = depth[node] + length
            stack.append(child)
        if not children[node]:
            spread.append(depth[node])
    return float(max(spread) - min(spread))


def write_tree_files(
    folder: Path, rng: np.random.Generator, base: TimeTree, posterior_trees: int
) -> tuple[TimeTree, dict[str, object]]:
    labels = sorted(base.labels[n] for n in base.tips())
    translate = {label: i + 1 for i, label in enumerate(labels)}

    main = base.copy()
    planted = _plant_tree_defects(main, rng)
    newick = to_newick(
        time_tree_arrays(main, labels=numbered_tips(main, translate)), decimals=TREE_DECIMALS
    )
    text = nexus_text(
        [f"    TREE dated_consensus = {newick}"],
        labels,
        "Invented demo scenario: dated tree of the Velquiridae (fictional clade). Ages in Myr.",
        translate,
    )
    (folder / "tree.nex").write_text(text, encoding="utf-8", newline="\n")
    children = children_lists(main)
    tree_truth: dict[str, object] = {
        "file": "tree.nex",
        "tips": len(labels),
        "rooted": True,
        "root_age": ROOT_AGE,
        "decimals": TREE_DECIMALS,
        "max_root_to_tip_spread": round(_max_spread(main, TREE_DECIMALS), 10),
        "polytomies": [
            {"tips": _pair_labels(main, children, n), "children": len(children[n])}
            for n in planted["polytomies"]
        ],
        "zero_length_internal": [
            {"tips": _pair_labels(main, children, n)} for n in planted["zero_internal"]
        ],
        "zero_length_terminal": sorted(main.labels[n] for n in planted["zero_terminal"]),
        "voucher_labels": sorted(label for label in labels if VOUCHER_SUFFIX.search(label)),
        "quoted_labels": sorted(label for label in labels if nexus_token(label) != label),
    }

    burn_in = max(1, posterior_trees // 5)
    kept = np.arange(burn_in, posterior_trees)
    polytomy_trees = sorted(int(i) for i in rng.choice(kept, min(3, len(kept)), replace=False))
    zero_trees = sorted(int(i) for i in rng.choice(kept, min(4, len(kept)), replace=False))
    lines: list[str] = []
    names: list[str] = []
    for index in range(posterior_trees):
        if index < burn_in:
            # Early samples: far from the plateau, and their topologies drift.
            swaps, jitter = 40 - (30 * index) // burn_in, 0.4
            lnp = -9400.0 + (3200.0 * index) / burn_in + float(rng.normal(0, 40))
        else:
            swaps, jitter = int(rng.integers(0, 4)), 0.08
            lnp = -6150.0 + float(rng.normal(0, 6))
        tree = perturbed_copy(base, rng, swaps, jitter)
        children = children_lists(tree)
        internal = [n for n in range(1, len(tree.parent)) if children[n] and tree.parent[n] > 0]
        if index in polytomy_trees:
            shortest = min(internal, key=lambda n: tree.height[tree.parent[n]] - tree.height[n])
            collapse_branch(tree, shortest)
        if index in zero_trees:
            living = [n for n in internal if tree.alive[n]]
            node = living[int(rng.integers(len(living)))]
            tree.height[node] = tree.height[tree.parent[node]]
        rates = {
            int(n): f"[&rate={float(rng.lognormal(-4.5, 0.3)):.4f}]"
            for n in range(1, len(tree.parent))
            if tree.alive[n]
        }
        arrays = time_tree_arrays(tree, labels=numbered_tips(tree, translate), comments=rates)
        newick = to_newick(arrays, decimals=POSTERIOR_DECIMALS, comments=True)
        name = f"STATE_{index * 10000}"
        names.append(name)
        lines.append(f"    TREE {name} [&lnP={lnp:.2f}] = {newick}")
    text = nexus_text(
        lines,
        labels,
        "Invented demo scenario: posterior sample of dated trees (fictional clade).",
        translate,
    )
    (folder / "posterior.nex").write_text(text, encoding="utf-8", newline="\n")
    tree_truth["posterior"] = {
        "file": "posterior.nex",
        "trees": posterior_trees,
        "tips": len(labels),
        "burn_in": burn_in,
        "decimals": POSTERIOR_DECIMALS,
        "tree_names": names,
        "polytomy_trees": polytomy_trees,
        "zero_length_internal_trees": zero_trees,
    }
    return main, tree_truth
