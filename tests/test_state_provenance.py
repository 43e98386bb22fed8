"""A bundle's provenance lists every ledger event its content depends on,
in order, and none other; every JSON file is strict JSON (RFC 8259: no NaN
or Infinity); the ledger spells every action one way.

The expected events are worked out here straight from the store's tables
with SQL, independently of the library's own rule
(:mod:`curation.store.provenance`): the imports of every trait and synonym
source and of the bundled tree's origin, the definitions of the bundled
traits, the decisions in force, the curators' reviews of the measurements
of the tree's tips, the latest flagging and check of the lineage, and the
repairs on the way from the origin to the bundled tree.
"""

from __future__ import annotations

import json
import re
import shutil
import sqlite3
from collections.abc import Iterator
from pathlib import Path

import pandas as pd
import pytest
from typer.testing import CliRunner, Result

from curation.bundle import verify_bundle
from curation.bundle.files import checksum_lines
from curation.cli import app
from curation.demo.pipeline import run_demo
from curation.store.actions import ACTIONS


def run_cli(*args: str, store: Path) -> Result:
    return CliRunner().invoke(app, [*args, "--store", str(store)])


def ok(result: Result) -> str:
    assert result.exit_code == 0, result.output + repr(result.exception)
    return result.output


def strict_json(text: str) -> object:
    """Python's parser with NaN and the infinities refused, as RFC 8259 and
    JavaScript's JSON.parse refuse them."""

    def refuse(name: str) -> object:
        raise ValueError(f"{name} is not JSON")

    return json.loads(text, parse_constant=refuse)


@pytest.fixture(scope="module")
def demo(tmp_path_factory: pytest.TempPathFactory) -> Iterator[Path]:
    folder = tmp_path_factory.mktemp("provenance")
    run_demo(folder)
    yield folder


def expected_events(store: Path, tree_set: int, traits: set[str]) -> list[int]:
    """The events a bundle of ``tree_set`` rests on, from the tables alone."""
    with sqlite3.connect(store) as db:
        sets = dict(db.execute("SELECT id, derived_from_id FROM tree_sets").fetchall())
        path = [tree_set]
        while sets[path[-1]] is not None:
            path.append(sets[path[-1]])
        origin = path[-1]
        origin_source = db.execute(
            "SELECT source_id FROM tree_sets WHERE id = ?", (origin,)
        ).fetchone()[0]
        events = {
            e
            for (e,) in db.execute(
                "SELECT event_id FROM sources WHERE kind != 'tree' OR id = ?", (origin_source,)
            )
        }
        marks = ",".join("?" * len(traits))
        events |= {
            e
            for (e,) in db.execute(
                f"SELECT event_id FROM trait_definitions WHERE name IN ({marks})", sorted(traits)
            )
        }
        events |= {
            e
            for (e,) in db.execute(
                "SELECT event_id FROM name_decisions WHERE id IN (SELECT MAX(id) FROM "
                "name_decisions WHERE tree_set_id = ? GROUP BY written_name)",
                (origin,),
            )
        }
        tips = {
            t
            for (t,) in db.execute(
                "SELECT DISTINCT label FROM tips JOIN trees ON trees.id = tips.tree_id "
                "WHERE trees.tree_set_id = ?",
                (tree_set,),
            )
        }
        accepted = dict(
            db.execute(
                "SELECT written_name, tip_label FROM name_decisions WHERE id IN (SELECT MAX(id) "
                "FROM name_decisions WHERE tree_set_id = ? GROUP BY written_name) "
                "AND status = 'accepted'",
                (origin,),
            ).fetchall()
        )
        for written, event in db.execute(
            "SELECT m.written_name, r.event_id FROM measurement_reviews r "
            "JOIN measurements m ON m.id = r.measurement_id WHERE r.id IN "
            "(SELECT MAX(id) FROM measurement_reviews GROUP BY measurement_id)"
        ):
            if accepted.get(written) in tips:
                events.add(event)
        trees = [
            t
            for (t,) in db.execute(
                f"SELECT id FROM trees WHERE tree_set_id IN ({','.join('?' * len(path))})", path
            )
        ]
        subjects = [f"tree set {s}" for s in path] + [f"tree {t}" for t in trees]
        marks = ",".join("?" * len(subjects))
        events |= {
            e
            for (e,) in db.execute(
                f"SELECT MAX(id) FROM ledger_events WHERE action = 'check-trees' "
                f"AND subject IN ({marks}) GROUP BY subject",
                subjects,
            )
        }
        members = [f"tree set {s}" for s in sets if _root(sets, s) == origin]
        marks = ",".join("?" * len(members))
        for action in ("flag-measurements", "reconcile-names"):
            # The latest of each, whose findings the bundle shows.
            (latest,) = db.execute(
                f"SELECT MAX(id) FROM ledger_events WHERE action = ? AND subject IN ({marks})",
                [action, *members],
            ).fetchone()
            if latest is not None:
                events.add(latest)
        events |= {
            e
            for (e,) in db.execute(
                f"SELECT event_id FROM tree_sets WHERE id IN ({','.join('?' * len(path))})",
                path,
            )
        } - {db.execute("SELECT event_id FROM tree_sets WHERE id = ?", (origin,)).fetchone()[0]}
    return sorted(e for e in events if e is not None)


def _root(parents: dict[int, int | None], node: int) -> int:
    while parents[node] is not None:
        node = parents[node]  # type: ignore[assignment]
    return node


def test_demo_bundle_lists_every_event_it_depends_on_and_no_other(demo: Path) -> None:
    provenance = strict_json((demo / "bundle" / "provenance.json").read_text(encoding="utf-8"))
    assert isinstance(provenance, dict)
    listed = [e["event_id"] for e in provenance["events"]]
    assert listed == sorted(listed)  # in order
    traits = set(pd.read_csv(demo / "bundle" / "traits.csv")["trait"])
    tree_set = provenance["tree_set"]["id"]
    assert listed == expected_events(demo / "tipledger.db", tree_set, traits)
    actions = {e["action"] for e in provenance["events"]}
    # The demo defines its traits, reconciles, checks, flags and repairs.
    assert {"define-traits", "reconcile-names", "check-trees", "flag-measurements"} <= actions
    assert {"make-ultrametric", "lengthen-zero-tips", "import-darwin-core"} <= actions
    with sqlite3.connect(demo / "tipledger.db") as db:
        posterior_import, bundle_event = (
            db.execute("SELECT event_id FROM sources WHERE file_name = 'posterior.nex'").fetchone()[
                0
            ],
            db.execute("SELECT MAX(id) FROM ledger_events WHERE action = 'make-bundle'").fetchone()[
                0
            ],
        )
    assert posterior_import not in listed and bundle_event not in listed


def test_decisions_sheets_and_exclusions_are_in_the_provenance(demo: Path, tmp_path: Path) -> None:
    store = tmp_path / "store.db"
    shutil.copyfile(demo / "tipledger.db", store)
    with sqlite3.connect(store) as db:
        pending = [
            r[0]
            for r in db.execute(
                "SELECT written_name FROM name_decisions WHERE status = 'pending' "
                "ORDER BY written_name"
            )
        ]
        measurement = db.execute("SELECT MIN(id) FROM measurements").fetchone()[0]
    ok(run_cli("decide-name", pending[0], "--tree-set", "1", "--reject", store=store))
    sheet = tmp_path / "sheet.csv"
    ok(run_cli("export-review-sheet", str(sheet), "--tree-set", "1", store=store))
    rows = pd.read_csv(sheet, keep_default_na=False, dtype=str)
    rows.loc[0, "decision"] = "1"
    rows.to_csv(sheet, index=False)
    ok(run_cli("import-review-sheet", str(sheet), "--tree-set", "1", store=store))
    ok(run_cli("exclude-measurement", "--id", str(measurement), "--reason", "torn", store=store))
    folder = tmp_path / "bundle"
    ok(run_cli("make-bundle", str(folder), "--tree-set", "4", "--no-diagnostics", store=store))
    provenance = strict_json((folder / "provenance.json").read_text(encoding="utf-8"))
    assert isinstance(provenance, dict)
    listed = [e["event_id"] for e in provenance["events"]]
    traits = set(pd.read_csv(folder / "traits.csv")["trait"])
    assert listed == expected_events(store, 4, traits)
    actions = {e["action"] for e in provenance["events"]}
    assert {"decide-name", "import-review-sheet"} <= actions


def test_every_json_file_of_the_demo_is_strict(demo: Path) -> None:
    files = sorted((demo / "bundle").glob("*.json"))
    assert {f.name for f in files} == {"datapackage.json", "provenance.json"}
    for path in files:
        text = path.read_text(encoding="utf-8")
        strict_json(text)
        assert not re.search(r"\bNaN\b|\bInfinity\b", text)


def test_verify_refuses_json_with_nan(demo: Path, tmp_path: Path) -> None:
    folder = tmp_path / "bundle"
    shutil.copytree(demo / "bundle", folder)
    path = folder / "provenance.json"
    data = json.loads(path.read_text(encoding="utf-8"))
    data["diagnostics_note"] = float("nan")
    path.write_text(json.dumps(data), encoding="utf-8")  # Python writes bare NaN
    (folder / "SHA256SUMS").write_text(checksum_lines(folder), encoding="utf-8")
    report = verify_bundle(folder)
    assert not report.ok
    assert any("provenance.json" in p and "NaN" in p for p in report.problems)


def test_the_ledger_spells_every_action_one_way(demo: Path) -> None:
    with sqlite3.connect(demo / "tipledger.db") as db:
        actions = {a for (a,) in db.execute("SELECT DISTINCT action FROM ledger_events")}
    assert actions <= ACTIONS
    assert all(re.fullmatch(r"[a-z]+(-[a-z]+)*", a) for a in actions), actions
