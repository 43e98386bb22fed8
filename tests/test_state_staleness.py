"""Nothing goes missing silently: written names imported after the last
reconciliation and measurements not covered by the last flagging are
counted by ``show-store`` and refused by ``make-bundle`` unless asked, and
then listed in the bundle's accounting (the staleness rule of
:mod:`curation.store.staleness`).

Every check runs through the command line on a copy of the demo store.
The expectations are counts of what the test itself added to the store.
"""

from __future__ import annotations

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

TREE_SET = 1
NEW_NAME = "Quorvella imaginata"  # invented, in no source of the demo


def run_cli(*args: str, store: Path) -> Result:
    return CliRunner().invoke(app, [*args, "--store", str(store)])


def ok(result: Result) -> str:
    assert result.exit_code == 0, result.output + repr(result.exception)
    return result.output


def refused(*args: str, store: Path) -> str:
    """Run a command that must be refused, as a user would (a real process):
    exit status 2, a message, no traceback. Returns the message."""
    done = subprocess.run(
        [sys.executable, "-m", "curation", *args, "--store", str(store)],
        capture_output=True,
        text=True,
        check=False,
    )
    output = done.stdout + done.stderr
    assert done.returncode == 2, output
    assert "Traceback" not in output
    return " ".join(output.split())  # the message as one line, however wrapped


@pytest.fixture(scope="module")
def demo_store(tmp_path_factory: pytest.TempPathFactory) -> Iterator[Path]:
    folder = tmp_path_factory.mktemp("stale")
    run_demo(folder)
    yield folder / "tipledger.db"


@pytest.fixture
def store(demo_store: Path, tmp_path: Path) -> Path:
    copy = tmp_path / "store.db"
    shutil.copyfile(demo_store, copy)
    return copy


def _late_table(tmp_path: Path) -> Path:
    """Two measurements: one of a name the demo knows, one of a new name."""
    with sqlite3.connect(tmp_path / "store.db") as db:
        known = db.execute(
            "SELECT written_name FROM name_decisions WHERE status = 'accepted' "
            "ORDER BY written_name"
        ).fetchone()[0]
    path = tmp_path / "late.csv"
    path.write_text(
        f"taxon,trait,value,unit\n{known},body_length,170,mm\n{NEW_NAME},body_length,50,mm\n",
        encoding="utf-8",
    )
    return path


def _ledger_size(store: Path) -> int:
    with sqlite3.connect(store) as db:
        return int(db.execute("SELECT COUNT(*) FROM ledger_events").fetchone()[0])


def _dump(store: Path) -> list[tuple]:
    with sqlite3.connect(store) as db:
        return [
            row
            for table in ("ledger_events", "name_decisions", "findings", "measurements")
            for row in db.execute(f"SELECT * FROM {table} ORDER BY id")
        ]


def test_a_settled_store_is_shown_settled(store: Path) -> None:
    shown = ok(run_cli("show-store", store=store))
    # The demo reconciled and flagged tree set 1 only; set 2 (the posterior)
    # was never reconciled, and says so.
    assert "of tree set 1" not in shown
    assert "reconcile the names of tree set 2" in shown


def test_names_and_measurements_imported_late_are_counted_and_refused(
    store: Path, tmp_path: Path
) -> None:
    ok(run_cli("import-traits", str(_late_table(tmp_path)), "--layout", "long", store=store))
    shown = ok(run_cli("show-store", store=store))
    assert "1 written name of 257 has no name decision yet" in shown
    assert "reconcile the names of tree set 1" in shown
    assert "2 measurements of 4402 are not yet flagged" in shown
    assert "flag the measurements of tree set 1" in shown

    before = _dump(store)
    folder = tmp_path / "bundle"
    message = refused("make-bundle", str(folder), "--tree-set", str(TREE_SET), store=store)
    assert not folder.exists()
    assert "1 written name of 257 has no name decision yet" in message
    assert "2 measurements of 4402 are not yet flagged" in message
    assert "--allow-stale" in message
    assert _dump(store) == before  # nothing recorded


def test_a_stale_bundle_on_request_lists_what_is_stale(store: Path, tmp_path: Path) -> None:
    ok(run_cli("import-traits", str(_late_table(tmp_path)), "--layout", "long", store=store))
    folder = tmp_path / "bundle"
    made = ok(
        run_cli(
            "make-bundle",
            str(folder),
            "--tree-set",
            str(TREE_SET),
            "--allow-stale",
            "--no-diagnostics",
            store=store,
        )
    )
    assert "1 written name has no name decision yet" in made
    accounting = pd.read_csv(folder / "accounting.csv", keep_default_na=False)
    names = accounting[accounting["kind"] == "written name"]
    assert names.loc[names["status"] == "not yet reconciled", "name"].tolist() == [NEW_NAME]
    with sqlite3.connect(store) as db:
        written = db.execute("SELECT COUNT(DISTINCT written_name) FROM measurements").fetchone()[0]
        late = [
            r[0]
            for r in db.execute(
                "SELECT id FROM measurements WHERE trait_source_id = "
                "(SELECT MAX(id) FROM trait_sources) ORDER BY id"
            )
        ]
    # Every written name of the store is accounted for, once.
    assert len(names) == written and names["name"].is_unique
    unflagged = accounting[accounting["status"] == "not yet flagged"]
    assert sorted(unflagged["name"]) == sorted(f"measurement {i}" for i in late)
    # The report counts what the accounting holds.
    page = (folder / "report.html").read_text(encoding="utf-8")
    assert '<td>written names not yet reconciled</td><td class="num">1</td>' in page
    assert '<td>measurements not yet flagged</td><td class="num">2</td>' in page


def test_settling_the_stages_lifts_the_refusal(store: Path, tmp_path: Path) -> None:
    ok(run_cli("import-traits", str(_late_table(tmp_path)), "--layout", "long", store=store))
    ok(run_cli("reconcile-names", "--tree-set", str(TREE_SET), store=store))
    still = refused("make-bundle", str(tmp_path / "b1"), "--tree-set", "1", store=store)
    assert "not yet flagged" in still and "no name decision" not in still
    ok(run_cli("flag-measurements", "--tree-set", str(TREE_SET), store=store))
    ok(
        run_cli(
            "make-bundle", str(tmp_path / "b2"), "--tree-set", "1", "--no-diagnostics", store=store
        )
    )
    assert "of tree set 1" not in ok(run_cli("show-store", store=store))


def test_a_changed_definition_makes_the_flags_stale(store: Path, tmp_path: Path) -> None:
    definitions = tmp_path / "traits.toml"
    definitions.write_text(
        '[[trait]]\nname = "tail_length"\nkind = "continuous"\nunit = "mm"\n'
        'scale = "raw"\nminimum = 1.0\nmaximum = 500.0\n',
        encoding="utf-8",
    )
    ok(run_cli("define-traits", str(definitions), store=store))
    with sqlite3.connect(store) as db:
        tails = db.execute(
            "SELECT COUNT(*) FROM measurements WHERE trait = 'tail_length'"
        ).fetchone()[0]
    shown = ok(run_cli("show-store", store=store))
    assert f"{tails} measurements of 4400 are not yet flagged" in shown
    assert "redefined since: tail_length" in shown
    assert "tail_length" in refused(
        "make-bundle", str(tmp_path / "b"), "--tree-set", "1", store=store
    )
    # A bundle of other traits rests on no stale flag.
    ok(
        run_cli(
            "make-bundle",
            str(tmp_path / "b"),
            "--tree-set",
            "1",
            "--trait",
            "body_mass",
            "--no-diagnostics",
            store=store,
        )
    )


def test_a_bundle_older_than_its_events_is_shown(store: Path, tmp_path: Path) -> None:
    assert "is older than" not in ok(run_cli("show-store", store=store))
    with sqlite3.connect(store) as db:
        measurement = db.execute("SELECT MIN(id) FROM measurements").fetchone()[0]
    ok(
        run_cli(
            "exclude-measurement",
            "--id",
            str(measurement),
            "--reason",
            "smudged label",
            store=store,
        )
    )
    shown = " ".join(ok(run_cli("show-store", store=store)).split())
    assert "is older than 1 event(s) it depends on (exclude-measurements)" in shown


def test_pending_names_are_kept_apart_from_rejected_ones(store: Path, tmp_path: Path) -> None:
    with sqlite3.connect(store) as db:
        pending = db.execute(
            "SELECT written_name FROM name_decisions WHERE status = 'pending' ORDER BY written_name"
        ).fetchall()
    rejected = pending[0][0]
    ok(
        run_cli(
            "decide-name", rejected, "--tree-set", "1", "--reject", "--note", "a ghost", store=store
        )
    )
    folder = tmp_path / "bundle"
    made = ok(
        run_cli("make-bundle", str(folder), "--tree-set", "1", "--no-diagnostics", store=store)
    )
    waiting = len(pending) - 1
    assert f"warning: {waiting} written names still wait for review" in made
    accounting = pd.read_csv(folder / "accounting.csv", keep_default_na=False)
    names = accounting[accounting["kind"] == "written name"].set_index("name")
    assert names.loc[rejected, "status"] == "rejected"
    assert (names["status"] == "pending review").sum() == waiting
    assert "excluded" not in set(names.loc[[p[0] for p in pending[1:]], "status"])
    page = (folder / "report.html").read_text(encoding="utf-8")
    assert f'<td>written names pending review</td><td class="num">{waiting}</td>' in page
    assert '<td>written names rejected</td><td class="num">1</td>' in page
