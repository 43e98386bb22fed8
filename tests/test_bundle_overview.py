"""The overview of a tree too large to draw tip by tip, against a slow,
obviously correct reference over the gallery of edge-case trees, and
against DendroPy on random trees: every tip lies below exactly one shown
clade, and each clade's counts and reach are those of its tips."""

from __future__ import annotations

import xml.etree.ElementTree as ET
from pathlib import Path

import pytest

from curation.bundle import BundleOptions, make_bundle, report
from curation.bundle.overview import overview_tree
from curation.bundle.report import overview_svg
from curation.store import Store
from curation.trees.arrays import TreeArrays, parse_newick
from curation.trees.nodes import name_nodes
from tests.bundle_helpers import build_store, first_tree
from tests.tree_gallery import (
    GALLERY,
    children_of,
    random_newick,
    read_dendropy,
    ref_depths,
    ref_tip_labels_below,
)


def reference_shown(tree: TreeArrays, limit: int) -> list[int]:
    """The shown clades by plain lists: open the biggest closed clade (the
    first in preorder on a tie) whose children still fit, until none does."""
    kids = children_of(tree)
    below = ref_tip_labels_below(tree)
    shown = [0]
    closed = [0] if kids[0] else []
    while closed:
        closed.sort(key=lambda node: (-len(below[node]), node))
        node = closed.pop(0)
        if len(shown) - 1 + len(kids[node]) > limit:
            continue
        shown.remove(node)
        shown += kids[node]
        closed += [k for k in kids[node] if kids[k]]
    return sorted(shown)


def _tip_nodes_below(tree: TreeArrays, node: int) -> list[int]:
    kids = children_of(tree)
    if not kids[node]:
        return [node]
    return [tip for kid in kids[node] for tip in _tip_nodes_below(tree, kid)]


def _check(tree: TreeArrays, limit: int, with_data: set[str], named: set[str]) -> None:
    overview = overview_tree(tree, with_data, named, limit=limit)
    small = overview.tree
    shown = [int(overview.original[node]) for node in small.tips]
    assert shown == reference_shown(tree, limit)
    below = ref_tip_labels_below(tree)
    depths = ref_depths(tree)
    tips = [t for node in shown for t in below[node]]
    assert sorted(tips) == sorted(tree.tip_labels)  # each tip below one clade
    for new, old in enumerate(overview.original):
        labels = below[old]
        assert overview.tips[new] == len(labels)
        assert overview.with_data[new] == sum(label in with_data for label in labels)
        assert overview.named[new] == sum(label in named for label in labels)
        reach = max(depths[i] for i in _tip_nodes_below(tree, int(old)))
        assert overview.reach[new] == pytest.approx(reach)
    # The small tree keeps the shape: each kept node's parent is its
    # original parent, and branch lengths are carried over.
    for new in range(1, small.node_count):
        old = overview.original[new]
        assert overview.original[small.parent[new]] == tree.parent[old]
    # The drawing is well-formed SVG with one wedge per shown clade.
    svg = ET.fromstring(overview_svg(overview))
    wedges = [e for e in svg.iter("{http://www.w3.org/2000/svg}path") if e.get("fill-opacity")]
    assert len(wedges) == len(shown)


@pytest.mark.parametrize("name", sorted(GALLERY))
@pytest.mark.parametrize("limit", [1, 2, 3, 5])
def test_gallery_overviews_agree_with_the_reference(name: str, limit: int) -> None:
    tree = parse_newick(GALLERY[name])
    labels = tree.tip_labels
    _check(tree, limit, set(labels[::2]), set(labels[:-1]))


@pytest.mark.parametrize("seed", [1, 2, 3])
def test_random_overviews_agree_with_dendropy(seed: int) -> None:
    newick = random_newick(400, seed, polytomy_chance=0.2)
    tree = parse_newick(newick)
    labels = tree.tip_labels
    with_data = set(labels[::3])
    _check(tree, 40, with_data, set(labels))
    # DendroPy (Sukumaran and Holder 2010) as the outside reference: the
    # tips below the most recent common ancestor of each clade's two naming
    # tips, and their root distances.
    overview = overview_tree(tree, with_data, set(labels), limit=40)
    names = name_nodes(tree)
    reference = read_dendropy(newick)
    reference.is_rooted = True  # the Newick's first node is the root, as we read it
    for new in overview.tree.tips:
        old = int(overview.original[new])
        first, second = names.tips_of(old)
        clade = reference.mrca(taxon_labels=sorted({first, second}))
        leaves = [leaf for leaf in clade.leaf_iter()]
        assert overview.tips[new] == len(leaves)
        assert overview.with_data[new] == sum(leaf.taxon.label in with_data for leaf in leaves)
        assert overview.reach[new] == pytest.approx(
            max(leaf.distance_from_root() for leaf in leaves)
        )
    assert 1 < overview.tree.tips.size <= 40


def test_report_draws_the_overview_of_a_large_tree(
    store: Store, tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    # The bundle helpers' tree has four tips with data; call that large.
    monkeypatch.setattr(report, "MAX_DRAWN_TIPS", 3)
    monkeypatch.setattr(report, "OVERVIEW_CLADES", 2)
    tree_set_id = build_store(store, tmp_path)
    folder = tmp_path / "bundle"
    options = BundleOptions(tree_id=first_tree(store, tree_set_id), diagnostics=False)
    make_bundle(store, folder, options)
    page = (folder / "report.html").read_text(encoding="utf-8")
    assert "too many to draw one by one: it is drawn as 2 clades" in page
    # The pruned tree is ((Alpha_one, Alpha_two), (Beta_three, Beta_four)):
    # two clades of two tips, each with data on both.
    assert "node &#x27;Alpha_one&#x27; + &#x27;Alpha_two&#x27; (2 tips): 2 with data" in page
    assert "node &#x27;Beta_four&#x27; + &#x27;Beta_three&#x27; (2 tips): 2 with data" in page
