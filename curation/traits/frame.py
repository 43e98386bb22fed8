"""The measurements frame: every measurement with its tip, converted value,
factor, fault flags and whether it counts.

Flags are computed afresh from the store each time (they depend only on
the measurements, definitions, decisions in force and reviews), so species
values never depend on whether ``flag-measurements`` was run; that command
stores the same flags as findings for the record.

A measurement counts for species values (``excluded`` is False) when it is
matched to a tip by an accepted decision (of the tree set's lineage, see
:mod:`curation.store.lineage`) that the tree set holds, has a usable value
(a number in a convertible unit, or a known state) and carries no flag
that excludes it (:func:`curation.traits.faults.excluding_kind`, by each
kind's ``excludes`` in :data:`curation.traits.faults.FAULT_TABLE`) —
unless a curator's latest review includes or excludes it, which wins
either way.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
from sqlalchemy import func, select
from sqlalchemy.orm import Session

from curation.imports.measurements import MEASUREMENT_COLUMNS
from curation.store.decisions import current_decisions
from curation.store.engine import Store
from curation.store.frames import select_frame
from curation.store.lineage import get_tree_set, set_tip_labels
from curation.store.models import Measurement, MeasurementReview, TraitSource
from curation.traits.definitions import normalise_state, trait_definitions
from curation.traits.faults import FAULT_KINDS, FaultOptions, excluding_kind, find_faults
from curation.traits.units import convert_values

__all__ = [
    "RAW_COLUMNS",
    "load_measurements",
    "measurements_frame",
    "prepare_frame",
]

# The measurement's own columns as the importers store them (reason
# included, so a value kept as unparsed says why all the way to a bundle).
RAW_COLUMNS = ["id", "trait_source_id", "priority", *MEASUREMENT_COLUMNS]


def load_measurements(session: Session, tree_set_id: int) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Return the raw measurements (:data:`RAW_COLUMNS` plus ``tip_label``
    from the accepted decisions in force for the tree set's lineage,
    ``tip_in_set`` whether the set's own trees hold that tip, ``review`` and
    ``review_reason`` of the latest curator review) and the trait
    definitions."""
    frame = select_frame(
        session,
        select(
            Measurement.id,
            Measurement.trait_source_id,
            TraitSource.priority,
            *(getattr(Measurement, column) for column in MEASUREMENT_COLUMNS),
        )
        .join(TraitSource, TraitSource.id == Measurement.trait_source_id)
        .order_by(Measurement.id),
        RAW_COLUMNS,
    )
    frame["value_number"] = frame["value_number"].astype(float)
    decisions = current_decisions(session, tree_set_id)
    accepted = decisions[decisions["status"] == "accepted"]
    tips = pd.Series(accepted["tip_label"].to_numpy(), index=accepted["written_name"].to_numpy())
    # Text even when no name is matched yet (an all-missing map is float).
    frame["tip_label"] = frame["written_name"].map(tips).astype(frame["written_name"].dtype)
    # A set derived by pruning holds only some of the lineage's tips.
    held = pd.Index(set_tip_labels(session, tree_set_id))
    frame["tip_in_set"] = frame["tip_label"].isin(held)
    latest = select(func.max(MeasurementReview.id)).group_by(MeasurementReview.measurement_id)
    reviews = pd.DataFrame(
        session.execute(
            select(
                MeasurementReview.measurement_id, MeasurementReview.action, MeasurementReview.reason
            ).where(MeasurementReview.id.in_(latest))
        ).all(),
        columns=["id", "review", "review_reason"],
    )
    frame = frame.merge(reviews, on="id", how="left")
    return frame, trait_definitions(session)


def _trait_table(frame: pd.DataFrame, definitions: pd.DataFrame) -> pd.DataFrame:
    """One row per trait seen or defined: kind, target unit, scale, range.
    A trait without a definition is continuous when any value is a number."""
    seen = frame.groupby("trait", sort=True)["value_number"].count()
    table = definitions.set_index("name")[["kind", "unit", "scale", "minimum", "maximum"]]
    undefined = seen.index.difference(table.index)
    extra = pd.DataFrame(
        {
            "kind": np.where(seen.loc[undefined] > 0, "continuous", "discrete"),
            "unit": None,
            "scale": "raw",
            "minimum": np.nan,
            "maximum": np.nan,
        },
        index=undefined,
    )
    table = pd.concat([table, extra]) if len(table) else extra
    table.index.name = "trait"
    return table.rename(columns={"unit": "target"})


def _states(frame: pd.DataFrame, definitions: pd.DataFrame) -> pd.DataFrame:
    """Read each discrete value as a defined state (``state``) and whether
    it is one (``state_ok``), through the trait's mapping."""
    pairs = []
    for row in definitions.itertuples(index=False):  # one row per trait definition
        if row.kind != "discrete":
            continue
        for state in row.states:
            pairs.append((row.name, normalise_state(state), state))
        for written, state in row.state_map.items():
            canonical = {normalise_state(s): s for s in row.states}[normalise_state(state)]
            pairs.append((row.name, normalise_state(written), canonical))
    lookup = pd.DataFrame(pairs, columns=["trait", "written", "state"]).drop_duplicates(
        ["trait", "written"]
    )
    discrete = frame["kind"] == "discrete"
    written = frame["value_written"].where(discrete & (frame["status"] == "ok"))
    normal = written.dropna().astype(str).str.split().str.join(" ").str.casefold()
    keyed = pd.DataFrame({"trait": frame.loc[normal.index, "trait"], "written": normal})
    merged = keyed.merge(lookup, on=["trait", "written"], how="left")
    merged.index = normal.index
    defined = frame.loc[normal.index, "trait"].isin(set(lookup["trait"]))
    state = pd.Series(np.nan, index=frame.index, dtype=object)
    ok = pd.Series(False, index=frame.index)
    # A trait with no definition keeps its states as written (normalised).
    state.loc[normal.index] = merged["state"].where(defined, normal)
    ok.loc[normal.index] = (~defined) | merged["state"].notna()
    state.loc[normal.index] = state.loc[normal.index].where(ok.loc[normal.index], normal)
    return pd.DataFrame({"state": state, "state_ok": ok})


def prepare_frame(
    frame: pd.DataFrame, definitions: pd.DataFrame, options: FaultOptions | None = None
) -> pd.DataFrame:
    """Convert, read states, flag faults and decide what counts.

    ``frame`` holds :data:`RAW_COLUMNS` and ``tip_label`` (and optionally
    ``review``/``review_reason``). Returns it with: kind, target (unit),
    scale, minimum, maximum, value (in the target unit), factor, offset,
    unit_problem, state, one boolean column per fault kind, flags (the kinds
    joined by ``;``), excluded and exclusion (why, or empty).
    """
    frame = frame.copy()
    if "review" not in frame:
        frame["review"] = None
        frame["review_reason"] = None
    if "tip_in_set" not in frame:
        frame["tip_in_set"] = frame["tip_label"].notna()
    traits = _trait_table(frame, definitions)
    trait_codes, trait_names = pd.factorize(frame["trait"])
    per_trait = traits.reindex(pd.Index(trait_names, dtype=object))
    for column in ("kind", "target", "scale", "minimum", "maximum"):
        values = per_trait[column].to_numpy(dtype=object)
        frame[column] = values[trait_codes] if len(frame) else pd.Series(dtype=object)
    frame[["minimum", "maximum"]] = frame[["minimum", "maximum"]].astype(float)
    frame = frame.join(convert_values(frame))
    frame = frame.join(_states(frame, definitions))
    frame["number_ok"] = (frame["status"] == "ok") & frame["value_number"].notna()
    tip = frame["tip_label"]
    frame["group"] = tip.where(tip.notna(), "name:" + frame["written_name"].astype(str))
    frame["group"] = frame["group"].astype(object)
    codes, groups = pd.factorize(frame["group"])
    genera = pd.Index(groups, dtype=object).astype(str).str.split(r"[_ ]", n=1, regex=True).str[0]
    genus_codes, genus_names = pd.factorize(pd.Index(genera, dtype=object))
    frame["genus"] = (
        np.asarray(genus_names, dtype=object)[genus_codes[codes]] if len(groups) else ""
    )
    frame["trait_code"] = trait_codes
    frame["group_code"] = codes
    frame["genus_code"] = genus_codes[codes] if len(groups) else codes
    flags = find_faults(frame, options)
    frame = frame.join(flags)
    reason = excluding_kind(frame)
    bad = reason != ""
    continuous = frame["kind"] == "continuous"
    no_value = np.where(continuous, ~frame["number_ok"], frame["state"].isna())
    reason = np.where(
        no_value, np.where(frame["status"] != "ok", frame["status"], "no_value"), reason
    )
    unmatched = frame["tip_label"].isna().to_numpy()
    reason = np.where(unmatched, "no_tip", reason)
    excluded = bad | no_value | unmatched
    review = frame["review"].to_numpy(dtype=object)
    curator_in = (review == "include") & ~unmatched & ~no_value
    curator_out = review == "exclude"
    # Matched to a tip of the lineage that this tree set does not hold (pruned).
    off_set = ~unmatched & ~frame["tip_in_set"].to_numpy(dtype=bool)
    reason = np.where(off_set, "tip_not_in_tree_set", reason)
    curator_in = curator_in & ~off_set
    excluded = (excluded & ~curator_in) | curator_out | off_set
    reason = np.where(curator_out, "curator", np.where(curator_in, "", reason))
    frame["excluded"] = excluded
    frame["exclusion"] = reason
    # Each distinct combination of flags is spelled once, then looked up.
    marks = frame[list(FAULT_KINDS)].to_numpy(dtype=np.int64)
    mask = marks @ (1 << np.arange(len(FAULT_KINDS), dtype=np.int64))
    distinct, inverse = np.unique(mask, return_inverse=True)
    spelled = np.array(
        [";".join(k for i, k in enumerate(FAULT_KINDS) if m >> i & 1) for m in distinct],
        dtype=object,
    )
    frame["flags"] = spelled[inverse.reshape(-1)] if len(frame) else pd.Series(dtype=object)
    return frame.drop(
        columns=["number_ok", "group", "trait_code", "group_code", "genus_code", "tip_in_set"]
    )


def measurements_frame(
    store: Store, tree_set_id: int, *, options: FaultOptions | None = None
) -> pd.DataFrame:
    """Return every measurement with tip_label, converted value, factor,
    fault flags and excluded (see the module notes and :func:`prepare_frame`),
    sorted by measurement id.

    Raises:
        NotFoundError: no such tree set.
    """
    with store.reading() as session:
        get_tree_set(session, tree_set_id)
        raw, definitions = load_measurements(session, tree_set_id)
    return prepare_frame(raw, definitions, options).reset_index(drop=True)
