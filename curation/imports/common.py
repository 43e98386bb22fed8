"""What every importer shares: reading a file once, recognising it by its
sha256, and registering it as a source with its ledger event.

Each importer runs in one transaction: the source row, everything read
from it and the ledger event are stored together or not at all.
"""

from __future__ import annotations

import hashlib
import os
from pathlib import Path
from typing import Any

from pydantic import BaseModel, ConfigDict
from sqlalchemy import select
from sqlalchemy.orm import Session

from curation.errors import ConflictError, InputError, NotFoundError
from curation.store.actions import import_action
from curation.store.ledger import record_event
from curation.store.models import LedgerEvent, Source
from curation.timestamps import now

__all__ = ["ImportResult", "SourceInfo", "read_source_bytes", "register_source", "sha256_of"]


class SourceInfo(BaseModel):
    """What a user says about a source file when importing it."""

    model_config = ConfigDict(frozen=True)

    label: str = ""
    citation: str = ""
    licence: str = ""
    notes: str = ""


class ImportResult(BaseModel):
    """What an import stored: the source, its ledger event and counts of
    what was read (``counts``), plus any findings' codes worth a mention."""

    source_id: int
    event_id: int
    sha256: str
    file_name: str
    kind: str
    format: str
    counts: dict[str, int]
    warnings: list[str] = []


def sha256_of(data: bytes) -> str:
    """Return the hex sha256 of ``data``."""
    return hashlib.sha256(data).hexdigest()


def read_source_bytes(path: str | os.PathLike[str]) -> bytes:
    """Return the bytes of the file at ``path``.

    Raises:
        NotFoundError: the file does not exist or is a folder.
        InputError: the file is empty.
    """
    file = Path(path)
    if not file.is_file():
        raise NotFoundError(
            f"no file at {str(file)!r}", file=str(file), hint="check the path and try again"
        )
    data = file.read_bytes()
    if not data.strip():
        raise InputError(
            f"{file.name!r} is empty: there is nothing to import",
            file=str(file),
            hint="give a file that holds data",
        )
    return data


def register_source(
    session: Session,
    path: str | os.PathLike[str],
    data: bytes,
    *,
    kind: str,
    format: str,
    info: SourceInfo | None = None,
    options: dict[str, Any] | None = None,
    who: str | None = None,
    summary: str = "",
) -> tuple[Source, LedgerEvent]:
    """Store a new source row and the ledger event of its import.

    Returns:
        The flushed :class:`Source` and :class:`LedgerEvent` (ids set).

    Raises:
        ConflictError: a source with the same sha256 is already stored (the
            same file imported twice); the store is left unchanged.
    """
    digest = sha256_of(data)
    existing = session.scalar(select(Source).where(Source.sha256 == digest))
    file_name = Path(path).name
    if existing is not None:
        raise ConflictError(
            f"{file_name!r} is already in the store as source {existing.id} "
            f"({existing.file_name!r}, imported {existing.imported_at:%Y-%m-%d %H:%M}); "
            "sources are immutable and stored once",
            file=str(path),
            hint="nothing to do: use the stored source, or import a changed file",
        )
    info = info or SourceInfo()
    event = record_event(
        session,
        import_action(kind, format),
        subject=file_name,
        summary=summary or f"imported {kind} source {file_name}",
        parameters={"sha256": digest, "format": format, **(options or {})},
        who=who,
    )
    source = Source(
        sha256=digest,
        size_bytes=len(data),
        kind=kind,
        format=format,
        file_name=file_name,
        imported_at=now(),
        label=info.label or file_name,
        citation=info.citation,
        licence=info.licence,
        notes=info.notes,
        options=options or {},
        event_id=event.id,
    )
    session.add(source)
    session.flush()
    return source, event
