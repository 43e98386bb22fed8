"""What is in force for a lineage, and the ledger events behind it.

A bundle (or any view of a tree set) rests on records of the store: the
sources imported, the trait definitions, the name decisions, the curators'
reviews of measurements, the latest findings of each check and the repairs
that derived the tree set. Each record was written by one ledger event.
This module decides, in one place, which records are in force for a tree
set's lineage (:mod:`curation.store.lineage`) and which events those are,
so a bundle's provenance lists every event its content depends on and none
other, and ``show-store`` can tell when a bundle is older than them.
"""

from __future__ import annotations

from collections.abc import Iterable
from typing import Any

import pandas as pd
from pydantic import BaseModel, Field
from sqlalchemy import func, select
from sqlalchemy.orm import Session

from curation.store.actions import (
    CHECK_ACTIONS,
    DECISION_ACTIONS,
    DEFINITION_ACTIONS,
    FLAG_ACTIONS,
    IMPORT_ACTIONS,
    REVIEW_ACTIONS,
)
from curation.store.lineage import Lineage, lineage_of
from curation.store.models import (
    LedgerEvent,
    MeasurementReview,
    NameDecision,
    Source,
    StoredFinding,
    TraitDefinition,
    Tree,
    TreeSet,
)

__all__ = [
    "FINDING_FRAME_COLUMNS",
    "BundleAge",
    "bundle_ages",
    "events_in_force",
    "lineage_findings",
    "lineage_subjects",
    "reviews_in_force",
    "sources_in_force",
]

FINDING_FRAME_COLUMNS = [
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


def lineage_subjects(session: Session, lineage: Lineage) -> set[str]:
    """The ledger subjects of the sets on the path from the origin to the
    set asked about (``tree set N``) and of their trees (``tree N``): what
    a check or repair of what a bundle of that set holds is recorded
    under."""
    trees = session.scalars(select(Tree.id).where(Tree.tree_set_id.in_(lineage.path))).all()
    return {f"tree set {s}" for s in lineage.path} | {f"tree {t}" for t in trees}


def lineage_findings(session: Session, lineage: Lineage) -> pd.DataFrame:
    """Return the findings in force for a tree set: those of the latest check
    of each tree and tree set of :func:`lineage_subjects` (a later check of
    the same thing supersedes an earlier one), and of the latest flagging
    and reconciliation recorded for any member of the lineage.

    Returns:
        A DataFrame with :data:`FINDING_FRAME_COLUMNS`, in finding id order.
    """
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
    frame = pd.DataFrame(rows, columns=FINDING_FRAME_COLUMNS)
    if frame.empty:
        return frame
    about_trees = frame["event_action"].isin(CHECK_ACTIONS)
    checks = frame[about_trees & frame["event_subject"].isin(lineage_subjects(session, lineage))]
    checks = checks[
        checks["event_id"] == checks.groupby("event_subject")["event_id"].transform("max")
    ]
    others = frame[~about_trees & frame["event_subject"].isin(lineage.subjects())]
    others = others[
        others["event_id"] == others.groupby("event_action")["event_id"].transform("max")
    ]
    return pd.concat([checks, others]).sort_values("finding_id").reset_index(drop=True)


def reviews_in_force(session: Session) -> pd.DataFrame:
    """Return the latest curator review (exclude or include) of every
    reviewed measurement: measurement_id, action, reason, who, at (ISO
    text) and event_id, by measurement id."""
    latest = select(func.max(MeasurementReview.id)).group_by(MeasurementReview.measurement_id)
    rows = session.execute(
        select(
            MeasurementReview.measurement_id,
            MeasurementReview.action,
            MeasurementReview.reason,
            MeasurementReview.who,
            MeasurementReview.at,
            MeasurementReview.event_id,
        )
        .where(MeasurementReview.id.in_(latest))
        .order_by(MeasurementReview.measurement_id)
    ).all()
    frame = pd.DataFrame(
        rows, columns=["measurement_id", "action", "reason", "who", "at", "event_id"]
    )
    frame["at"] = frame["at"].map(lambda t: t.isoformat() if hasattr(t, "isoformat") else t)
    return frame


def sources_in_force(session: Session, lineage: Lineage) -> list[Source]:
    """Return the sources a view of the lineage rests on, by id: every trait
    and synonym source (all written names are accounted for, and synonyms
    shape the matching) and the tree sources of the lineage's origin."""
    tree_sources = set(
        session.scalars(select(Tree.source_id).where(Tree.tree_set_id == lineage.origin_id)).all()
    )
    origin = session.get(TreeSet, lineage.origin_id)
    if origin is not None and origin.source_id is not None:
        tree_sources.add(origin.source_id)
    return [
        s
        for s in session.scalars(select(Source).order_by(Source.id))
        if s.kind != "tree" or s.id in tree_sources
    ]


def events_in_force(
    session: Session,
    lineage: Lineage,
    *,
    traits: Iterable[str],
    measurement_ids: Iterable[int],
    finding_event_ids: Iterable[int],
) -> list[int]:
    """Return, sorted, the ids of every ledger event whose records are in
    force in a view of ``lineage``: the imports of
    :func:`sources_in_force`, the definitions of ``traits``, the lineage's
    name decisions in force, the reviews in force of ``measurement_ids``,
    the events of the findings shown (``finding_event_ids``), the latest
    check of each tree and tree set on the lineage's path (even one that
    found nothing), the latest flagging of the lineage, and the repairs that
    derived the sets on its path."""
    ids: set[int] = {int(s.event_id) for s in sources_in_force(session, lineage) if s.event_id}
    wanted_traits = sorted(set(traits))
    if wanted_traits:
        ids |= {
            int(e)
            for e in session.scalars(
                select(TraitDefinition.event_id).where(TraitDefinition.name.in_(wanted_traits))
            )
            if e is not None
        }
    latest = (
        select(func.max(NameDecision.id))
        .where(NameDecision.tree_set_id == lineage.origin_id)
        .group_by(NameDecision.written_name)
    )
    ids |= {
        int(e)
        for e in session.scalars(
            select(NameDecision.event_id).where(NameDecision.id.in_(latest)).distinct()
        )
        if e is not None
    }
    reviews = reviews_in_force(session)
    chosen = reviews["measurement_id"].isin(pd.Index(list(measurement_ids)))
    ids |= {int(e) for e in reviews.loc[chosen, "event_id"].unique()}
    ids |= {int(e) for e in finding_event_ids}
    subjects = sorted(lineage_subjects(session, lineage))
    ids |= {
        int(e)
        for e in session.scalars(
            select(func.max(LedgerEvent.id))
            .where(LedgerEvent.action.in_(CHECK_ACTIONS), LedgerEvent.subject.in_(subjects))
            .group_by(LedgerEvent.subject)
        )
        if e is not None
    }
    flagged = session.scalar(
        select(func.max(LedgerEvent.id)).where(
            LedgerEvent.action.in_(FLAG_ACTIONS),
            LedgerEvent.subject.in_(sorted(lineage.subjects())),
        )
    )
    if flagged is not None:
        ids.add(int(flagged))
    repaired = lineage.path[1:]  # the origin was imported, the rest derived by repairs
    ids |= {
        int(e)
        for e in session.scalars(select(TreeSet.event_id).where(TreeSet.id.in_(repaired)))
        if e is not None
    }
    return sorted(ids)


class BundleAge(BaseModel):
    """A bundle written from the store, and the later events it depends on."""

    event_id: int
    folder: str
    later_events: list[int] = Field(description="ids of later events it depends on")
    later_actions: dict[str, int] = Field(description="their count per action")

    @property
    def stale(self) -> bool:
        """Whether any later event changes what the bundle rests on."""
        return bool(self.later_events)

    def describe(self) -> str:
        """Say in words whether the bundle is up to date."""
        if not self.later_events:
            return f"bundle {self.folder} (event {self.event_id}) is up to date"
        listed = ", ".join(
            f"{a} x{n}" if n > 1 else a for a, n in sorted(self.later_actions.items())
        )
        return (
            f"bundle {self.folder} (event {self.event_id}) is older than "
            f"{len(self.later_events)} event(s) it depends on ({listed}); "
            "make it again to include them"
        )


def _age(event: LedgerEvent, later: list[LedgerEvent]) -> BundleAge:
    counts: dict[str, int] = {}
    for e in later:
        counts[e.action] = counts.get(e.action, 0) + 1
    return BundleAge(
        event_id=event.id,
        folder=event.subject,
        later_events=[e.id for e in later],
        later_actions=counts,
    )


def _bundle_lineage(session: Session, parameters: dict[str, Any]) -> Lineage | None:
    options = parameters.get("options") or {}
    set_id = options.get("tree_set_id")
    if set_id is None and options.get("tree_id") is not None:
        tree = session.get(Tree, int(options["tree_id"]))
        set_id = tree.tree_set_id if tree is not None else None
    if set_id is None or session.get(TreeSet, int(set_id)) is None:
        return None
    return lineage_of(session, int(set_id))


def bundle_ages(session: Session) -> list[BundleAge]:
    """Return, for every bundle the ledger records (oldest first), the later
    events of the kinds it depends on: imports of traits and synonyms,
    trait definitions, curators' reviews, and the decisions, flags and
    checks of its lineage (:func:`lineage_subjects`)."""
    bundles = session.scalars(
        select(LedgerEvent).where(LedgerEvent.action == "make-bundle").order_by(LedgerEvent.id)
    ).all()
    out = []
    for event in bundles:
        lineage = _bundle_lineage(session, event.parameters or {})
        if lineage is None:
            out.append(_age(event, []))
            continue
        tree_subjects = sorted(lineage_subjects(session, lineage))
        members = sorted(lineage.subjects())
        everywhere = (
            IMPORT_ACTIONS["trait"],
            IMPORT_ACTIONS["dwca"],
            IMPORT_ACTIONS["synonym"],
            *DEFINITION_ACTIONS,
            *REVIEW_ACTIONS,
        )
        later = session.scalars(
            select(LedgerEvent)
            .where(
                LedgerEvent.id > event.id,
                LedgerEvent.action.in_(everywhere)
                | (
                    LedgerEvent.action.in_((*DECISION_ACTIONS, *FLAG_ACTIONS))
                    & LedgerEvent.subject.in_(members)
                )
                | (LedgerEvent.action.in_(CHECK_ACTIONS) & LedgerEvent.subject.in_(tree_subjects)),
            )
            .order_by(LedgerEvent.id)
        ).all()
        out.append(_age(event, list(later)))
    return out
