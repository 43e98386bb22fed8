"""ORM models of the store.

The schema is created and changed only by the Alembic migrations in
``migrations/``; a test checks that these models and the migrations agree.
Rows are never deleted by tipledger: sources are immutable, decisions are
superseded, measurements change status through recorded reviews, and every
change is tied to a ledger event.
"""

from __future__ import annotations

from datetime import datetime
from typing import Any

from sqlalchemy import (
    JSON,
    Boolean,
    DateTime,
    Float,
    ForeignKey,
    Index,
    Integer,
    MetaData,
    String,
    Text,
    text,
)
from sqlalchemy.orm import DeclarativeBase, Mapped, mapped_column

__all__ = [
    "Base",
    "Source",
    "TreeSet",
    "Tree",
    "Tip",
    "TraitSource",
    "Measurement",
    "MeasurementReview",
    "TraitDefinition",
    "Synonym",
    "NameDecision",
    "StoredFinding",
    "LedgerEvent",
]

# Stable constraint names so that migrations are identical on every backend.
NAMING = {
    "ix": "ix_%(table_name)s_%(column_0_N_name)s",
    "uq": "uq_%(table_name)s_%(column_0_N_name)s",
    "ck": "ck_%(table_name)s_%(constraint_name)s",
    "fk": "fk_%(table_name)s_%(column_0_name)s_%(referred_table_name)s",
    "pk": "pk_%(table_name)s",
}


class Base(DeclarativeBase):
    metadata = MetaData(naming_convention=NAMING)
    type_annotation_map = {dict[str, Any]: JSON, list[Any]: JSON}


class LedgerEvent(Base):
    """One entry of the append-only ledger: who did what, when, with which
    parameters. Imports, decisions, exclusions, repairs and bundles all write
    one."""

    __tablename__ = "ledger_events"
    id: Mapped[int] = mapped_column(Integer, primary_key=True)
    at: Mapped[datetime] = mapped_column(DateTime(timezone=True))
    who: Mapped[str] = mapped_column(String(200))
    action: Mapped[str] = mapped_column(String(100), index=True)
    subject: Mapped[str] = mapped_column(Text, default="")
    summary: Mapped[str] = mapped_column(Text, default="")
    parameters: Mapped[dict[str, Any]] = mapped_column(JSON, default=dict)


class Source(Base):
    """An imported file, identified by its sha256. Immutable once stored."""

    __tablename__ = "sources"
    id: Mapped[int] = mapped_column(Integer, primary_key=True)
    sha256: Mapped[str] = mapped_column(String(64), unique=True)
    size_bytes: Mapped[int] = mapped_column(Integer)
    kind: Mapped[str] = mapped_column(String(20))  # tree | trait | synonym
    format: Mapped[str] = mapped_column(String(40))
    file_name: Mapped[str] = mapped_column(Text)
    imported_at: Mapped[datetime] = mapped_column(DateTime(timezone=True))
    label: Mapped[str] = mapped_column(Text, default="")
    citation: Mapped[str] = mapped_column(Text, default="")
    licence: Mapped[str] = mapped_column(Text, default="")
    notes: Mapped[str] = mapped_column(Text, default="")
    options: Mapped[dict[str, Any]] = mapped_column(JSON, default=dict)
    event_id: Mapped[int | None] = mapped_column(ForeignKey("ledger_events.id"))


class TreeSet(Base):
    """Trees that belong together: all trees read from one file, or the
    trees a repair derived from another set."""

    __tablename__ = "tree_sets"
    id: Mapped[int] = mapped_column(Integer, primary_key=True)
    name: Mapped[str] = mapped_column(Text)
    source_id: Mapped[int | None] = mapped_column(ForeignKey("sources.id"), index=True)
    derived_from_id: Mapped[int | None] = mapped_column(ForeignKey("tree_sets.id"))
    repair: Mapped[str | None] = mapped_column(String(100))
    event_id: Mapped[int | None] = mapped_column(ForeignKey("ledger_events.id"))
    tree_count: Mapped[int] = mapped_column(Integer, default=0)


class Tree(Base):
    """One tree, kept as Newick text with labels exactly as stored."""

    __tablename__ = "trees"
    id: Mapped[int] = mapped_column(Integer, primary_key=True)
    tree_set_id: Mapped[int] = mapped_column(ForeignKey("tree_sets.id"), index=True)
    source_id: Mapped[int | None] = mapped_column(ForeignKey("sources.id"))
    index_in_file: Mapped[int] = mapped_column(Integer)
    name: Mapped[str] = mapped_column(Text, default="")
    rooted: Mapped[bool | None] = mapped_column(Boolean)
    tip_count: Mapped[int] = mapped_column(Integer)
    newick: Mapped[str] = mapped_column(Text)
    derived_from_id: Mapped[int | None] = mapped_column(ForeignKey("trees.id"))
    repair: Mapped[str | None] = mapped_column(String(100))
    event_id: Mapped[int | None] = mapped_column(ForeignKey("ledger_events.id"))


class Tip(Base):
    """A tip of a stored tree, in the order it appears in the Newick text."""

    __tablename__ = "tips"
    id: Mapped[int] = mapped_column(Integer, primary_key=True)
    tree_id: Mapped[int] = mapped_column(ForeignKey("trees.id"), index=True)
    position: Mapped[int] = mapped_column(Integer)
    label: Mapped[str] = mapped_column(Text)
    __table_args__ = (Index("ix_tips_label", "label"),)


class TraitSource(Base):
    """A trait table as imported: its layout and its priority for source
    policies (lower number = preferred)."""

    __tablename__ = "trait_sources"
    id: Mapped[int] = mapped_column(Integer, primary_key=True)
    source_id: Mapped[int] = mapped_column(ForeignKey("sources.id"), index=True)
    name: Mapped[str] = mapped_column(Text)
    layout: Mapped[str] = mapped_column(String(20))  # wide | long | dwca
    priority: Mapped[int] = mapped_column(Integer, default=100)
    column_map: Mapped[dict[str, Any]] = mapped_column(JSON, default=dict)


class Measurement(Base):
    """One value of one trait on one specimen (or one literature value),
    kept as written beside its parsed number and unit."""

    __tablename__ = "measurements"
    id: Mapped[int] = mapped_column(Integer, primary_key=True)
    trait_source_id: Mapped[int] = mapped_column(ForeignKey("trait_sources.id"), index=True)
    row_number: Mapped[int] = mapped_column(Integer)
    written_name: Mapped[str] = mapped_column(Text, index=True)
    specimen_id: Mapped[str | None] = mapped_column(Text)
    institution: Mapped[str | None] = mapped_column(Text)
    trait: Mapped[str] = mapped_column(String(200), index=True)
    value_written: Mapped[str | None] = mapped_column(Text)
    value_number: Mapped[float | None] = mapped_column(Float)
    unit: Mapped[str | None] = mapped_column(String(50))
    sex: Mapped[str | None] = mapped_column(String(20))
    life_stage: Mapped[str | None] = mapped_column(String(50))
    status: Mapped[str] = mapped_column(String(20), default="ok")  # ok | unparsed | missing
    reason: Mapped[str | None] = mapped_column(Text)


class MeasurementReview(Base):
    """A curator's exclusion or re-inclusion of a measurement. The latest
    review of a measurement is in force; none is deleted."""

    __tablename__ = "measurement_reviews"
    id: Mapped[int] = mapped_column(Integer, primary_key=True)
    measurement_id: Mapped[int] = mapped_column(ForeignKey("measurements.id"), index=True)
    action: Mapped[str] = mapped_column(String(20))  # exclude | include
    reason: Mapped[str] = mapped_column(Text)
    who: Mapped[str] = mapped_column(String(200))
    at: Mapped[datetime] = mapped_column(DateTime(timezone=True))
    event_id: Mapped[int] = mapped_column(ForeignKey("ledger_events.id"))


class TraitDefinition(Base):
    """What a trait is: continuous with a unit, scale and range, or discrete
    with its states and a mapping of written variants."""

    __tablename__ = "trait_definitions"
    id: Mapped[int] = mapped_column(Integer, primary_key=True)
    name: Mapped[str] = mapped_column(String(200), unique=True)
    kind: Mapped[str] = mapped_column(String(20))  # continuous | discrete
    unit: Mapped[str | None] = mapped_column(String(50))
    scale: Mapped[str] = mapped_column(String(20), default="raw")  # raw | ln | log10
    minimum: Mapped[float | None] = mapped_column(Float)
    maximum: Mapped[float | None] = mapped_column(Float)
    states: Mapped[list[Any]] = mapped_column(JSON, default=list)
    state_map: Mapped[dict[str, Any]] = mapped_column(JSON, default=dict)
    description: Mapped[str] = mapped_column(Text, default="")
    event_id: Mapped[int | None] = mapped_column(ForeignKey("ledger_events.id"))


class Synonym(Base):
    """A synonym and its accepted name, from a table or a checklist."""

    __tablename__ = "synonyms"
    id: Mapped[int] = mapped_column(Integer, primary_key=True)
    source_id: Mapped[int] = mapped_column(ForeignKey("sources.id"), index=True)
    synonym: Mapped[str] = mapped_column(Text, index=True)
    accepted: Mapped[str] = mapped_column(Text, index=True)
    status: Mapped[str] = mapped_column(String(50), default="synonym")
    row_number: Mapped[int | None] = mapped_column(Integer)


class NameDecision(Base):
    """How a written name maps to a tip of a tree set's lineage (decisions
    are stored on the lineage's origin): stage, score, who and when. Later
    decisions for the same name supersede earlier ones; a decision is
    superseded at most once and a name has one first decision, so two
    curators cannot both supersede the decision in force."""

    __tablename__ = "name_decisions"
    __table_args__ = (
        Index("uq_name_decisions_supersedes_id", "supersedes_id", unique=True),
        Index(
            "uq_name_decisions_first",
            "tree_set_id",
            "written_name",
            unique=True,
            sqlite_where=text("supersedes_id IS NULL"),
            postgresql_where=text("supersedes_id IS NULL"),
        ),
    )
    id: Mapped[int] = mapped_column(Integer, primary_key=True)
    tree_set_id: Mapped[int] = mapped_column(ForeignKey("tree_sets.id"), index=True)
    written_name: Mapped[str] = mapped_column(Text, index=True)
    tip_label: Mapped[str | None] = mapped_column(Text)
    status: Mapped[str] = mapped_column(String(20))  # accepted | rejected | pending
    stage: Mapped[str] = mapped_column(String(30))
    score: Mapped[float] = mapped_column(Float, default=0.0)
    runner_up: Mapped[str | None] = mapped_column(Text)
    margin: Mapped[float | None] = mapped_column(Float)
    decided_by: Mapped[str] = mapped_column(String(200))
    decided_at: Mapped[datetime] = mapped_column(DateTime(timezone=True))
    note: Mapped[str] = mapped_column(Text, default="")
    supersedes_id: Mapped[int | None] = mapped_column(ForeignKey("name_decisions.id"))
    event_id: Mapped[int | None] = mapped_column(ForeignKey("ledger_events.id"))


class StoredFinding(Base):
    """A finding kept in the store, tied to the event of the check that
    reported it (see :class:`curation.findings.Finding`)."""

    __tablename__ = "findings"
    id: Mapped[int] = mapped_column(Integer, primary_key=True)
    event_id: Mapped[int] = mapped_column(ForeignKey("ledger_events.id"), index=True)
    code: Mapped[str] = mapped_column(String(100), index=True)
    severity: Mapped[str] = mapped_column(String(20))
    subject: Mapped[str] = mapped_column(Text)
    message: Mapped[str] = mapped_column(Text)
    details: Mapped[dict[str, Any]] = mapped_column(JSON, default=dict)
