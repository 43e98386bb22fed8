"""The demo's planted trait faults, from the generator's ground truth
(samples/truth/faults.csv), are all flagged, with few clean values flagged,
and the audit reports them by kind."""

from __future__ import annotations

from pathlib import Path

import pandas as pd
import pytest
from sqlalchemy import select

from curation.demo.pipeline import run_demo
from curation.store import Store, open_store
from curation.store.models import Source, StoredFinding, TraitSource
from curation.traits import audit_sources, measurements_frame, species_values
from curation.traits.faults import SPECIES_KINDS

# What each planted kind must be flagged as (at least one of).
EXPECTED = {
    "unit_slip": {"unit_slip", "out_of_range", "outlier", "source_conflict"},
    "outlier": {"outlier", "unit_slip"},
    "impossible": {"impossible"},
    "unknown_unit": {"unconverted"},
    "incompatible_unit": {"unconverted"},
    "state_conflict": {"state_conflict"},
    "duplicate": {"duplicate_specimen"},
    "exact_duplicate": {"exact_duplicate"},
    "source_conflict": {"source_conflict"},
}


@pytest.fixture(scope="module")
def demo(tmp_path_factory: pytest.TempPathFactory) -> tuple[Store, pd.DataFrame, pd.DataFrame]:
    folder = tmp_path_factory.mktemp("demo")
    run_demo(folder)
    store = open_store(Path(folder) / "tipledger.db")
    frame = measurements_frame(store, 1)
    with store.reading() as session:
        files = pd.DataFrame(
            session.execute(
                select(TraitSource.id, Source.file_name).join(
                    Source, Source.id == TraitSource.source_id
                )
            ).all(),
            columns=["trait_source_id", "file"],
        )
    frame = frame.merge(files, on="trait_source_id")
    truth = pd.read_csv(Path(folder) / "samples" / "truth" / "faults.csv")
    yield store, frame, truth
    store.close()


def test_every_planted_fault_is_flagged(demo: tuple[Store, pd.DataFrame, pd.DataFrame]) -> None:
    _, frame, truth = demo
    # The importers number a measurement by its line in the file.
    planted = truth.merge(
        frame[["file", "row_number", "trait", "id", "flags", "exclusion"]],
        left_on=["file", "line", "trait"],
        right_on=["file", "row_number", "trait"],
        how="left",
    )
    assert planted["id"].notna().all(), "every planted fault is a stored measurement"
    checked = planted[planted["kind"].isin(EXPECTED)]
    assert len(checked) >= 30
    for row in checked.itertuples():
        flags = set(str(row.flags).split(";"))
        assert flags & EXPECTED[row.kind], (row.kind, row.file, row.line, row.flags)
    # Faults that are no values at all stay out of species values.
    for kind in ("missing", "unparsed"):
        assert (planted.loc[planted["kind"] == kind, "exclusion"] != "").all()


def test_few_clean_values_are_flagged(demo: tuple[Store, pd.DataFrame, pd.DataFrame]) -> None:
    _, frame, truth = demo
    planted = truth.merge(
        frame, left_on=["file", "line", "trait"], right_on=["file", "row_number", "trait"]
    )["id"]
    clean = frame[~frame["id"].isin(planted) & (frame["status"] == "ok")]
    per_value = [
        k
        for k in (
            "unconverted",
            "impossible",
            "out_of_range",
            "unit_slip",
            "outlier",
            "duplicate_specimen",
            "unknown_state",
        )
    ]
    flagged = clean[per_value].any(axis=1)
    assert len(clean) > 3000
    assert flagged.mean() <= 0.01, clean.loc[flagged, "flags"].value_counts().to_dict()
    assert set(SPECIES_KINDS).isdisjoint(per_value)


def test_audit_reports_faults_by_kind(demo: tuple[Store, pd.DataFrame, pd.DataFrame]) -> None:
    store, frame, _ = demo
    audit = audit_sources(store, 1)
    sources = audit.sources.set_index("file_name")
    # Source 2 (cm and kg, decimal commas) carries the planted unit slips.
    assert sources.loc["traits_long.tsv", "fault_unit_slip"] >= 5
    assert sources.loc["occurrences_dwca.zip", "fault_unconverted"] == 2
    assert sources["fault_duplicate_specimen"].sum() == frame["duplicate_specimen"].sum()
    cm = audit.conversions[
        (audit.conversions["unit"] == "cm") & (audit.conversions["target"] == "mm")
    ]
    assert (cm["factor"] == 10.0).all() and len(cm)  # NIST SP 811: 1 cm = 10 mm exactly
    data = audit.to_dict()
    assert data["tips"] == 200 and len(data["coverage"]) == 5


def test_species_values_for_every_matched_tip_with_data(
    demo: tuple[Store, pd.DataFrame, pd.DataFrame],
) -> None:
    store, frame, _ = demo
    values = species_values(store, 1)
    counted = frame[~frame["excluded"]]
    expected = set(zip(counted["tip_label"], counted["trait"], strict=True))
    assert set(zip(values["tip_label"], values["trait"], strict=True)) == expected
    ids = {i for row in values["measurement_ids"] for i in row}
    assert ids == set(counted["id"])


def test_the_demo_stored_fault_findings(demo: tuple[Store, pd.DataFrame, pd.DataFrame]) -> None:
    store, _, _ = demo
    with store.reading() as session:
        codes = set(
            session.scalars(select(StoredFinding.code).where(StoredFinding.code.like("trait.%")))
        )
    assert {"trait.unit_slip", "trait.duplicate_specimen", "trait.impossible"} <= codes
