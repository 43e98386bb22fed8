"""The one exception family of tipledger.

Every error raised on purpose by the library is a :class:`TipledgerError`.
Each carries *where* it happened (file, line, column, row, field) and *how
to fix it* (a hint that names the option or value that would help), so the
command line can print one clear paragraph and exit with status 2.

A check that validates a whole file collects every problem it finds into
:class:`Problem` objects and raises one :class:`InputError` listing them all,
rather than stopping at the first.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from dataclasses import field as dataclass_field
from typing import Any

__all__ = [
    "Problem",
    "TipledgerError",
    "InputError",
    "FormatError",
    "StoreError",
    "SchemaVersionError",
    "NotFoundError",
    "ConflictError",
    "StaleError",
    "check_choice",
    "choice_error",
]


@dataclass(frozen=True)
class Problem:
    """One problem found in an input, with where it is and how to fix it."""

    message: str
    file: str | None = None
    line: int | None = None
    column: int | None = None
    row: int | None = None
    field: str | None = None
    value: Any = None
    hint: str | None = None

    def where(self) -> str:
        """Return a short location such as ``traits.csv, row 12, field 'mass'``."""
        parts: list[str] = []
        if self.file:
            parts.append(str(self.file))
        if self.line is not None:
            parts.append(f"line {self.line}")
        if self.column is not None:
            parts.append(f"column {self.column}")
        if self.row is not None:
            parts.append(f"row {self.row}")
        if self.field:
            parts.append(f"field {self.field!r}")
        return ", ".join(parts)

    def describe(self) -> str:
        """Return the problem as one sentence-like line for a person."""
        text = self.message
        where = self.where()
        if where:
            text = f"{where}: {text}"
        if self.hint:
            text = f"{text} ({self.hint})"
        return text


@dataclass
class TipledgerError(Exception):
    """Base class of every error tipledger raises on purpose.

    ``message`` says what is wrong, ``hint`` what would fix it, and the
    location fields where it is. ``problems`` holds every problem when a
    whole input was validated at once.
    """

    message: str
    file: str | None = None
    line: int | None = None
    column: int | None = None
    row: int | None = None
    field: str | None = None
    hint: str | None = None
    problems: list[Problem] = dataclass_field(default_factory=list)
    #: Machine-readable context for a program (e.g. the decision in force
    #: after a conflict); not part of the message.
    details: dict[str, Any] = dataclass_field(default_factory=dict)

    def __post_init__(self) -> None:
        super().__init__(self.message)

    def __str__(self) -> str:
        return self.describe()

    def describe(self, limit: int = 20) -> str:
        """Return a paragraph for a person: what, where, how to fix.

        At most ``limit`` individual problems are listed; the count of the
        rest is given.
        """
        where = Problem(
            self.message, self.file, self.line, self.column, self.row, self.field
        ).where()
        text = f"{where}: {self.message}" if where else self.message
        if self.problems:
            shown = self.problems[:limit]
            text += "".join(f"\n  - {p.describe()}" for p in shown)
            if len(self.problems) > limit:
                text += f"\n  ... and {len(self.problems) - limit} more"
        if self.hint:
            text += f"\nHint: {self.hint}"
        return text


class InputError(TipledgerError):
    """A file, option or value given by the user is not acceptable."""


class FormatError(InputError):
    """A file does not follow its format (Newick, NEXUS, CSV, Darwin Core...)."""


class StoreError(TipledgerError):
    """The store cannot be opened or used as asked."""


class SchemaVersionError(StoreError):
    """The store's schema is older or newer than this version of tipledger."""


class NotFoundError(InputError):
    """Something asked for by name or id is not in the store."""


class ConflictError(InputError):
    """The request contradicts what the store already holds."""


class StaleError(ConflictError):
    """A stage would build on an earlier stage that is not settled (names
    without a decision, measurements not yet flagged)."""


def choice_error(value: object, allowed: Sequence[str], *, field: str, hint: str) -> InputError:
    """Return the :class:`InputError` for ``value`` that is not one of ``allowed``.

    The message lists every allowed value; ``field`` names what was given
    (an argument in the library, an option on the command line) and
    ``hint`` says how to give it.
    """
    listing = ", ".join(repr(v) for v in allowed)
    return InputError(
        f"{value!r} is not one of the allowed values {listing}", field=field, hint=hint
    )


def check_choice(
    value: object, allowed: Sequence[str], argument: str, *, hint: str | None = None
) -> str:
    """Return ``value`` when it is one of the strings ``allowed``.

    Args:
        value: what a caller gave.
        allowed: every value the argument takes.
        argument: the name of the argument, for the message.
        hint: how to fix it (default: give ``argument`` one of ``allowed``).

    Raises:
        InputError: ``value`` is anything else; the message lists ``allowed``.
    """
    if isinstance(value, str) and value in allowed:
        return value
    raise choice_error(
        value,
        allowed,
        field=argument,
        hint=hint or f"give {argument} one of them, e.g. {argument}={allowed[0]!r}",
    )
