"""The store: ORM models, opening and upgrading, the ledger."""

from curation.store.decisions import current_decisions
from curation.store.engine import (
    DEFAULT_STORE,
    STORE_ENV,
    Store,
    create_store,
    open_store,
    resolve_url,
    upgrade_store,
)
from curation.store.ledger import current_user, ledger_frame, record_event, record_findings

__all__ = [
    "DEFAULT_STORE",
    "STORE_ENV",
    "Store",
    "create_store",
    "current_decisions",
    "current_user",
    "ledger_frame",
    "open_store",
    "record_event",
    "record_findings",
    "resolve_url",
    "upgrade_store",
]
