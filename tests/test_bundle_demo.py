"""The demo ends in a bundle that verifies, and whose tables and report show
the defects the scenario planted (its ground truth in samples/truth/) with
what was done about each."""

from __future__ import annotations

import html
import json
from collections.abc import Iterator
from pathlib import Path

import dendropy
import pandas as pd
import pytest

from curation.bundle import verify_bundle
from curation.demo.pipeline import run_demo
from tests.test_traits_demo import EXPECTED

# Planted measurement faults that must stay out of the species values
# (the others are reported and kept, e.g. a conflict between sources).
LEFT_OUT = {"unit_slip", "outlier", "impossible", "unknown_unit", "incompatible_unit"}


@pytest.fixture(scope="module")
def demo(tmp_path_factory: pytest.TempPathFactory) -> Iterator[Path]:
    folder = tmp_path_factory.mktemp("demo")
    report = run_demo(folder)
    assert {s.step: s.status for s in report.steps}["make bundle"] == "done"
    yield folder


def test_demo_bundle_verifies(demo: Path) -> None:
    result = verify_bundle(demo / "bundle")
    assert result.ok, result.problems
    assert result.tips == result.trait_rows > 100


def test_planted_tree_defects_are_in_the_findings_with_what_was_done(demo: Path) -> None:
    truth = json.loads((demo / "samples" / "truth" / "trees.json").read_text(encoding="utf-8"))
    findings = pd.read_csv(demo / "bundle" / "findings.csv", keep_default_na=False)
    checks = findings[findings["code"].str.startswith("tree.")]
    by_code = checks.groupby("code")
    counts = by_code.size()
    assert counts["tree.polytomy"] == len(truth["polytomies"])
    assert counts["tree.zero_length_internal"] == len(truth["zero_length_internal"])
    terminal = checks[checks["code"] == "tree.zero_length_terminal"]
    assert sorted(terminal["subject"]) == sorted(
        f"tip {t!r}" for t in truth["zero_length_terminal"]
    )
    # The demo repairs the dated tree (make ultrametric, lengthen zero tips)
    # and leaves polytomies as they are: each finding says which.
    actions = dict(zip(checks["code"], checks["action"], strict=False))
    assert actions["tree.zero_length_terminal"] == "repaired: lengthen-zero-tips"
    assert actions["tree.not_ultrametric"] == "repaired: make-ultrametric"
    assert actions["tree.polytomy"] == "reported; tree used as stored"


def test_planted_measurement_faults_are_flagged_and_handled(demo: Path) -> None:
    bundle = demo / "bundle"
    truth = pd.read_csv(demo / "samples" / "truth" / "faults.csv")
    provenance = json.loads((bundle / "provenance.json").read_text(encoding="utf-8"))
    files = {entry["source_id"]: entry["file_name"] for entry in provenance["inputs"]}
    used = pd.read_csv(bundle / "measurements_used.csv", keep_default_na=False, low_memory=False)
    used["file"] = used["source_id"].map(files)
    # The importers number a measurement by its line in the file.
    planted = truth.merge(
        used, left_on=["file", "line", "trait"], right_on=["file", "row_number", "trait"]
    )
    checked = planted[planted["kind"].isin(EXPECTED)]
    assert len(checked) >= 30, "most planted faults are on tips of the bundle"
    for row in checked.itertuples():
        assert set(row.flags.split(";")) & EXPECTED[row.kind], (row.kind, row.file, row.line)
        if row.kind in LEFT_OUT:
            assert not row.in_species_value, (row.kind, row.file, row.line)
            assert row.exclusion != ""


def test_report_shows_each_kind_of_planted_defect_and_its_handling(demo: Path) -> None:
    bundle = demo / "bundle"
    page = html.unescape((bundle / "report.html").read_text(encoding="utf-8"))
    findings = pd.read_csv(bundle / "findings.csv", keep_default_na=False)
    planted_codes = {
        "tree.polytomy",
        "tree.zero_length_internal",
        "tree.zero_length_terminal",
        "tree.not_ultrametric",
        "trait.unit_slip",
        "trait.outlier",
        "trait.impossible",
        "trait.duplicate_specimen",
        "trait.exact_duplicate",
        "trait.source_conflict",
        "trait.state_conflict",
    }
    assert planted_codes <= set(findings["code"])
    summary = page.split("By kind:", 1)[1].split("Each finding:", 1)[0]
    for code in sorted(planted_codes):
        rows = findings[findings["code"] == code]
        for action, group in rows.groupby("action"):
            # The row of the summary table: code, severity, action, count.
            cells = f"<td>{code}</td><td>{group['severity'].iloc[0]}</td><td>{action}</td>"
            assert cells in summary, (code, action)
            assert f'{cells}<td class="num">{len(group)}</td>' in summary
    assert "Repairs applied" in page and "make-ultrametric" in page


def test_every_repair_listed_changed_the_tree_and_left_no_near_zero_tips(demo: Path) -> None:
    bundle = demo / "bundle"
    provenance = json.loads((bundle / "provenance.json").read_text(encoding="utf-8"))
    repairs = provenance["repairs"]
    assert [r["repair"] for r in repairs] == ["make-ultrametric", "lengthen-zero-tips"]
    for repair in repairs:  # a repair that changed nothing is not applied
        assert repair["parameters"]["trees_changed"] >= 1, repair
    # DendroPy (Sukumaran and Holder 2010) on the bundle's tree: still
    # ultrametric, and no terminal branch below 1e-5 of its height.
    tree = dendropy.Tree.get(
        path=str(bundle / provenance["tree_file"]), schema="newick", preserve_underscores=True
    )
    tree.calc_node_ages(ultrametricity_precision=1e-6)
    height = tree.seed_node.age
    shortest = min(leaf.edge.length for leaf in tree.leaf_node_iter())
    assert shortest >= 1e-5 * height


def test_report_diagnostics_show_no_artefact_of_near_zero_branches(demo: Path) -> None:
    bundle = demo / "bundle"
    provenance = json.loads((bundle / "provenance.json").read_text(encoding="utf-8"))
    diagnostics = provenance["diagnostics"]
    assert {d["trait"] for d in diagnostics} >= {"body_length", "body_mass"}
    for d in diagnostics:
        assert d.get("dominance") is None, d["trait"]
    page = html.unescape((bundle / "report.html").read_text(encoding="utf-8"))
    section = page.split("Phylogenetic diagnostics", 1)[1].split("Findings and what was done")[0]
    assert "body_length" in section
    assert "transform the branch lengths" not in section
    assert "dominate" not in section
