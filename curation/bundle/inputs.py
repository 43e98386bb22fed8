"""Gathering what a bundle needs from the store, in one place.

Everything after this step (writing the files, the Data Package, the
provenance, the report) works on :class:`BundleInputs` alone and never
reads the store again, so a bundle is a function of these inputs and the
options.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any, Literal, get_args

import numpy as np
import pandas as pd
from pydantic import BaseModel, ConfigDict, Field, ValidationInfo, field_validator, model_validator
from sqlalchemy import select

from curation.errors import InputError, StaleError, check_choice
from curation.store.decisions import current_decisions
from curation.store.engine import Store
from curation.store.lineage import Lineage, get_tree_set, lineage_of
from curation.store.models import LedgerEvent, Measurement, Source, TraitSource, TreeSet
from curation.store.provenance import (
    events_in_force,
    lineage_findings,
    reviews_in_force,
    sources_in_force,
)
from curation.store.staleness import (
    Staleness,
    lineage_staleness,
    stale_measurement_ids,
    undecided_names,
)
from curation.traits.species import SourcePolicy
from curation.trees.arrays import TreeArrays
from curation.trees.stored import load_tree, load_tree_set

__all__ = [
    "MEASUREMENT_FIELDS",
    "BundleInputs",
    "BundleOptions",
    "MissingTips",
    "gather_bundle_inputs",
]

#: The columns of a measurement in a bundle (``measurements_used.csv`` adds
#: ``in_species_value``), in the order written.
MEASUREMENT_FIELDS = (
    "measurement_id",
    "tip_label",
    "trait",
    "written_name",
    "source_id",
    "trait_source",
    "row_number",
    "specimen_id",
    "institution",
    "sex",
    "life_stage",
    "value_written",
    "unit",
    "value",
    "target_unit",
    "factor",
    "status",
    "reason",
    "flags",
    "exclusion",
    "curator_excluded",
)


#: What a bundle does with tips that have no trait data.
MissingTips = Literal["prune", "keep"]


class BundleOptions(BaseModel):
    """The choices that shape a bundle (all recorded in its provenance)."""

    model_config = ConfigDict(frozen=True)

    tree_id: int | None = Field(None, description="one stored tree")
    tree_set_id: int | None = Field(None, description="a stored tree set (NEXUS output)")
    traits: list[str] | None = Field(None, description="traits to include (default: all)")
    missing: MissingTips = Field(
        "prune", description="prune tips without data, or keep them with missing values"
    )
    policy: SourcePolicy = Field(
        "pool", description="how measurements of several sources make one species value"
    )
    include_matrix: bool = Field(False, description="write the variance-covariance matrix")
    matrix_limit_bytes: int = Field(
        2_000_000_000, description="refuse a matrix that needs more memory than this"
    )
    make_zip: bool = Field(False, description="also write a zip of the bundle")
    diagnostics: bool = Field(True, description="phylogenetic diagnostics per continuous trait")
    permutations: int = Field(1000, ge=0, description="permutations of Blomberg's K test")
    seed: int = Field(0, description="seed of the permutations")
    allow_stale: bool = Field(
        False,
        description="make the bundle even when written names have no decision yet or "
        "measurements are not yet flagged, listing them in the accounting",
    )

    @field_validator("missing", "policy", mode="before")
    @classmethod
    def _one_of_the_values(cls, value: object, info: ValidationInfo) -> object:
        # Our own error, listing the values, instead of pydantic's.
        allowed = get_args(cls.model_fields[info.field_name].annotation)
        return check_choice(value, allowed, info.field_name)

    @model_validator(mode="after")
    def _one_tree_choice(self) -> BundleOptions:
        if (self.tree_id is None) == (self.tree_set_id is None):
            raise InputError(
                "a bundle needs exactly one of a tree or a tree set",
                field="tree",
                hint="give --tree ID for one tree or --tree-set ID for a set",
            )
        return self


@dataclass
class BundleInputs:
    """What the store holds for one bundle, already joined.

    Attributes:
        trees: (tree row id, name, array view) of every tree, in file order.
        tree_set: the tree set the trees belong to.
        lineage: the tree set's lineage; its origin's name decisions apply.
        decision_set_id: the lineage's origin (where the decisions are).
        staleness: what is not yet settled (names without a decision,
            measurements not yet flagged).
        undecided: every written name without a decision, sorted.
        unflagged: ids of the measurements not covered by the latest
            flagging.
        species: one row per (tip_label, trait) with kind, scale, unit, n,
            mean, sd, se, median, state and measurement_ids.
        measurements: the measurements of the chosen traits whose names map
            to a tip, with source, row, specimen identifiers, the tip, the
            status and whether a value went into a species value.
        names: the name decisions in force (one row per written name).
        findings: the latest findings of each check, with their event.
        sources: every stored source that fed the bundle.
        repairs: the chain of repairs from the original trees to these.
        exclusions: curators' exclusions and re-inclusions in force of the
            measurements of the trees' tips.
        events: the ledger events the bundle rests on, in order
            (:func:`curation.store.provenance.events_in_force`).
    """

    options: BundleOptions
    store_url: str
    trees: list[tuple[int, str, TreeArrays]]
    tree_set: dict[str, Any]
    lineage: Lineage
    decision_set_id: int
    staleness: Staleness
    undecided: list[str]
    unflagged: pd.DataFrame
    species: pd.DataFrame
    measurements: pd.DataFrame
    names: pd.DataFrame
    findings: pd.DataFrame
    sources: pd.DataFrame
    repairs: list[dict[str, Any]]
    exclusions: pd.DataFrame
    events: pd.DataFrame


def _repair_chain(session: Any, tree_set: TreeSet) -> list[dict[str, Any]]:
    chain: list[dict[str, Any]] = []
    current = tree_set
    while current.derived_from_id is not None:
        event = session.get(LedgerEvent, current.event_id) if current.event_id else None
        chain.append(
            {
                "tree_set_id": current.id,
                "derived_from_tree_set_id": current.derived_from_id,
                "repair": current.repair or "",
                "event_id": current.event_id,
                "who": event.who if event else "",
                "at": event.at.isoformat() if event else "",
                "parameters": event.parameters if event else {},
            }
        )
        current = get_tree_set(session, current.derived_from_id)
    chain.reverse()
    return chain


def _trait_sources(session: Any) -> pd.DataFrame:
    rows = session.execute(
        select(TraitSource.id, TraitSource.name, TraitSource.source_id).order_by(TraitSource.id)
    ).all()
    return pd.DataFrame(rows, columns=["trait_source_id", "trait_source", "source_id"])


def _curated(
    store: Store,
    tree_set_id: int,
    options: BundleOptions,
    trait_sources: pd.DataFrame,
    unflagged_ids: np.ndarray,
) -> tuple[pd.DataFrame, pd.DataFrame, pd.DataFrame]:
    """Species values by the traits stage; the measurements (of the chosen
    traits) with their tip, converted value, flags and whether they count;
    and those of them not yet flagged: read once for all three."""
    from curation.traits import aggregate_species, measurements_frame

    frame = measurements_frame(store, tree_set_id)
    if options.traits:
        frame = frame[frame["trait"].isin(options.traits)]
    species = aggregate_species(frame, traits=options.traits, policy=options.policy)
    # Only the columns a bundle writes are kept: the frame of the traits
    # stage has many more, and a bundle may hold a million measurements.
    source = trait_sources.set_index("trait_source_id")
    source_of = frame["trait_source_id"]
    measurements = pd.DataFrame(
        {
            "measurement_id": frame["id"],
            "source_id": source_of.map(source["source_id"]),
            "trait_source": source_of.map(source["trait_source"]),
            "target_unit": frame["target"],
            "curator_excluded": frame["review"].eq("exclude"),
            "used": ~frame["excluded"].astype(bool),
        }
    )
    for column in MEASUREMENT_FIELDS:
        if column not in measurements:
            measurements[column] = frame[column]
    measurements = measurements[[*MEASUREMENT_FIELDS, "used"]].reset_index(drop=True)
    unflagged = measurements[measurements["measurement_id"].isin(unflagged_ids)]
    return species, measurements, unflagged.reset_index(drop=True)


def _check_traits(session: Any, traits: list[str] | None) -> None:
    if not traits:
        return
    present = set(session.scalars(select(Measurement.trait).distinct()).all())
    unknown = [t for t in traits if t not in present]
    if unknown:
        raise InputError(
            f"no measurements of trait(s) {', '.join(map(repr, unknown))} "
            f"(traits stored: {', '.join(sorted(present)) or 'none'})",
            field="trait",
            hint="give one of the stored traits",
        )


def _refuse_stale(staleness: Staleness, undecided: int, unflagged: int, described: str) -> None:
    """Raise :class:`StaleError` when names or flags are not settled."""
    if not (undecided or unflagged):
        return
    problems = [
        p
        for p in staleness.problems()
        if (undecided and "name decision" in p) or (unflagged and "flagged" in p)
    ]
    raise StaleError(
        f"{described} rests on stages that are not settled: " + "; ".join(problems),
        field="tree set",
        hint="settle them first, or allow stale input (allow_stale) to make the bundle anyway "
        "with them listed in its accounting as not yet reconciled / not yet flagged",
    )


def _source_frame(sources: list[Source]) -> pd.DataFrame:
    return pd.DataFrame(
        [
            {
                "source_id": s.id,
                "kind": s.kind,
                "format": s.format,
                "file_name": s.file_name,
                "sha256": s.sha256,
                "size_bytes": s.size_bytes,
                "label": s.label,
                "citation": s.citation,
                "licence": s.licence,
                "imported_at": s.imported_at.isoformat(),
                "event_id": s.event_id,
            }
            for s in sources
        ]
    )


def _event_frame(session: Any, ids: list[int]) -> pd.DataFrame:
    rows = [
        {
            "event_id": e.id,
            "at": e.at.isoformat(),
            "who": e.who,
            "action": e.action,
            "subject": e.subject,
            "summary": e.summary,
            "parameters": e.parameters,
        }
        for e in session.scalars(
            select(LedgerEvent).where(LedgerEvent.id.in_(ids)).order_by(LedgerEvent.id)
        )
    ]
    return pd.DataFrame(
        rows, columns=["event_id", "at", "who", "action", "subject", "summary", "parameters"]
    )


def gather_bundle_inputs(store: Store, options: BundleOptions) -> BundleInputs:
    """Read everything a bundle needs from ``store``.

    The tree set's lineage decides which name decisions apply
    (:mod:`curation.store.lineage`). Unless ``options.allow_stale``, a
    bundle is refused while written names have no decision or measurements
    of its traits are not covered by the latest flagging
    (:mod:`curation.store.staleness`).

    Returns:
        :class:`BundleInputs`.

    Raises:
        NotFoundError: the tree or tree set is not in the store.
        StaleError: names without a decision or measurements not yet
            flagged (the message counts them and names what settles them).
        InputError: a trait asked for has no measurements, or a matrix is
            asked for a set of several trees.
    """
    with store.reading() as session:
        if options.tree_id is not None:
            tree_row, arrays = load_tree(session, options.tree_id)
            tree_set = get_tree_set(session, tree_row.tree_set_id)
            trees = [(tree_row.id, tree_row.name, arrays)]
        else:
            tree_set = get_tree_set(session, int(options.tree_set_id or 0))
            trees = [(t.id, t.name, a) for t, a in load_tree_set(session, tree_set.id)]
        if options.include_matrix and len(trees) != 1:
            raise InputError(
                f"a variance-covariance matrix is made for one tree; tree set {tree_set.id} "
                f"holds {len(trees)} trees",
                field="matrix",
                hint="choose one tree for the matrix, or leave the matrix out",
            )
        _check_traits(session, options.traits)
        lineage = lineage_of(session, tree_set.id)
        staleness = lineage_staleness(session, tree_set.id)
        undecided = undecided_names(session, lineage)
        unflagged_ids = stale_measurement_ids(session, tree_set.id, traits=options.traits)
        if not options.allow_stale:
            _refuse_stale(staleness, len(undecided), len(unflagged_ids), lineage.describe())
        names = current_decisions(session, tree_set.id)
        reviews = reviews_in_force(session)
        trait_sources = _trait_sources(session)
        sources = _source_frame(sources_in_force(session, lineage))
        repairs = _repair_chain(session, tree_set)
        findings = lineage_findings(session, lineage)
        tree_set_info = {
            "id": tree_set.id,
            "name": tree_set.name,
            "repair": tree_set.repair,
            "derived_from_id": tree_set.derived_from_id,
            "tree_count": tree_set.tree_count,
        }
    species, measurements, unflagged = _curated(
        store, tree_set.id, options, trait_sources, unflagged_ids
    )
    tips = pd.Index(sorted(set().union(*(set(a.tip_labels) for _, _, a in trees))))
    on_trees = measurements.loc[measurements["tip_label"].isin(tips), "measurement_id"]
    exclusions = reviews[reviews["measurement_id"].isin(on_trees)].reset_index(drop=True)
    with store.reading() as session:
        event_ids = events_in_force(
            session,
            lineage,
            traits=measurements["trait"].unique().tolist(),
            measurement_ids=on_trees.tolist(),
            finding_event_ids=findings["event_id"].unique().tolist() if len(findings) else [],
        )
        events = _event_frame(session, event_ids)
    return BundleInputs(
        options=options,
        store_url=store.display_url(),
        trees=trees,
        tree_set=tree_set_info,
        lineage=lineage,
        decision_set_id=lineage.origin_id,
        staleness=staleness,
        undecided=undecided,
        unflagged=unflagged,
        species=species.reset_index(drop=True),
        measurements=measurements,
        names=names,
        findings=findings,
        sources=sources,
        repairs=repairs,
        exclusions=exclusions,
        events=events,
    )
