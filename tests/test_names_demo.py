"""The names stage on the demo scenario: the acceptance bar of the stage,
checked against the scenario's ground truth (invented data; the matcher's
computations are checked against outside references in test_names_match)."""

from __future__ import annotations

from pathlib import Path

import pytest

from curation.demo.pipeline import demo_name_decisions
from curation.names.decisions import candidates_of


@pytest.mark.slow  # imports the whole demo scenario into a store (several seconds)
def test_every_demo_name_is_matched_or_waits_with_its_true_tip(tmp_path: Path) -> None:
    truth, decided = demo_name_decisions(tmp_path)
    merged = truth.merge(decided, on="written_name", how="left", validate="one_to_one")
    assert merged["status"].notna().all()  # every written name has a decision
    accepted = merged[merged["status"] == "accepted"]
    wrong = accepted[accepted["tip_label"] != accepted["true_tip"]]
    assert wrong.empty, wrong[["written_name", "true_tip", "tip_label", "stage"]]
    corrupted = merged[(merged["true_tip"] != "") & (merged["status"] != "accepted")]
    assert len(corrupted) > 5
    for row in corrupted.itertuples(index=False):
        assert row.status == "pending", row.written_name
        assert row.true_tip in [c[0] for c in candidates_of(row.note)], row.written_name
    # Names of species with no tip are never accepted.
    assert (merged.loc[merged["true_tip"] == "", "status"] != "accepted").all()
