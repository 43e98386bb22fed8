"""The ledger: the store's append-only log of events.

Every change a stage makes to the store (an import, a name decision, an
exclusion, a repair, a bundle) writes exactly one event in the same
transaction as the change, so the two are stored together or not at all.
"""

from __future__ import annotations

import getpass
import os
from typing import Any

import pandas as pd
from sqlalchemy import select
from sqlalchemy.orm import Session

from curation.findings import Finding
from curation.jsontext import json_safe
from curation.store.actions import check_action
from curation.store.models import LedgerEvent, StoredFinding
from curation.timestamps import now

__all__ = [
    "USER_ENV",
    "current_user",
    "ledger_frame",
    "record_event",
    "record_findings",
]

USER_ENV = "TIPLEDGER_USER"


def current_user(user: str | None = None) -> str:
    """Return who is acting: ``user`` if given, else ``$TIPLEDGER_USER``,
    else the login name of the process."""
    if user:
        return user
    env = os.environ.get(USER_ENV)
    if env:
        return env
    try:
        return getpass.getuser()
    except (KeyError, OSError):  # no passwd entry, e.g. in some containers
        return "unknown"


def record_event(
    session: Session,
    action: str,
    *,
    subject: str = "",
    summary: str = "",
    parameters: dict[str, Any] | None = None,
    who: str | None = None,
) -> LedgerEvent:
    """Add one event to the ledger in ``session``'s transaction and return it
    (flushed, so its ``id`` is set).

    Raises:
        ValueError: ``action`` is not one of
            :data:`curation.store.actions.ACTIONS`.
    """
    event = LedgerEvent(
        at=now(),
        who=current_user(who),
        action=check_action(action),
        subject=subject,
        summary=summary,
        parameters=json_safe(parameters or {}),
    )
    session.add(event)
    session.flush()
    return event


def record_findings(session: Session, event: LedgerEvent, findings: list[Finding]) -> int:
    """Store ``findings`` under ``event``; return how many were stored."""
    session.add_all(
        StoredFinding(
            event_id=event.id,
            code=f.code,
            severity=f.severity.value,
            subject=f.subject,
            message=f.message,
            details=json_safe(f.details),
        )
        for f in findings
    )
    session.flush()
    return len(findings)


def ledger_frame(session: Session, action: str | None = None) -> pd.DataFrame:
    """Return the ledger as a DataFrame (id, at, who, action, subject,
    summary, parameters) in the order the events happened."""
    query = select(LedgerEvent).order_by(LedgerEvent.id)
    if action:
        query = query.where(LedgerEvent.action == action)
    rows = [
        {
            "id": e.id,
            "at": e.at,
            "who": e.who,
            "action": e.action,
            "subject": e.subject,
            "summary": e.summary,
            "parameters": e.parameters,
        }
        for e in session.scalars(query)
    ]
    return pd.DataFrame(
        rows, columns=["id", "at", "who", "action", "subject", "summary", "parameters"]
    )
