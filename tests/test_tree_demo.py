"""On the demo scenario, every tree defect the generator planted (its
ground truth, samples/truth/trees.json) is reported by check_trees."""

from __future__ import annotations

import json
from pathlib import Path

import pytest

from curation.demo.pipeline import run_demo
from curation.store import Store, open_store
from curation.trees.arrays import TreeArrays
from curation.trees.checks import check_trees
from curation.trees.nodes import name_nodes
from curation.trees.stored import load_tree_set


@pytest.fixture(scope="module")
def demo(tmp_path_factory: pytest.TempPathFactory) -> tuple[Store, dict]:
    folder = tmp_path_factory.mktemp("demo")
    run_demo(folder)
    store = open_store(Path(folder) / "tipledger.db")
    truth = json.loads((Path(folder) / "samples" / "truth" / "trees.json").read_text())
    yield store, truth
    store.close()


def _mrca_subject(tree: TreeArrays, a: str, b: str) -> str:
    # Ancestor lists intersected, plain Python: the planted node is the
    # most recent common ancestor of the two tips the generator names.
    index = {tree.labels[t]: int(t) for t in tree.tips}

    def ancestors(node: int) -> list[int]:
        path = [node]
        while tree.parent[path[-1]] >= 0:
            path.append(int(tree.parent[path[-1]]))
        return path

    others = set(ancestors(index[b]))
    node = next(x for x in ancestors(index[a]) if x in others)
    return name_nodes(tree).subject(node)


def test_every_planted_defect_of_the_dated_tree_is_reported(demo: tuple[Store, dict]) -> None:
    store, truth = demo
    report = check_trees(store, 1)
    with store.reading() as session:
        ((_tree, arrays),) = load_tree_set(session, 1)
    found = {(f.code, f.subject): f for f in report.findings}
    for planted in truth["polytomies"]:
        subject = _mrca_subject(arrays, *planted["tips"])
        assert found[("tree.polytomy", subject)].details["children"] == planted["children"]
    for planted in truth["zero_length_internal"]:
        assert ("tree.zero_length_internal", _mrca_subject(arrays, *planted["tips"])) in found
    for label in truth["zero_length_terminal"]:
        assert ("tree.zero_length_terminal", f"tip {label!r}") in found
    spread = found[("tree.not_ultrametric", "tree")].details
    assert spread["verdict"] == "rounding-level"
    assert spread["spread"] <= truth["max_root_to_tip_spread"] + 1e-9
    assert report.counts["tree.polytomy"] == 1


def test_posterior_counts(demo: tuple[Store, dict]) -> None:
    store, truth = demo
    report = check_trees(store, 2)
    posterior = truth["posterior"]
    kept = posterior["trees"] - posterior["burn_in"]
    polytomies = len(posterior["polytomy_trees"])
    zero = len(posterior["zero_length_internal_trees"])
    assert f"{polytomies} of {kept} trees have polytomies" in report.sentences
    assert f"{zero} of {kept} trees have zero-length internal branches" in report.sentences
