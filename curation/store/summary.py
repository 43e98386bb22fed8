"""What a store holds, counted: the answer to "show me the store"."""

from __future__ import annotations

import pandas as pd
from pydantic import BaseModel, Field
from sqlalchemy import func, select
from sqlalchemy.orm import Session

from curation.store.engine import Store
from curation.store.models import (
    LedgerEvent,
    Measurement,
    NameDecision,
    Source,
    StoredFinding,
    Synonym,
    Tip,
    TraitSource,
    Tree,
    TreeSet,
)
from curation.store.provenance import BundleAge, bundle_ages
from curation.store.staleness import Staleness, store_staleness

__all__ = ["StoreSummary", "summarise_store", "list_sources", "list_tree_sets", "list_traits"]


class StoreSummary(BaseModel):
    """Counts of everything in a store."""

    store: str
    sources: dict[str, int]
    tree_sets: int
    trees: int
    tips: int
    trait_sources: int
    measurements: dict[str, int]
    traits: int
    synonyms: int
    decisions: dict[str, int]
    findings: dict[str, int]
    ledger_events: int
    staleness: list[Staleness] = Field(
        default_factory=list, description="per lineage of tree sets, what is not settled"
    )
    bundles: list[BundleAge] = Field(
        default_factory=list, description="each bundle made, and the later events it misses"
    )

    def stale_lines(self) -> list[str]:
        """Say, one line each, what is stale: per lineage the names without
        a decision and the measurements not yet flagged, and each bundle
        older than events it depends on."""
        out = [p for s in self.staleness for p in s.problems()]
        return out + [b.describe() for b in self.bundles if b.stale]


def _count(session: Session, column) -> int:  # type: ignore[no-untyped-def]
    return int(session.scalar(select(func.count(column))) or 0)


def _grouped(session: Session, column) -> dict[str, int]:  # type: ignore[no-untyped-def]
    rows = session.execute(select(column, func.count()).group_by(column).order_by(column))
    return {str(key): int(n) for key, n in rows}


def summarise_store(store: Store) -> StoreSummary:
    """Return counts of sources (by kind), trees, tips, measurements (by
    status), traits, synonyms, name decisions in force (by status), stored
    findings (by severity) and ledger events, with what is stale
    (:mod:`curation.store.staleness`) and the age of every bundle made."""
    with store.reading() as session:
        latest = (
            select(func.max(NameDecision.id))
            .group_by(NameDecision.tree_set_id, NameDecision.written_name)
            .subquery()
        )
        decisions = session.execute(
            select(NameDecision.status, func.count())
            .where(NameDecision.id.in_(select(latest)))
            .group_by(NameDecision.status)
        )
        return StoreSummary(
            store=store.display_url(),
            sources=_grouped(session, Source.kind),
            tree_sets=_count(session, TreeSet.id),
            trees=_count(session, Tree.id),
            tips=_count(session, Tip.id),
            trait_sources=_count(session, TraitSource.id),
            measurements=_grouped(session, Measurement.status),
            traits=int(session.scalar(select(func.count(func.distinct(Measurement.trait)))) or 0),
            synonyms=_count(session, Synonym.id),
            decisions={str(k): int(n) for k, n in decisions},
            findings=_grouped(session, StoredFinding.severity),
            ledger_events=_count(session, LedgerEvent.id),
            staleness=store_staleness(session),
            bundles=bundle_ages(session),
        )


def list_sources(store: Store) -> pd.DataFrame:
    """Return one row per imported source: id, kind, format, file name,
    sha256 (first 12 characters), size in bytes, import time and label."""
    with store.reading() as session:
        rows = session.execute(
            select(
                Source.id,
                Source.kind,
                Source.format,
                Source.file_name,
                func.substr(Source.sha256, 1, 12),
                Source.size_bytes,
                Source.imported_at,
                Source.label,
            ).order_by(Source.id)
        ).all()
    return pd.DataFrame(
        rows,
        columns=[
            "id",
            "kind",
            "format",
            "file_name",
            "sha256",
            "size_bytes",
            "imported_at",
            "label",
        ],
    )


def list_tree_sets(store: Store) -> pd.DataFrame:
    """Return one row per tree set: id, name, number of trees, tips of its
    first tree, and the repair it was derived by (if any)."""
    with store.reading() as session:
        first_tips = (
            select(Tree.tree_set_id, func.min(Tree.tip_count).label("tips"))
            .group_by(Tree.tree_set_id)
            .subquery()
        )
        rows = session.execute(
            select(TreeSet.id, TreeSet.name, TreeSet.tree_count, first_tips.c.tips, TreeSet.repair)
            .outerjoin(first_tips, first_tips.c.tree_set_id == TreeSet.id)
            .order_by(TreeSet.id)
        ).all()
    return pd.DataFrame(rows, columns=["id", "name", "trees", "tips", "repair"])


def list_traits(store: Store) -> pd.DataFrame:
    """Return one row per trait: measurements, parsed numbers, distinct
    written names and units seen."""
    with store.reading() as session:
        rows = session.execute(
            select(
                Measurement.trait,
                func.count(),
                func.count(Measurement.value_number),
                func.count(func.distinct(Measurement.written_name)),
                func.count(func.distinct(Measurement.unit)),
            )
            .group_by(Measurement.trait)
            .order_by(Measurement.trait)
        ).all()
    return pd.DataFrame(rows, columns=["trait", "measurements", "numbers", "names", "units"])
