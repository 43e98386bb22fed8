"""Strict JSON, in and out: every JSON text tipledger writes is RFC 8259
JSON, which has no NaN or Infinity (strict parsers such as JavaScript's
``JSON.parse`` refuse them), so a number that is not finite is written as
``null``; and JSON read back from a bundle is refused when it holds them.
"""

from __future__ import annotations

import json
import math
from typing import Any

__all__ = ["dumps", "json_safe", "loads"]


def json_safe(value: Any) -> Any:
    """Return ``value`` with what strict JSON cannot hold made plain: NaN
    and infinities become None, NumPy scalars become Python numbers, tuples
    and sets become lists (sets sorted), keys become strings."""
    if isinstance(value, dict):
        return {str(k): json_safe(v) for k, v in value.items()}
    if isinstance(value, (list, tuple, set, frozenset)):
        items = sorted(value, key=str) if isinstance(value, (set, frozenset)) else value
        return [json_safe(v) for v in items]
    if hasattr(value, "item") and callable(value.item) and not isinstance(value, (str, bytes)):
        try:
            value = value.item()  # a NumPy scalar
        except (TypeError, ValueError):
            return str(value)
    if isinstance(value, float) and not math.isfinite(value):
        return None
    return value


def dumps(value: Any, *, indent: int | None = None, default: Any = str) -> str:
    """Return ``value`` as strict JSON text: sorted keys, UTF-8 characters
    as they are, non-finite numbers as ``null`` (see :func:`json_safe`).
    Objects JSON does not know are written through ``default`` (``str``)."""
    return json.dumps(
        json_safe(value),
        indent=indent,
        sort_keys=True,
        ensure_ascii=False,
        allow_nan=False,
        default=default,
    )


def _refuse_constant(name: str) -> Any:
    raise ValueError(f"{name} is not a JSON value (RFC 8259 has no NaN or Infinity)")


def loads(text: str) -> Any:
    """Parse strict JSON text.

    Raises:
        ValueError: the text is not JSON, or holds ``NaN``, ``Infinity`` or
            ``-Infinity`` (which Python's own parser accepts by default).
    """
    return json.loads(text, parse_constant=_refuse_constant)
