"""Every command that takes a tree or a tree set sees a derived set (from a
repair) the way it sees the set it came from: the lineage rule of
:mod:`curation.store.lineage`.

The store is the demo's: tree set 1 is the imported dated tree, set 3 was
derived from it by make-ultrametric and set 4 from set 3 by
lengthen-zero-tips (twice derived). A prune of set 4 adds a set whose tips
are a subset. Every check runs through the real command line, as a user
would, on a copy of that store. The expectations follow from the rule
itself: repairs keep tip labels, so the decisions of the origin apply to
every member, and a member's species values are the origin's restricted to
the tips it holds.
"""

from __future__ import annotations

import json
import shutil
import sqlite3
import subprocess
import sys
from collections.abc import Iterator
from pathlib import Path

import pandas as pd
import pytest
from typer.testing import CliRunner, Result

from curation.cli import app
from curation.demo.pipeline import run_demo

ORIGIN, DERIVED, TWICE = 1, 3, 4
LINEAGE = (ORIGIN, DERIVED, TWICE)


def run_cli(*args: str, store: Path, keys: str | None = None) -> Result:
    """Run a command of the command line on ``store``, in this process (the
    same Typer application the ``tipledger`` program runs; one Python start
    per command would cost more than the checks)."""
    return CliRunner().invoke(app, [*args, "--store", str(store)], input=keys)


def ok(result: Result) -> str:
    assert result.exit_code == 0, result.output + repr(result.exception)
    return result.output


def run_process(*args: str, store: Path) -> subprocess.CompletedProcess[str]:
    """Run ``python -m curation`` in a real process on ``store``."""
    return subprocess.run(
        [sys.executable, "-m", "curation", *args, "--store", str(store)],
        capture_output=True,
        text=True,
        check=False,
    )


@pytest.fixture(scope="module")
def demo_store(tmp_path_factory: pytest.TempPathFactory) -> Iterator[Path]:
    folder = tmp_path_factory.mktemp("lineage")
    run_demo(folder)
    store = folder / "tipledger.db"
    with sqlite3.connect(store) as db:
        parents = dict(db.execute("SELECT id, derived_from_id FROM tree_sets").fetchall())
    # The demo's sets: 1 imported, 3 from 1, 4 from 3 (2 is the posterior).
    assert parents[ORIGIN] is None and parents[DERIVED] == ORIGIN and parents[TWICE] == DERIVED
    yield store


@pytest.fixture
def store(demo_store: Path, tmp_path: Path) -> Path:
    """A private copy of the demo store, for commands that write."""
    copy = tmp_path / "store.db"
    shutil.copyfile(demo_store, copy)
    return copy


def _tree_of(store: Path, tree_set: int) -> int:
    with sqlite3.connect(store) as db:
        return int(
            db.execute("SELECT id FROM trees WHERE tree_set_id = ?", (tree_set,)).fetchone()[0]
        )


def _decision_sets(store: Path) -> set[int]:
    with sqlite3.connect(store) as db:
        return {r[0] for r in db.execute("SELECT DISTINCT tree_set_id FROM name_decisions")}


def _species(store: Path, tree_set: int, tmp_path: Path) -> pd.DataFrame:
    out = tmp_path / f"species_{tree_set}.csv"
    ok(
        run_cli(
            "show-species-values", "--tree-set", str(tree_set), "--output", str(out), store=store
        )
    )
    frame = pd.read_csv(out, keep_default_na=False)
    return frame.drop(columns=["measurement_ids"], errors="ignore").sort_values(
        ["tip_label", "trait"], ignore_index=True
    )


def test_species_values_are_the_same_on_every_member(store: Path, tmp_path: Path) -> None:
    origin = _species(store, ORIGIN, tmp_path)
    assert len(origin) > 500  # the demo has values for most of its 200 tips
    for member in (DERIVED, TWICE):
        pd.testing.assert_frame_equal(_species(store, member, tmp_path), origin)


def test_audit_is_the_same_on_every_member(store: Path, tmp_path: Path) -> None:
    audits = []
    for member in LINEAGE:
        out = tmp_path / f"audit_{member}.json"
        ok(run_cli("audit-sources", "--tree-set", str(member), "--json", str(out), store=store))
        data = json.loads(out.read_text(encoding="utf-8"))
        data.pop("tree_set_id")
        audits.append(data)
    assert audits[0]["coverage"] and all(a == audits[0] for a in audits)


def test_audit_of_a_set_without_decisions_reports_everything_unmatched(
    store: Path, tmp_path: Path
) -> None:
    # The posterior (set 2) was never reconciled: no name maps to a tip.
    # (This ended in a pandas traceback: through a real process.)
    out = tmp_path / "audit.json"
    done = run_process("audit-sources", "--tree-set", "2", "--json", str(out), store=store)
    assert done.returncode == 0 and "Traceback" not in done.stderr, done.stderr
    data = json.loads(out.read_text(encoding="utf-8"))
    assert all(row["tips_with_values"] == 0 for row in data["coverage"])
    assert all(row["unmatched"] == row["measurements"] for row in data["sources"])
    # Flagging a set whose names match nothing yet warned of mixed types.
    flagged = run_process("flag-measurements", "--tree-set", "2", store=store)
    assert flagged.returncode == 0 and "Warning" not in flagged.stderr, flagged.stderr


def test_show_names_is_the_same_on_every_member(store: Path) -> None:
    shown = [ok(run_cli("show-names", "--tree-set", str(m), store=store)) for m in LINEAGE]
    counts = [
        [line for line in s.splitlines() if line.startswith(("accepted", "pending"))] for s in shown
    ]
    assert counts[0] and counts[0] == counts[1] == counts[2]


def test_diagnostics_find_the_values_on_a_repaired_tree(store: Path) -> None:
    outputs = {}
    for member in LINEAGE:
        tree = _tree_of(store, member)
        outputs[member] = ok(
            run_cli("diagnose-traits", "--tree", str(tree), "--permutations", "9", store=store)
        )
    for member in LINEAGE:
        # Four continuous traits in the demo, each with its diagnostics.
        assert outputs[member].count("body_length") >= 1, outputs[member]
        assert "no species values" not in outputs[member].lower()


def test_reconciling_a_derived_set_writes_to_the_origin_once(store: Path) -> None:
    before = _decision_sets(store)
    assert before == {ORIGIN}
    for member in (DERIVED, TWICE):
        out = ok(run_cli("reconcile-names", "--tree-set", str(member), store=store))
        assert f"tree set {ORIGIN}" in out
    assert _decision_sets(store) == {ORIGIN}
    # Every name was settled or pending already: the runs reused them all.
    with sqlite3.connect(store) as db:
        per_name = db.execute(
            "SELECT written_name, COUNT(*) FROM name_decisions GROUP BY written_name"
            " HAVING COUNT(*) > 1"
        ).fetchall()
    assert per_name == []


def test_a_decision_through_a_twice_derived_set_reaches_every_member(
    store: Path, tmp_path: Path
) -> None:
    with sqlite3.connect(store) as db:
        name = db.execute(
            "SELECT written_name FROM name_decisions WHERE status = 'pending' ORDER BY written_name"
        ).fetchone()[0]
        tip = db.execute(
            "SELECT label FROM tips JOIN trees ON trees.id = tips.tree_id "
            "WHERE trees.tree_set_id = 1 ORDER BY label"
        ).fetchone()[0]
    ok(
        run_cli(
            "decide-name",
            name,
            "--tree-set",
            str(TWICE),
            "--tip",
            tip,
            "--note",
            "checked",
            store=store,
        )
    )
    assert _decision_sets(store) == {ORIGIN}
    for member in LINEAGE:
        folder = tmp_path / f"bundle_{member}"
        ok(
            run_cli(
                "make-bundle",
                str(folder),
                "--tree",
                str(_tree_of(store, member)),
                "--no-diagnostics",
                store=store,
            )
        )
        names = pd.read_csv(folder / "names.csv", keep_default_na=False).set_index("written_name")
        assert names.loc[name, "status"] == "accepted" and names.loc[name, "tip_label"] == tip


def test_review_sheet_through_a_derived_set(store: Path, tmp_path: Path) -> None:
    sheet = tmp_path / "sheet.csv"
    ok(run_cli("export-review-sheet", str(sheet), "--tree-set", str(TWICE), store=store))
    rows = pd.read_csv(sheet, keep_default_na=False, dtype=str)
    assert len(rows) > 0
    rows.loc[0, "decision"] = "reject"
    rows.to_csv(sheet, index=False)
    ok(run_cli("import-review-sheet", str(sheet), "--tree-set", str(DERIVED), store=store))
    assert _decision_sets(store) == {ORIGIN}
    with sqlite3.connect(store) as db:
        status = db.execute(
            "SELECT status FROM name_decisions WHERE written_name = ? ORDER BY id DESC LIMIT 1",
            (rows.loc[0, "written_name"],),
        ).fetchone()[0]
    assert status == "rejected"


def test_terminal_review_through_a_derived_set(store: Path) -> None:
    out = ok(run_cli("review-names", "--tree-set", str(TWICE), store=store, keys="r\nq\n"))
    assert "rejected: 1" in out
    assert _decision_sets(store) == {ORIGIN}


def test_checks_flags_and_repairs_run_on_every_member(store: Path) -> None:
    for member in LINEAGE:
        ok(run_cli("check-trees", str(member), store=store))
        ok(run_cli("show-tree-findings", str(member), store=store))
        flagged = ok(run_cli("flag-measurements", "--tree-set", str(member), store=store))
        assert "measurements: 4400" in flagged
        ok(run_cli("sort-children", str(member), store=store))


def test_bundles_of_every_member_agree(store: Path, tmp_path: Path) -> None:
    tables = {}
    for member in LINEAGE:
        folder = tmp_path / f"b{member}"
        ok(
            run_cli(
                "make-bundle",
                str(folder),
                "--tree-set",
                str(member),
                "--no-diagnostics",
                store=store,
            )
        )
        tables[member] = pd.read_csv(folder / "species_traits.csv", keep_default_na=False)
        verified = CliRunner().invoke(app, ["verify-bundle", str(folder)])
        assert verified.exit_code == 0, verified.output
    pd.testing.assert_frame_equal(tables[DERIVED], tables[ORIGIN])
    pd.testing.assert_frame_equal(tables[TWICE], tables[ORIGIN])


def test_a_pruned_member_holds_only_its_tips(store: Path, tmp_path: Path) -> None:
    origin = _species(store, ORIGIN, tmp_path)
    kept = sorted(origin["tip_label"].unique())[:40]
    ok(run_cli("prune-trees", str(TWICE), "--tips", ",".join(kept), store=store))
    with sqlite3.connect(store) as db:
        pruned = db.execute("SELECT MAX(id) FROM tree_sets").fetchone()[0]
    species = _species(store, pruned, tmp_path)
    assert sorted(species["tip_label"].unique()) == kept
    expected = origin[origin["tip_label"].isin(kept)].reset_index(drop=True)
    pd.testing.assert_frame_equal(species, expected)
    folder = tmp_path / "pruned"
    ok(
        run_cli(
            "make-bundle", str(folder), "--tree-set", str(pruned), "--no-diagnostics", store=store
        )
    )
    accounting = pd.read_csv(folder / "accounting.csv", keep_default_na=False)
    tips = accounting[accounting["kind"] == "tip"]
    assert sorted(tips["name"]) == kept
