"""Staleness: what a later stage would build on that an earlier stage has
not yet settled.

Two stages leave state that later stages trust:

- name reconciliation: every written name of the measurements should have
  a decision in its lineage (:mod:`curation.store.lineage`); a name imported
  after the last ``reconcile-names`` has none, so nothing maps it to a tip;
- fault flags: ``flag-measurements`` records the flags of every measurement
  as findings. A measurement imported after the last flagging of its
  lineage, or of a trait whose definition changed since, is not covered by
  that record.

:func:`lineage_staleness` counts both for one tree set; every command that
builds on these stages asks it (a bundle refuses by default, ``show-store``
lists it), so no two commands see the store differently.
"""

from __future__ import annotations

import numpy as np
from pydantic import BaseModel, Field
from sqlalchemy import func, select
from sqlalchemy.orm import Session

from curation.store.actions import DECISION_ACTIONS, FLAG_ACTIONS
from curation.store.lineage import Lineage, lineage_of
from curation.store.models import (
    LedgerEvent,
    Measurement,
    NameDecision,
    Source,
    TraitDefinition,
    TraitSource,
    TreeSet,
)

__all__ = [
    "Staleness",
    "lineage_staleness",
    "stale_measurement_ids",
    "store_staleness",
    "undecided_names",
]

#: Most names or traits listed by name in a :class:`Staleness`.
LISTED = 20


class Staleness(BaseModel):
    """What is not yet settled for the lineage of one tree set.

    ``undecided`` written names have no name decision in the lineage;
    ``unflagged`` measurements are not covered by the lineage's latest
    ``flag-measurements`` (imported after it, or of a trait redefined after
    it; all of them when the lineage was never flagged). ``pending`` names
    have a decision that still waits for review: not stale, but not settled
    either.
    """

    tree_set_id: int
    origin_id: int = Field(description="the lineage's origin, where decisions are stored")
    written_names: int
    undecided: int = Field(description="written names without a decision")
    undecided_examples: list[str] = Field(description=f"up to {LISTED} of them, sorted")
    pending: int = Field(description="names whose decision waits for review")
    measurements: int
    unflagged: int = Field(description="measurements not covered by the latest flagging")
    imported_since_flagging: int
    redefined_since_flagging: list[str] = Field(
        description="traits whose definition changed after the latest flagging"
    )
    last_reconcile_event: int | None
    last_flag_event: int | None

    @property
    def stale(self) -> bool:
        """Whether anything is undecided or unflagged."""
        return bool(self.undecided or self.unflagged)

    def problems(self) -> list[str]:
        """Say what is stale, one sentence per stage, each naming the step
        (and tree set) that settles it; empty when nothing is."""
        out = []
        if self.undecided:
            examples = ", ".join(repr(n) for n in self.undecided_examples[:3])
            more = ", ..." if self.undecided > 3 else ""
            out.append(
                f"{_count(self.undecided, 'written name')} of {self.written_names} "
                f"{'has' if self.undecided == 1 else 'have'} no name decision yet "
                f"({examples}{more}); reconcile the names of tree set {self.origin_id} "
                "to settle them"
            )
        if self.unflagged:
            if self.last_flag_event is None:
                why = "the measurements were never flagged"
            else:
                parts = []
                if self.imported_since_flagging:
                    parts.append(f"{self.imported_since_flagging} imported since")
                if self.redefined_since_flagging:
                    parts.append(
                        "of trait(s) redefined since: "
                        + ", ".join(self.redefined_since_flagging[:5])
                    )
                why = (
                    f"not covered by the latest flagging (event {self.last_flag_event}): "
                    + "; ".join(parts)
                )
            out.append(
                f"{_count(self.unflagged, 'measurement')} of {self.measurements} "
                f"{'is' if self.unflagged == 1 else 'are'} not yet flagged ({why}); "
                f"flag the measurements of tree set {self.origin_id} to settle them"
            )
        return out


def _count(n: int, noun: str) -> str:
    return f"{n} {noun}" if n == 1 else f"{n} {noun}s"


def _latest_event(session: Session, actions: tuple[str, ...], lineage: Lineage) -> int | None:
    value = session.scalar(
        select(func.max(LedgerEvent.id)).where(
            LedgerEvent.action.in_(actions), LedgerEvent.subject.in_(sorted(lineage.subjects()))
        )
    )
    return None if value is None else int(value)


def undecided_names(session: Session, lineage: Lineage) -> list[str]:
    """Return the sorted written names of the measurements that have no name
    decision in ``lineage``."""
    decided = select(NameDecision.written_name).where(NameDecision.tree_set_id == lineage.origin_id)
    rows = session.scalars(
        select(Measurement.written_name)
        .where(Measurement.written_name.not_in(decided))
        .distinct()
        .order_by(Measurement.written_name)
    ).all()
    return list(rows)


def _redefined(session: Session, last_flag: int | None) -> list[str]:
    if last_flag is None:
        return []
    return list(
        session.scalars(
            select(TraitDefinition.name)
            .where(TraitDefinition.event_id > last_flag)
            .order_by(TraitDefinition.name)
        ).all()
    )


def stale_measurement_ids(
    session: Session, tree_set_id: int, *, traits: list[str] | None = None
) -> np.ndarray:
    """Return the ids (sorted, int64) of the measurements (of ``traits``,
    default all) the latest flagging of ``tree_set_id``'s lineage does not
    cover: imported after it or of a trait redefined after it (every id when
    it was never flagged).

    Raises:
        NotFoundError: no such tree set.
    """
    lineage = lineage_of(session, tree_set_id)
    last_flag = _latest_event(session, FLAG_ACTIONS, lineage)
    query = select(Measurement.id).order_by(Measurement.id)
    if traits:
        query = query.where(Measurement.trait.in_(sorted(set(traits))))
    if last_flag is not None:
        imported_late = (
            select(TraitSource.id)
            .join(Source, Source.id == TraitSource.source_id)
            .where(Source.event_id > last_flag)
        )
        query = query.where(
            Measurement.trait_source_id.in_(imported_late)
            | Measurement.trait.in_(_redefined(session, last_flag))
        )
    return np.fromiter(session.scalars(query), dtype=np.int64)


def lineage_staleness(session: Session, tree_set_id: int) -> Staleness:
    """Return the :class:`Staleness` of tree set ``tree_set_id``'s lineage.

    Raises:
        NotFoundError: no such tree set.
    """
    lineage = lineage_of(session, tree_set_id)
    undecided = undecided_names(session, lineage)
    written = int(session.scalar(select(func.count(func.distinct(Measurement.written_name)))) or 0)
    latest = (
        select(func.max(NameDecision.id))
        .where(NameDecision.tree_set_id == lineage.origin_id)
        .group_by(NameDecision.written_name)
    )
    pending = int(
        session.scalar(
            select(func.count()).where(
                NameDecision.id.in_(latest), NameDecision.status == "pending"
            )
        )
        or 0
    )
    measurements = int(session.scalar(select(func.count(Measurement.id))) or 0)
    last_flag = _latest_event(session, FLAG_ACTIONS, lineage)
    redefined = _redefined(session, last_flag)
    if last_flag is None:
        unflagged = measurements
        imported_late = measurements
    else:
        late_sources = (
            select(TraitSource.id)
            .join(Source, Source.id == TraitSource.source_id)
            .where(Source.event_id > last_flag)
        )
        imported_late = int(
            session.scalar(
                select(func.count(Measurement.id)).where(
                    Measurement.trait_source_id.in_(late_sources)
                )
            )
            or 0
        )
        unflagged = int(
            session.scalar(
                select(func.count(Measurement.id)).where(
                    Measurement.trait_source_id.in_(late_sources) | Measurement.trait.in_(redefined)
                )
            )
            or 0
        )
    return Staleness(
        tree_set_id=tree_set_id,
        origin_id=lineage.origin_id,
        written_names=written,
        undecided=len(undecided),
        undecided_examples=undecided[:LISTED],
        pending=pending,
        measurements=measurements,
        unflagged=unflagged,
        imported_since_flagging=imported_late,
        redefined_since_flagging=redefined,
        last_reconcile_event=_latest_event(session, DECISION_ACTIONS, lineage),
        last_flag_event=last_flag,
    )


def store_staleness(session: Session) -> list[Staleness]:
    """Return the :class:`Staleness` of every lineage of the store (one per
    imported tree set, in id order)."""
    origins = session.scalars(
        select(TreeSet.id).where(TreeSet.derived_from_id.is_(None)).order_by(TreeSet.id)
    ).all()
    return [lineage_staleness(session, int(o)) for o in origins]
