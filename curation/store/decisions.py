"""Reading the name decisions in force.

A written name can have many decisions for one lineage of tree sets; the
latest (the highest id) is in force and the earlier ones are kept as
history. Decisions are stored on the lineage's origin and read by every
member (see :mod:`curation.store.lineage`).
"""

from __future__ import annotations

from collections.abc import Iterable

import pandas as pd
from sqlalchemy import func, select
from sqlalchemy.orm import Session

from curation.store.lineage import lineage_of
from curation.store.models import Measurement, NameDecision

__all__ = ["DECISION_COLUMNS", "current_decisions", "decisions_for_names", "known_written_names"]

#: Names per query when a list of names is looked up (bound parameters).
CHUNK = 500

DECISION_COLUMNS = [
    "decision_id",
    "written_name",
    "tip_label",
    "status",
    "stage",
    "score",
    "runner_up",
    "margin",
    "decided_by",
    "decided_at",
    "note",
]


def current_decisions(session: Session, tree_set_id: int) -> pd.DataFrame:
    """Return the decision in force for each written name of a tree set:
    the decisions of its lineage's origin, so a set derived by a repair reads
    the same decisions as the set it came from.

    Returns:
        A DataFrame with :data:`DECISION_COLUMNS`, one row per written name,
        sorted by written name. ``status`` is accepted, rejected or pending;
        ``tip_label`` is the tip an accepted decision maps the name to.

    Raises:
        NotFoundError: no such tree set.
    """
    origin = lineage_of(session, tree_set_id).origin_id
    latest = (
        select(func.max(NameDecision.id))
        .where(NameDecision.tree_set_id == origin)
        .group_by(NameDecision.written_name)
    )
    rows = session.execute(
        select(
            NameDecision.id,
            NameDecision.written_name,
            NameDecision.tip_label,
            NameDecision.status,
            NameDecision.stage,
            NameDecision.score,
            NameDecision.runner_up,
            NameDecision.margin,
            NameDecision.decided_by,
            NameDecision.decided_at,
            NameDecision.note,
        )
        .where(NameDecision.id.in_(latest))
        .order_by(NameDecision.written_name)
    ).all()
    return pd.DataFrame(rows, columns=DECISION_COLUMNS)


def _chunks(values: Iterable[str]) -> Iterable[list[str]]:
    ordered = sorted(set(values))
    for start in range(0, len(ordered), CHUNK):
        yield ordered[start : start + CHUNK]


def decisions_for_names(session: Session, origin_id: int, names: Iterable[str]) -> pd.DataFrame:
    """Return the decision in force for each of ``names`` that has one, in
    the lineage whose origin is ``origin_id``: the same columns as
    :func:`current_decisions`, indexed by written name. Reads only those
    names (a person's few decisions in a store of many)."""
    frames = []
    for chunk in _chunks(names):
        latest = (
            select(func.max(NameDecision.id))
            .where(NameDecision.tree_set_id == origin_id, NameDecision.written_name.in_(chunk))
            .group_by(NameDecision.written_name)
        )
        rows = session.execute(
            select(
                NameDecision.id,
                NameDecision.written_name,
                NameDecision.tip_label,
                NameDecision.status,
                NameDecision.stage,
                NameDecision.score,
                NameDecision.runner_up,
                NameDecision.margin,
                NameDecision.decided_by,
                NameDecision.decided_at,
                NameDecision.note,
            ).where(NameDecision.id.in_(latest))
        ).all()
        frames.append(pd.DataFrame(rows, columns=DECISION_COLUMNS))
    frame = pd.concat(frames) if frames else pd.DataFrame(columns=DECISION_COLUMNS)
    return frame.set_index("written_name", drop=False).sort_index()


def known_written_names(session: Session, names: Iterable[str]) -> set[str]:
    """Return those of ``names`` that some measurement is written with."""
    found: set[str] = set()
    for chunk in _chunks(names):
        found.update(
            session.scalars(
                select(Measurement.written_name)
                .where(Measurement.written_name.in_(chunk))
                .distinct()
            )
        )
    return found
