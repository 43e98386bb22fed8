"""Clock of tipledger: honours SOURCE_DATE_EPOCH for reproducible output."""

from __future__ import annotations

import os
from datetime import UTC, datetime

__all__ = ["now", "now_iso"]


def now() -> datetime:
    """Return the current time in UTC, or SOURCE_DATE_EPOCH when it is set.

    Raises:
        ValueError: SOURCE_DATE_EPOCH is set but is not a whole number.
    """
    epoch = os.environ.get("SOURCE_DATE_EPOCH")
    if epoch:
        return datetime.fromtimestamp(int(epoch), tz=UTC)
    return datetime.now(tz=UTC)


def now_iso() -> str:
    """Return :func:`now` as an ISO 8601 string with seconds precision."""
    return now().isoformat(timespec="seconds")
