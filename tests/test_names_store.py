"""Name decisions in the store: reconciling, reusing decisions across runs,
revising them, review sheets and terminal review, on every backend."""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import Levenshtein
import pandas as pd
import pytest
from sqlalchemy import func, select
from typer.testing import CliRunner

from curation.cli import app
from curation.errors import FormatError, InputError, NotFoundError
from curation.names import (
    decide_name,
    decision_history,
    export_review_sheet,
    import_review_sheet,
    pending_names,
    reconcile_names,
    summarise_names,
)
from curation.names.decisions import candidates_of, note_info
from curation.store import Store, current_decisions
from curation.store.models import LedgerEvent, NameDecision, Source, StoredFinding, Synonym
from curation.timestamps import now
from tests.names_helpers import seed_store

# The test tree:
#
#        +-- Aus_bus_V1
#     +--+
#     |  +-- Aus_alba
#  ---+
#     |  +-- Cus_dus
#     +--+
#     |  +-- Cus_dus_2
#     |
#     +-- Ius_jus
#     +-- Lorenzia_occidentalis
NEWICK = (
    "((Aus_bus_V1:1,Aus_alba:1):1,(Cus_dus:1,Cus_dus_2:1):1,Ius_jus:2,Lorenzia_occidentalis:2);"
)
WRITTEN = [
    "Aus bus",
    "Aus bus",  # repeated rows of one name: one decision
    "Aus albus",
    "Cus dus",
    "Ius jos",
    "Old name",
    "",
    "Zzz qqq",
]
SYNONYMS = [("Old name", "Ius jus")]


@pytest.fixture
def tree_set(store: Store) -> int:
    return seed_store(store, NEWICK, WRITTEN, SYNONYMS)


def _counts(store: Store) -> tuple[int, int]:
    with store.reading() as session:
        decisions = session.scalar(select(func.count(NameDecision.id)))
        events = session.scalar(select(func.count(LedgerEvent.id)))
    return int(decisions or 0), int(events or 0)


def _in_force(store: Store, tree_set: int) -> pd.DataFrame:
    with store.reading() as session:
        return current_decisions(session, tree_set).set_index("written_name")


def test_reconcile_records_decisions_findings_and_one_event(store: Store, tree_set: int) -> None:
    before = _counts(store)
    report = reconcile_names(store, tree_set, who="ada")
    after = _counts(store)
    assert after[1] == before[1] + 1  # exactly one ledger event
    assert after[0] - before[0] == report.new_decisions == 7
    assert (report.accepted, report.pending, report.rejected) == (3, 4, 0)
    assert report.stages["canonical"] == 2 and report.stages["synonym"] == 1
    decided = _in_force(store, tree_set)
    assert decided.loc["Aus bus", "tip_label"] == "Aus_bus_V1"
    assert decided.loc["Aus albus", ["stage", "status"]].tolist() == ["gender", "accepted"]
    assert decided.loc["Old name", "tip_label"] == "Ius_jus"
    assert decided.loc["Cus dus", "status"] == "pending"
    assert pd.isna(decided.loc["Cus dus", "tip_label"])
    assert decided.loc["Aus bus", "decided_by"] == "ada"
    assert report.names_without_tip == ["", "Cus dus", "Ius jos", "Zzz qqq"]
    assert report.tips_without_data == ["Cus_dus", "Cus_dus_2", "Lorenzia_occidentalis"]
    with store.reading() as session:
        codes = set(
            session.scalars(
                select(StoredFinding.code).where(StoredFinding.event_id == report.event_id)
            )
        )
    assert {"names.several_tips", "names.tip_collision", "names.unparseable"} <= codes
    # The candidates of a pending name are kept where review reads them.
    pending = pending_names(store, tree_set).set_index("written_name")
    assert [c[0] for c in pending.loc["Cus dus", "candidates"]] == ["Cus_dus", "Cus_dus_2"]


def test_decisions_are_reused_across_runs(store: Store, tree_set: int) -> None:
    reconcile_names(store, tree_set)
    decide_name(store, tree_set, "Ius jos", "Ius_jus", "accepted", "checked", who="bo")
    count = _counts(store)[0]
    again = reconcile_names(store, tree_set)
    # Accepted names are kept; unchanged pending names get no new row.
    assert again.new_decisions == 0 and _counts(store)[0] == count
    assert again.reused == 4
    assert _in_force(store, tree_set).loc["Ius jos", "decided_by"] == "bo"
    assert "Ius jos" not in set(pending_names(store, tree_set)["written_name"])


def test_revising_a_decision_keeps_the_old_one(store: Store, tree_set: int) -> None:
    reconcile_names(store, tree_set)
    first = _in_force(store, tree_set).loc["Aus bus", "decision_id"]
    result = decide_name(store, tree_set, "Aus bus", None, "rejected", "not this taxon")
    assert result.superseded_ids == [int(first)]
    history = decision_history(store, tree_set, "Aus bus")
    assert history["status"].tolist() == ["accepted", "rejected"]
    assert history["supersedes_id"].iloc[1] == first
    assert _in_force(store, tree_set).loc["Aus bus", "status"] == "rejected"


def test_bad_decision_changes_nothing(store: Store, tree_set: int) -> None:
    reconcile_names(store, tree_set)
    before = _counts(store)
    with pytest.raises(InputError) as caught:
        decide_name(store, tree_set, "Ius jos", "Ius_jsu", "accepted")
    assert "'Ius_jsu'" in caught.value.describe() and "Ius_jus" in caught.value.describe()
    with pytest.raises(InputError, match="in no measurement"):
        decide_name(store, tree_set, "Never written", "Ius_jus", "accepted")
    assert _counts(store) == before


def test_unknown_tree_set(store: Store) -> None:
    with pytest.raises(NotFoundError, match="no tree set 99"):
        reconcile_names(store, 99)


def _fill(path: Path, decisions: dict[str, tuple[str, str]]) -> None:
    sheet = pd.read_csv(path, dtype=str, keep_default_na=False)
    for name, (decision, tip) in decisions.items():
        sheet.loc[sheet["written_name"] == name, ["decision", "tip_label"]] = [decision, tip]
    sheet.to_csv(path, index=False)


def test_sheet_round_trip(store: Store, tree_set: int, tmp_path: Path) -> None:
    reconcile_names(store, tree_set)
    path = tmp_path / "review.csv"
    assert export_review_sheet(store, tree_set, path).rows == 4
    _fill(path, {"Cus dus": ("2", ""), "Ius jos": ("accept", ""), "Zzz qqq": ("reject", "")})
    result = import_review_sheet(store, tree_set, path, who="cy")
    assert (result.accepted, result.rejected, result.left_pending) == (2, 1, 1)
    decided = _in_force(store, tree_set)
    assert decided.loc["Cus dus", "tip_label"] == "Cus_dus_2"
    assert decided.loc["Ius jos", ["tip_label", "stage", "decided_by"]].tolist() == [
        "Ius_jus",
        "sheet",
        "cy",
    ]
    assert decided.loc["Zzz qqq", "status"] == "rejected"
    summary = summarise_names(store, tree_set)
    assert (summary.accepted, summary.pending, summary.rejected) == (5, 1, 1)


def test_sheet_with_problems_applies_nothing(store: Store, tree_set: int, tmp_path: Path) -> None:
    reconcile_names(store, tree_set)
    path = tmp_path / "review.csv"
    export_review_sheet(store, tree_set, path)
    _fill(
        path,
        {
            "Cus dus": ("accept", "Cus_duss"),  # unknown tip
            "Ius jos": ("maybe", ""),  # malformed decision
            "Zzz qqq": ("accept", ""),  # nothing to accept
            "": ("reject", ""),  # fine on its own
        },
    )
    before = _counts(store)
    with pytest.raises(InputError) as caught:
        import_review_sheet(store, tree_set, path)
    text = caught.value.describe()
    assert "3 problem(s)" in text and "nothing was applied" in text
    assert "row 3" in text and "'Cus_duss'" in text  # Cus dus is the second data row
    assert "'maybe'" in text and "no candidate to accept" in text
    assert _counts(store) == before


def test_sheet_missing_columns(store: Store, tree_set: int, tmp_path: Path) -> None:
    reconcile_names(store, tree_set)
    path = tmp_path / "bad.csv"
    path.write_text("written_name,choice\nCus dus,accept\n", encoding="utf-8")
    before = _counts(store)
    with pytest.raises(FormatError, match="lacks the column\\(s\\) 'decision', 'tip_label'"):
        import_review_sheet(store, tree_set, path)
    assert _counts(store) == before


def test_terminal_review_through_the_command_line(
    store: Store, store_url: str, tree_set: int
) -> None:
    reconcile_names(store, tree_set)
    runner = CliRunner()
    # Pending, in order: '' (no candidates), 'Cus dus', 'Ius jos', 'Zzz qqq'.
    # Keys: reject ''; pick 2 for Cus dus; undo (back to Cus dus); type a tip
    # with a typo (refused) then the right one; skip Ius jos; quit.
    keys = "r\n2\nu\nt\nCus_duss\nt\nCus_dus\ns\nq\n"
    result = runner.invoke(
        app, ["review-names", "--tree-set", str(tree_set), "--store", store_url], input=keys
    )
    assert result.exit_code == 0, result.output
    assert "Undone: 'Cus dus' is pending again." in result.output
    assert "'Cus_duss' is not a tip" in result.output
    # One rejection, one acceptance kept (the first pick of Cus dus undone).
    assert "accepted: 1" in result.output and "rejected: 1" in result.output
    assert "undone: 1" in result.output and "remaining: 2" in result.output  # Ius jos, Zzz qqq
    decided = _in_force(store, tree_set)
    assert decided.loc["", "status"] == "rejected"
    assert decided.loc["Cus dus", "tip_label"] == "Cus_dus"
    assert decided.loc["Ius jos", "status"] == "pending"
    history = decision_history(store, tree_set, "Cus dus")
    assert history["status"].tolist() == ["pending", "accepted", "pending", "accepted"]
    assert history["tip_label"].tolist()[1::2] == ["Cus_dus_2", "Cus_dus"]
    # Progress is kept: a second session starts with what is still pending.
    again = runner.invoke(
        app, ["review-names", "--tree-set", str(tree_set), "--store", store_url], input="q\n"
    )
    assert "[1/2] 'Ius jos'" in again.output


def test_names_commands_run(store: Store, store_url: str, tree_set: int, tmp_path: Path) -> None:
    runner = CliRunner()
    base = ["--tree-set", str(tree_set), "--store", store_url]
    ran = runner.invoke(app, ["reconcile-names", *base])
    assert ran.exit_code == 0, ran.output
    assert "accepted: 3" in ran.output
    shown = runner.invoke(app, ["show-names", *base])
    assert "pending: 4" in shown.output and "Tips without data (3)" in shown.output
    sheet = tmp_path / "s.csv"
    assert (
        runner.invoke(app, ["export-review-sheet", *base[:2], str(sheet), *base[2:]]).exit_code == 0
    )
    assert (
        "Wrote 4 pending names"
        in runner.invoke(app, ["export-review-sheet", *base[:2], str(sheet), *base[2:]]).output
    )
    decided = runner.invoke(app, ["decide-name", *base, "Zzz qqq", "--reject"])
    assert decided.exit_code == 0, decided.output
    assert _in_force(store, tree_set).loc["Zzz qqq", "status"] == "rejected"


def test_synonym_and_accepted_name_merge_under_one_tip(store: Store) -> None:
    tree_set = seed_store(store, NEWICK, ["Old name", "Ius jus"], SYNONYMS)
    report = reconcile_names(store, tree_set)
    shared = [f for f in report.findings if f.code == "names.shared_tip"]
    assert len(shared) == 1 and shared[0].subject == "Ius_jus"
    assert shared[0].details["written_names"] == ["Ius jus", "Old name"]
    assert shared[0].details["stages"] == ["canonical", "synonym"]
    assert "merged" in shared[0].message


def test_a_pending_name_is_matched_again_when_synonyms_arrive(store: Store) -> None:
    tree_set = seed_store(store, NEWICK, ["Old name"])
    reconcile_names(store, tree_set)
    first = _in_force(store, tree_set).loc["Old name"]
    assert (first["status"], first["stage"]) == ("pending", "unmatched")
    with store.transaction() as session:
        source = Source(
            sha256="d" * 64, size_bytes=1, kind="synonym", format="csv", file_name="s.csv",
            imported_at=now(),
        )  # fmt: skip
        session.add(source)
        session.flush()
        session.add(Synonym(source_id=source.id, synonym="Old name", accepted="Ius jus"))
    again = reconcile_names(store, tree_set)
    assert again.new_decisions == 1
    history = decision_history(store, tree_set, "Old name")
    assert history["stage"].tolist() == ["unmatched", "synonym"]
    assert history["supersedes_id"].iloc[1] == first["decision_id"]


def test_a_stale_sheet_is_refused(store: Store, tree_set: int, tmp_path: Path) -> None:
    reconcile_names(store, tree_set)
    path = tmp_path / "review.csv"
    export_review_sheet(store, tree_set, path)
    decide_name(store, tree_set, "Ius jos", "Ius_jus", "accepted")  # decided since the export
    _fill(path, {"Ius jos": ("accept", ""), "Cus dus": ("1", "")})
    before = _counts(store)
    with pytest.raises(InputError, match="'Ius jos' is not pending"):
        import_review_sheet(store, tree_set, path)
    assert _counts(store) == before


def _run_cli(*args: str) -> subprocess.CompletedProcess[str]:
    """Run ``python -m curation`` as a user would, in a real process."""
    return subprocess.run(
        [sys.executable, "-m", "curation", *args], capture_output=True, text=True, check=False
    )


# Five tips of one genus: a written "Vorsella sp." reaches all five at the
# genus stage, so its pending decision keeps five candidates.
FIVE_OF_A_GENUS = (
    "(Vorsella_alba:1,Vorsella_brevis:1,Vorsella_cana:1,Vorsella_dura:1,Vorsella_erecta:1);"
)


def test_a_sheet_refuses_a_candidate_it_does_not_show(
    store: Store, store_url: str, tmp_path: Path
) -> None:
    tree_set = seed_store(store, FIVE_OF_A_GENUS, ["Vorsella sp."])
    base = ["--tree-set", str(tree_set), "--store", store_url]
    assert _run_cli("reconcile-names", *base).returncode == 0
    stored = pending_names(store, tree_set).set_index("written_name")
    assert len(stored.loc["Vorsella sp.", "candidates"]) == 5  # the store keeps five
    path = tmp_path / "review.csv"
    exported = _run_cli("export-review-sheet", *base[:2], str(path), *base[2:])
    assert exported.returncode == 0, exported.stderr
    sheet = pd.read_csv(path, dtype=str, keep_default_na=False)
    shown = [c for c in sheet.columns if c.startswith("candidate_")]
    assert shown == ["candidate_1", "candidate_2", "candidate_3"]  # the sheet shows three
    _fill(path, {"Vorsella sp.": ("4", "")})
    before = _counts(store)
    refused = _run_cli("import-review-sheet", *base[:2], str(path), *base[2:])
    assert refused.returncode == 2, refused.stdout + refused.stderr
    message = refused.stdout + refused.stderr
    assert "Traceback" not in message
    # The file, the row (the header is row 1), the column and the valid range.
    assert f"{path}, row 2, field 'decision'" in message, message
    assert "'4'" in message and "1 to 3" in message, message
    assert _counts(store) == before  # nothing applied
    # A shown candidate is taken as shown.
    _fill(path, {"Vorsella sp.": ("3", "")})
    applied = _run_cli("import-review-sheet", *base[:2], str(path), *base[2:])
    assert applied.returncode == 0, applied.stdout + applied.stderr
    assert _in_force(store, tree_set).loc["Vorsella sp.", "tip_label"] == sheet.at[0, "candidate_3"]


def test_a_sheet_candidate_edited_or_outdated_is_refused(
    store: Store, tree_set: int, tmp_path: Path
) -> None:
    reconcile_names(store, tree_set)
    path = tmp_path / "review.csv"
    export_review_sheet(store, tree_set, path)
    sheet = pd.read_csv(path, dtype=str, keep_default_na=False)
    # 'Cus dus' shows Cus_dus and Cus_dus_2; its first cell now reads a tip
    # that is in the tree but is not one of the name's candidates.
    sheet.loc[sheet["written_name"] == "Cus dus", ["candidate_1", "decision"]] = ["Ius_jus", "1"]
    # No candidate columns at all on a copy: a number has nothing to pick.
    sheet.to_csv(path, index=False)
    bare = tmp_path / "bare.csv"
    sheet[["written_name", "decision", "tip_label"]].to_csv(bare, index=False)
    before = _counts(store)
    with pytest.raises(InputError) as caught:
        import_review_sheet(store, tree_set, path)
    text = caught.value.describe()
    assert "row 3, field 'candidate_1'" in text and "'Ius_jus'" in text, text
    assert "'Cus_dus', 'Cus_dus_2'" in text, text
    with pytest.raises(InputError) as caught:
        import_review_sheet(store, tree_set, bare)
    assert "row 3, field 'decision'" in caught.value.describe()
    assert "the row shows no candidates" in caught.value.describe()
    assert _counts(store) == before


# A written genus one letter from a tip's genus is another genus name: "If
# the difference between two genus-group names is due to one letter only,
# the names are not homonyms" (ICZN Art. 56.2; quoted from memory), so
# such a name may denote another genus, not a misspelling. A synonym table
# that moves a species to another genus is a recorded fact, not a guess.
GENERA = "(Corvella_ardens:1,Corvella_mitis:1,Ius_jus:1,Tamnia_fulva:1);"
GENUS_CHANGES = ["Korvella ardens", "Corvelka mitis", "Oldella fulva", "Ius jus"]


def test_a_change_of_genus_waits_for_review_unless_asked(
    store: Store, store_url: str, tmp_path: Path
) -> None:
    tree_set = seed_store(store, GENERA, GENUS_CHANGES, [("Oldella fulva", "Tamnia fulva")])
    base = ["--tree-set", str(tree_set), "--store", store_url]
    ran = _run_cli("reconcile-names", *base)
    assert ran.returncode == 0, ran.stdout + ran.stderr
    decided = _in_force(store, tree_set)
    # K for C: one substitution (Levenshtein package); the spelling stage
    # folds k to c, but the genus written is not the tip's.
    assert Levenshtein.distance("Korvella", "Corvella") == 1
    korvella = decided.loc["Korvella ardens"]
    assert (korvella["status"], korvella["stage"]) == ("pending", "spelling")
    assert korvella["score"] == 95.0 and pd.isna(korvella["tip_label"])
    # One substitution in an 8-letter genus, the epithet as in the tip:
    # score 100 * (1 - 1 / (8 + 5)), the fuzzy stage's documented formula.
    assert Levenshtein.distance("corvelka", "corvella") == 1
    corvelka = decided.loc["Corvelka mitis"]
    assert (corvelka["status"], corvelka["stage"]) == ("pending", "fuzzy")
    assert corvelka["score"] == pytest.approx(100 * (1 - 1 / 13), abs=0.01)
    for name, tip in [("Korvella ardens", "Corvella_ardens"), ("Corvelka mitis", "Corvella_mitis")]:
        assert candidates_of(decided.loc[name, "note"])[0][0] == tip
        assert "genus differs from the tip's" in note_info(decided.loc[name, "note"])["reason"]
    # A synonym that moves the species to another genus stays automatic.
    assert decided.loc["Oldella fulva", ["status", "stage", "tip_label"]].tolist() == [
        "accepted",
        "synonym",
        "Tamnia_fulva",
    ]
    assert decided.loc["Ius jus", "status"] == "accepted"
    # The review shows why each waits.
    review = subprocess.run(
        [sys.executable, "-m", "curation", "review-names", *base],
        input="s\ns\n",
        capture_output=True,
        text=True,
        check=False,
    )
    assert review.returncode == 0, review.stdout + review.stderr
    assert "'Corvelka mitis'  stage fuzzy; genus differs from the tip's" in review.stdout
    assert "'Korvella ardens'  stage spelling; genus differs from the tip's" in review.stdout
    # Asked for, they are accepted automatically, and the event says so.
    again = _run_cli("reconcile-names", *base, "--accept-genus-changes")
    assert again.returncode == 0, again.stdout + again.stderr
    decided = _in_force(store, tree_set)
    assert decided.loc["Korvella ardens", ["status", "tip_label"]].tolist() == [
        "accepted",
        "Corvella_ardens",
    ]
    assert decided.loc["Corvelka mitis", ["status", "tip_label"]].tolist() == [
        "accepted",
        "Corvella_mitis",
    ]
    with store.reading() as session:
        events = session.scalars(
            select(LedgerEvent)
            .where(LedgerEvent.action == "reconcile-names")
            .order_by(LedgerEvent.id)
        ).all()
        flags = [e.parameters["options"]["accept_genus_changes"] for e in events]
    assert flags == [False, True]
