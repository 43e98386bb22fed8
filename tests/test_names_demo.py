"""The names stage on the demo scenario: the acceptance bar of the stage,
checked against the scenario's ground truth (invented data; the matcher's
computations are checked against outside references in test_names_match)."""

from __future__ import annotations

from pathlib import Path

import pandas as pd
import pytest

from curation.demo.pipeline import run_demo
from curation.names.decisions import candidates_of
from curation.store import current_decisions, ledger_frame, open_store


@pytest.mark.slow  # builds the whole demo store (about 10 s)
def test_every_demo_name_is_matched_or_waits_with_its_true_tip(tmp_path: Path) -> None:
    run_demo(tmp_path)
    truth = pd.read_csv(tmp_path / "samples" / "truth" / "names.csv", keep_default_na=False)
    with open_store(tmp_path / "tipledger.db") as store, store.reading() as session:
        events = ledger_frame(session, "reconcile-names")
        tree_set = int(events["parameters"].iloc[-1]["tree_set_id"])
        decided = current_decisions(session, tree_set)
    merged = truth.merge(decided, on="written_name", how="left", validate="one_to_one")
    assert merged["status"].notna().all()  # every written name has a decision
    accepted = merged[merged["status"] == "accepted"]
    wrong = accepted[accepted["tip_label"] != accepted["true_tip"]]
    assert wrong.empty, wrong[["written_name", "true_tip", "tip_label", "stage"]]
    corrupted = merged[(merged["true_tip"] != "") & (merged["status"] != "accepted")]
    for row in corrupted.itertuples(index=False):
        assert row.status == "pending", row.written_name
        assert row.true_tip in [c[0] for c in candidates_of(row.note)], row.written_name
    # Names of species with no tip are never accepted.
    assert (merged.loc[merged["true_tip"] == "", "status"] != "accepted").all()
