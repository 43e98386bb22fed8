"""Gathering what a bundle needs from the store, in one place.

Everything after this step (writing the files, the Data Package, the
provenance, the report) works on :class:`BundleInputs` alone and never
reads the store again, so a bundle is a function of these inputs and the
options.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any, Literal, get_args

import pandas as pd
from pydantic import BaseModel, ConfigDict, Field, ValidationInfo, field_validator, model_validator
from sqlalchemy import select

from curation.errors import InputError, check_choice
from curation.store.decisions import current_decisions
from curation.store.engine import Store
from curation.store.models import (
    LedgerEvent,
    MeasurementReview,
    Source,
    StoredFinding,
    TraitSource,
    Tree,
    TreeSet,
)
from curation.traits.species import SourcePolicy
from curation.trees.arrays import TreeArrays
from curation.trees.stored import get_tree_set, load_tree, load_tree_set

__all__ = [
    "MEASUREMENT_FIELDS",
    "BundleInputs",
    "BundleOptions",
    "MissingTips",
    "decision_tree_set",
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
        decision_set_id: the tree set whose name decisions apply (the
            original a derived set was repaired from).
        species: one row per (tip_label, trait) with kind, scale, unit, n,
            mean, sd, se, median, state and measurement_ids.
        measurements: the measurements of the chosen traits whose names map
            to a tip, with source, row, specimen identifiers, the tip, the
            status and whether a value went into a species value.
        names: the name decisions in force (one row per written name).
        findings: the latest findings of each check, with their event.
        sources: every stored source that fed the bundle.
        repairs: the chain of repairs from the original trees to these.
        exclusions: curators' exclusions and re-inclusions in force.
        events: the ledger events the bundle rests on.
    """

    options: BundleOptions
    store_url: str
    trees: list[tuple[int, str, TreeArrays]]
    tree_set: dict[str, Any]
    decision_set_id: int
    species: pd.DataFrame
    measurements: pd.DataFrame
    names: pd.DataFrame
    findings: pd.DataFrame
    sources: pd.DataFrame
    repairs: list[dict[str, Any]]
    exclusions: pd.DataFrame
    events: pd.DataFrame


def decision_tree_set(session: Any, tree_set: TreeSet) -> TreeSet:
    """Return the tree set whose name decisions apply to ``tree_set``: the
    set itself, or for a derived (repaired) set the original it came from
    (repairs keep tip labels, so the decisions carry over)."""
    current = tree_set
    seen = {current.id}
    while current.derived_from_id is not None and current.derived_from_id not in seen:
        current = get_tree_set(session, current.derived_from_id)
        seen.add(current.id)
    return current


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


def _reviews_in_force(session: Any) -> pd.DataFrame:
    latest = select(MeasurementReview).order_by(MeasurementReview.id)
    rows = [
        {
            "measurement_id": r.measurement_id,
            "action": r.action,
            "reason": r.reason,
            "who": r.who,
            "at": r.at.isoformat(),
            "event_id": r.event_id,
        }
        for r in session.scalars(latest)
    ]
    frame = pd.DataFrame(
        rows, columns=["measurement_id", "action", "reason", "who", "at", "event_id"]
    )
    return frame.drop_duplicates("measurement_id", keep="last").reset_index(drop=True)


def _curated(
    store: Store, decision_set_id: int, options: BundleOptions, trait_sources: pd.DataFrame
) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Species values by the traits stage, and the measurements (of the
    chosen traits) with their tip, converted value, flags and whether they
    count, read once for both."""
    from curation.traits import aggregate_species, measurements_frame

    frame = measurements_frame(store, decision_set_id)
    if options.traits:
        present = set(frame["trait"].unique())
        unknown = [t for t in options.traits if t not in present]
        if unknown:
            raise InputError(
                f"no measurements of trait(s) {', '.join(map(repr, unknown))} "
                f"(traits stored: {', '.join(sorted(present)) or 'none'})",
                field="trait",
                hint="give --trait with one of the stored traits",
            )
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
    measurements = measurements[[*MEASUREMENT_FIELDS, "used"]]
    return species, measurements.reset_index(drop=True)


def _findings(session: Any, tree_set_ids: set[int]) -> pd.DataFrame:
    """The findings of the latest event of each kind of check (a later
    check of the same thing supersedes an earlier one), leaving out checks
    of tree sets (and their trees) other than ``tree_set_ids``."""
    rows = session.execute(
        select(
            StoredFinding.id,
            StoredFinding.code,
            StoredFinding.severity,
            StoredFinding.subject,
            StoredFinding.message,
            StoredFinding.details,
            LedgerEvent.id,
            LedgerEvent.action,
            LedgerEvent.subject,
        )
        .join(LedgerEvent, StoredFinding.event_id == LedgerEvent.id)
        .order_by(StoredFinding.id)
    ).all()
    columns = [
        "finding_id",
        "code",
        "severity",
        "subject",
        "message",
        "details",
        "event_id",
        "event_action",
        "event_subject",
    ]
    frame = pd.DataFrame(rows, columns=columns)
    if frame.empty:
        return frame
    latest = frame.groupby(["event_action", "event_subject"])["event_id"].transform("max")
    frame = frame[frame["event_id"] == latest]
    tree_ids = set(session.scalars(select(Tree.id).where(Tree.tree_set_id.in_(tree_set_ids))).all())
    named = frame["event_subject"].str.extract(r"^tree (set )?(\d+)$")
    number = pd.to_numeric(named[1], errors="coerce")
    about_set = named[0].notna()
    elsewhere = (about_set & ~number.isin(tree_set_ids)) | (
        ~about_set & number.notna() & ~number.isin(tree_ids)
    )
    return frame[~elsewhere].reset_index(drop=True)


def gather_bundle_inputs(store: Store, options: BundleOptions) -> BundleInputs:
    """Read everything a bundle needs from ``store``.

    Returns:
        :class:`BundleInputs`.

    Raises:
        NotFoundError: the tree or tree set is not in the store.
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
                hint="give --tree ID for the matrix, or leave out --matrix",
            )
        original = decision_tree_set(session, tree_set)
        names = current_decisions(session, original.id)
        reviews = _reviews_in_force(session)
        trait_sources = _trait_sources(session)
        tree_source_ids = {
            sid
            for sid in session.scalars(
                select(Tree.source_id).where(Tree.tree_set_id == original.id)
            ).all()
            if sid is not None
        }
        if original.source_id is not None:
            tree_source_ids.add(original.source_id)
        sources = pd.DataFrame(
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
                for s in session.scalars(select(Source).order_by(Source.id))
                if s.kind != "tree" or s.id in tree_source_ids
            ]
        )
        events = pd.DataFrame(
            [
                {
                    "event_id": e.id,
                    "at": e.at.isoformat(),
                    "who": e.who,
                    "action": e.action,
                    "subject": e.subject,
                    "summary": e.summary,
                    "parameters": e.parameters,
                }
                for e in session.scalars(select(LedgerEvent).order_by(LedgerEvent.id))
            ]
        )
        repairs = _repair_chain(session, tree_set)
        chain = {tree_set.id, original.id} | {r["tree_set_id"] for r in repairs}
        findings = _findings(session, chain)
        tree_set_info = {
            "id": tree_set.id,
            "name": tree_set.name,
            "repair": tree_set.repair,
            "derived_from_id": tree_set.derived_from_id,
            "tree_count": tree_set.tree_count,
        }
    species, measurements = _curated(store, original.id, options, trait_sources)
    return BundleInputs(
        options=options,
        store_url=store.display_url(),
        trees=trees,
        tree_set=tree_set_info,
        decision_set_id=original.id,
        species=species.reset_index(drop=True),
        measurements=measurements,
        names=names,
        findings=findings,
        sources=sources,
        repairs=repairs,
        exclusions=reviews,
        events=events,
    )
