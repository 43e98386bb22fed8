"""The tree files of the demo scenario: the dated tree with its planted
defects and the posterior sample, written as NEXUS with TAXA and
TRANSLATE blocks, and the ground truth of what was planted."""

from __future__ import annotations

from pathlib import Path

import numpy as np

from curation.demo.phylogeny import TimeTree, children_lists, collapse_branch, write_newick_body
from curation.demo.scenario import POSTERIOR_DECIMALS, ROOT_AGE, TREE_DECIMALS, VOUCHER_SUFFIX

__all__ = ["nexus_text", "numbered_tips", "perturbed_copy", "write_tree_files"]


def _nexus_token(text: str) -> str:
    if text.replace("_", "").replace(".", "").isalnum():
        return text
    return "'" + text.replace("'", "''") + "'"


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


def nexus_text(
    tree_lines: list[str], labels: list[str], comment: str, translate: dict[str, int]
) -> str:
    """A NEXUS file: a TAXA block of ``labels``, then a TREES block with a
    TRANSLATE table (number -> label) and ``tree_lines``."""
    lines = ["#NEXUS", "", f"[{comment}]", "", "BEGIN TAXA;"]
    lines.append(f"    DIMENSIONS NTAX={len(labels)};")
    lines.append("    TAXLABELS")
    lines += [f"        {_nexus_token(label)}" for label in labels]
    lines += ["    ;", "END;", "", "BEGIN TREES;", "    TRANSLATE"]
    entries = [f"        {translate[label]} {_nexus_token(label)}" for label in labels]
    lines += [entry + ("," if i < len(entries) - 1 else "") for i, entry in enumerate(entries)]
    lines += ["    ;"]
    lines += tree_lines
    lines += ["END;", ""]
    return "\n".join(lines)


def numbered_tips(tree: TimeTree, translate: dict[str, int]) -> dict[int, str]:
    """The TRANSLATE number written for each tip node."""
    return {int(n): str(translate[tree.labels[n]]) for n in tree.tips()}


def _pair_labels(tree: TimeTree, pairs: dict[int, tuple[int, int]], node: int) -> list[str]:
    a, b = pairs[node]
    return [tree.labels[a], tree.labels[b]]


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


def write_tree_files(
    folder: Path, rng: np.random.Generator, base: TimeTree, posterior_trees: int
) -> tuple[TimeTree, dict[str, object]]:
    labels = sorted(base.labels[n] for n in base.tips())
    translate = {label: i + 1 for i, label in enumerate(labels)}

    main = base.copy()
    planted = _plant_tree_defects(main, rng)
    body, pairs = write_newick_body(
        main, decimals=TREE_DECIMALS, names=numbered_tips(main, translate)
    )
    text = nexus_text(
        [f"    TREE dated_consensus = [&R] {body};"],
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
            {"tips": _pair_labels(main, pairs, n), "children": len(children[n])}
            for n in planted["polytomies"]
        ],
        "zero_length_internal": [
            {"tips": _pair_labels(main, pairs, n)} for n in planted["zero_internal"]
        ],
        "zero_length_terminal": sorted(main.labels[n] for n in planted["zero_terminal"]),
        "voucher_labels": sorted(label for label in labels if VOUCHER_SUFFIX.search(label)),
        "quoted_labels": sorted(label for label in labels if _nexus_token(label) != label),
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
        body, _ = write_newick_body(
            tree, decimals=POSTERIOR_DECIMALS, names=numbered_tips(tree, translate), comments=rates
        )
        name = f"STATE_{index * 10000}"
        names.append(name)
        lines.append(f"    TREE {name} [&lnP={lnp:.2f}] = [&R] {body};")
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
