"""Trait definitions, unit conversion, fault rules and curator reviews.

Conversions are checked against pint itself and NIST SP 811 (Appendix B:
1 in = 25.4 mm exactly, 1 lb = 0.45359237 kg exactly); fault rules against
slow, obviously correct references written row by row beside them."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pandas as pd
import pint
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from sqlalchemy import func, select

from curation.errors import InputError, NotFoundError
from curation.store import Store
from curation.store.models import (
    LedgerEvent,
    Measurement,
    MeasurementReview,
    NameDecision,
    Source,
    TraitDefinition,
    TraitSource,
    TreeSet,
)
from curation.timestamps import now
from curation.traits import (
    convert_values,
    define_traits,
    exclude_measurements,
    flag_measurements,
    include_measurements,
    measurements_frame,
    prepare_frame,
    species_values,
)
from curation.traits.definitions import DEFINITION_COLUMNS
from curation.trees.arrays import parse_newick
from curation.trees.stored import add_tree


def _counts(store: Store) -> tuple[int, int, int]:
    with store.reading() as session:
        return (
            session.scalar(select(func.count(TraitDefinition.id))),
            session.scalar(select(func.count(LedgerEvent.id))),
            session.scalar(select(func.count(MeasurementReview.id))),
        )


# --- definitions -----------------------------------------------------------


def test_definitions_from_toml_are_stored_with_one_event(store: Store, tmp_path: Path) -> None:
    path = tmp_path / "traits.toml"
    path.write_text(
        '[[trait]]\nname = "mass"\nunit = "g"\nscale = "log10"\nminimum = 0.1\n\n'
        '[[trait]]\nname = "diet"\nkind = "discrete"\nstates = ["plants", "animals"]\n'
        '[trait.state_map]\n"herbivore" = "plants"\n'
    )
    result = define_traits(store, path)
    assert result.added == ["diet", "mass"]
    assert _counts(store)[:2] == (2, 1)
    again = define_traits(store, path)
    assert again.unchanged == ["diet", "mass"] and not again.added


def test_unknown_unit_and_undefined_state_are_reported_and_nothing_stored(
    store: Store, tmp_path: Path
) -> None:
    path = tmp_path / "bad.json"
    path.write_text(
        json.dumps(
            [
                {"name": "mass", "unit": "grammz"},
                {
                    "name": "diet",
                    "kind": "discrete",
                    "states": ["plants"],
                    "state_map": {"carnivore": "animals"},
                },
            ]
        )
    )
    with pytest.raises(InputError) as caught:
        define_traits(store, path)
    text = caught.value.describe()
    assert "'grammz'" in text and "not a unit pint knows" in text
    assert "'animals'" in text and "not one of its states" in text
    assert len(caught.value.problems) == 2
    assert _counts(store) == (0, 0, 0)


# --- units -----------------------------------------------------------------


def test_conversions_agree_with_pint_and_nist() -> None:
    frame = pd.DataFrame(
        {
            "value_number": [1.0, 2.0, 3.0, 10.0, 1.0, 5.0, 7.0],
            "unit": ["in", "cm", "lb", "mm", "furlongs_nope", "g", None],
            "target": ["mm", "mm", "kg", "m", "mm", "mm", "g"],
        }
    )
    out = convert_values(frame)
    # NIST SP 811, Appendix B.8: 1 in = 2.54 cm exactly; 1 lb = 0.45359237 kg exactly.
    assert out.loc[0, "value"] == 25.4
    assert out.loc[0, "factor"] == pytest.approx(25.4, rel=1e-15)
    assert out.loc[2, "value"] == pytest.approx(3 * 0.45359237, rel=1e-15)
    ureg = pint.UnitRegistry()
    assert out.loc[1, "value"] == pytest.approx(ureg.Quantity(2.0, "cm").to("mm").magnitude)
    assert out.loc[3, "value"] == pytest.approx(ureg.Quantity(10.0, "mm").to("m").magnitude)
    assert list(out["unit_problem"]) == [
        "",
        "",
        "",
        "",
        "unknown_unit",
        "incompatible_unit",
        "no_unit",
    ]
    # Values that cannot be converted keep the number as written.
    assert out.loc[4, "value"] == 1.0 and np.isnan(out.loc[4, "factor"])


def test_temperatures_convert_with_their_offset() -> None:
    frame = pd.DataFrame({"value_number": [100.0], "unit": ["degF"], "target": ["degC"]})
    # NIST SP 811, 4.2.1.1: t/°C = (t/°F - 32) / 1.8.
    assert convert_values(frame).loc[0, "value"] == pytest.approx(100 / 1.8 - 32 / 1.8)


# --- fault rules on frames -------------------------------------------------


def _frame(values: list[float], *, tips: list[str] | None = None, unit: str = "mm") -> pd.DataFrame:
    n = len(values)
    return pd.DataFrame(
        {
            "id": np.arange(1, n + 1),
            "trait_source_id": 1,
            "priority": 100,
            "row_number": np.arange(2, n + 2),
            "written_name": tips or ["Alpha one"] * n,
            "tip_label": [t.replace(" ", "_") for t in (tips or ["Alpha one"] * n)],
            "specimen_id": [str(i) for i in range(n)],
            "institution": "ZMTV",
            "trait": "length",
            "value_written": [f"{v:.2f}" for v in values],
            "value_number": values,
            "unit": unit,
            "sex": None,
            "life_stage": None,
            "status": "ok",
        }
    )


DEFS = pd.DataFrame(
    [["length", "continuous", "mm", "ln", 0.0, 1000.0, [], {}, ""]], columns=DEFINITION_COLUMNS
)


def _reference_robust_z(values: list[float]) -> list[float]:
    """Slow reference: the median/MAD score of each log value, by hand."""
    logs = sorted(np.log(values))
    median = float(np.median(logs))
    mad = float(np.median([abs(x - median) for x in logs])) * 1.4826
    return [abs(np.log(v) - median) / mad for v in values]


def test_outlier_scores_agree_with_a_slow_reference() -> None:
    rng = np.random.default_rng(1)
    values = list(np.round(np.exp(rng.normal(4, 0.1, 30)), 2))
    values[5] = values[5] * 3
    out = prepare_frame(_frame(values), DEFS)
    reference = _reference_robust_z(values)
    # Where the MAD is above its floors the scores are Hampel's own.
    assert out["robust_z"].to_numpy() == pytest.approx(reference, rel=1e-9)
    assert out["outlier"].tolist() == [z > 5.0 for z in reference]
    assert out.loc[5, "exclusion"] == "outlier"


def test_unit_slips_impossible_values_and_duplicates() -> None:
    values = [50.0, 52.0, 49.0, 51.0, 500.0, -3.0, 0.0, 50.5]
    frame = _frame(values)
    frame.loc[7, "specimen_id"] = frame.loc[0, "specimen_id"]  # the same specimen again
    out = prepare_frame(frame, DEFS)
    assert out.loc[4, "unit_slip"] and out.loc[4, "slip_factor"] == 10.0
    assert out.loc[5, "impossible"] and out.loc[6, "impossible"]  # ln scale: zero is impossible
    assert out.loc[7, "duplicate_specimen"] and not out.loc[0, "duplicate_specimen"]
    assert out.loc[[4, 5, 6, 7], "excluded"].all() and not out.loc[[0, 1, 2, 3], "excluded"].any()


def test_an_inch_slip_is_recognised() -> None:
    # A value written in mm that was measured in inches: 25.4 times off.
    values = [20.0, 21.0, 19.5, 20.5, 20.0 / 25.4 * 1.0]
    out = prepare_frame(_frame(values), DEFS)
    assert out.loc[4, "unit_slip"] and out.loc[4, "slip_factor"] == 25.4


# Gallery of edge cases: one value, two values, an empty table.
@pytest.mark.parametrize("values", [[], [5.0], [5.0, 50.0]], ids=["empty", "one", "two"])
def test_small_groups_are_not_flagged(values: list[float]) -> None:
    out = prepare_frame(_frame(values), DEFS)
    assert len(out) == len(values)
    assert not out[["outlier", "unit_slip"]].to_numpy().any()


@settings(max_examples=30, deadline=None)
@given(st.lists(st.floats(1.0, 1000.0), min_size=1, max_size=12))
def test_species_mean_matches_numpy(values: list[float]) -> None:
    from curation.traits import aggregate_species

    out = prepare_frame(_frame(values), DEFS)
    result = aggregate_species(out)
    kept = np.log(out.loc[~out["excluded"], "value"].to_numpy())
    if len(kept) == 0:
        assert result.empty
        return
    assert result.loc[0, "n"] == len(kept)
    assert result.loc[0, "mean"] == pytest.approx(kept.mean(), rel=1e-12)


# --- store round trip: ORM rows, reviews, policies ---------------------------


@pytest.fixture
def small_store(store: Store) -> Store:
    """Two sources on two tips, inserted as ORM rows.

      +-- Alpha_one
    --+
      +-- Alpha_two
    """
    with store.transaction() as session:
        event = LedgerEvent(at=now(), who="t", action="test")
        session.add(event)
        session.flush()
        ids = []
        for k, priority in ((1, 10), (2, 20)):
            source = Source(
                sha256=str(k) * 64,
                size_bytes=1,
                kind="trait",
                format="csv",
                file_name=f"s{k}.csv",
                imported_at=now(),
            )
            session.add(source)
            session.flush()
            trait_source = TraitSource(
                source_id=source.id, name=f"s{k}", layout="long", priority=priority
            )
            session.add(trait_source)
            session.flush()
            ids.append(trait_source.id)
        tree_set = TreeSet(name="t", tree_count=0)
        session.add(tree_set)
        session.flush()
        add_tree(session, tree_set, parse_newick("(Alpha_one:1,Alpha_two:1);"), index_in_file=0)
        rows = [
            (ids[0], "Alpha one", 10.0, "mm", "F"),
            (ids[0], "Alpha one", 12.0, "mm", "M"),
            (ids[1], "Alpha one", 2.0, "cm", "F"),
            (ids[1], "Alpha one", 2.2, "cm", "F"),
            (ids[1], "Alpha two", 3.0, "cm", None),
        ]
        for number, (source_id, name, value, unit, sex) in enumerate(rows, start=2):
            session.add(
                Measurement(
                    trait_source_id=source_id,
                    row_number=number,
                    written_name=name,
                    trait="length",
                    value_written=str(value),
                    value_number=value,
                    unit=unit,
                    sex=sex,
                    status="ok",
                )
            )
        for name in ("Alpha one", "Alpha two"):
            session.add(
                NameDecision(
                    tree_set_id=tree_set.id,
                    written_name=name,
                    tip_label=name.replace(" ", "_"),
                    status="accepted",
                    stage="exact",
                    decided_by="t",
                    decided_at=now(),
                )
            )
        session.add(TraitDefinition(name="length", kind="continuous", unit="mm", scale="raw"))
    return store


def test_source_policies(small_store: Store) -> None:
    pooled = species_values(small_store, 1).set_index("tip_label")
    assert pooled.loc["Alpha_one", "n"] == 4
    assert pooled.loc["Alpha_one", "mean"] == pytest.approx(np.mean([10, 12, 20, 22]))
    preferred = species_values(small_store, 1, policy="priority").set_index("tip_label")
    assert preferred.loc["Alpha_one", "mean"] == pytest.approx(11.0)
    assert preferred.loc["Alpha_two", "mean"] == pytest.approx(30.0)  # the only source with data
    weighted = species_values(small_store, 1, policy="weighted").set_index("tip_label")
    # n-weighted source means: (2*11 + 2*21)/4; pooled within-source SD: sqrt((2+2)/(4-2)).
    assert weighted.loc["Alpha_one", "mean"] == pytest.approx(16.0)
    assert weighted.loc["Alpha_one", "sd"] == pytest.approx(np.sqrt(2.0))
    by_sex = species_values(small_store, 1, by_sex=True)
    assert set(by_sex["sex"]) == {"female", "male", "unknown"}


def test_exclusion_and_inclusion_are_recorded(small_store: Store) -> None:
    before = _counts(small_store)
    result = exclude_measurements(small_store, [1], "ruler broken", who="ana")
    assert _counts(small_store)[1:] == (before[1] + 1, 1)
    frame = measurements_frame(small_store, 1).set_index("id")
    assert frame.loc[1, "excluded"] and frame.loc[1, "exclusion"] == "curator"
    assert species_values(small_store, 1).set_index("tip_label").loc["Alpha_one", "n"] == 3
    include_measurements(small_store, [1], "checked again", who="ana")
    assert not measurements_frame(small_store, 1).set_index("id").loc[1, "excluded"]
    assert result.measurement_ids == [1]


def test_excluding_a_missing_measurement_changes_nothing(small_store: Store) -> None:
    before = _counts(small_store)
    with pytest.raises(NotFoundError) as caught:
        exclude_measurements(small_store, [1, 999], "typo")
    assert "999" in caught.value.describe() and "nothing was changed" in caught.value.describe()
    assert _counts(small_store) == before


def test_flag_measurements_writes_one_event(small_store: Store) -> None:
    before = _counts(small_store)
    report = flag_measurements(small_store, 1)
    assert _counts(small_store)[1] == before[1] + 1
    assert report.measurements == 5
    # Source 2 measures Alpha one at about twice source 1: a conflict.
    assert any(f.code == "trait.source_conflict" for f in report.findings)
