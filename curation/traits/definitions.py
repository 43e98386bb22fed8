"""Trait definitions: what each trait is and how its values are read.

A continuous trait has a target unit (any unit pint knows), an analysis
scale (``raw``, ``ln`` or ``log10``) and an allowed range in the target
unit. A discrete trait has its allowed states and a mapping of written
variants (``"noct."`` -> ``nocturnal``); case and surrounding or repeated
blanks never need a mapping of their own.

Definitions are given in a small TOML file (``[[trait]]`` tables) or JSON
(a list of objects, or ``{"trait": [...]}``), or as a list of mappings.
"""

from __future__ import annotations

import json
import math
import os
import tomllib
from functools import lru_cache
from pathlib import Path
from typing import Any

import pandas as pd
import pint
from pydantic import BaseModel
from sqlalchemy import select
from sqlalchemy.orm import Session

from curation.errors import FormatError, InputError, Problem
from curation.store.engine import Store
from curation.store.ledger import record_event
from curation.store.models import TraitDefinition

__all__ = [
    "DEFINITION_COLUMNS",
    "KINDS",
    "SCALES",
    "DefineResult",
    "define_traits",
    "normalise_state",
    "read_definitions",
    "trait_definitions",
    "unit_registry",
    "validate_definitions",
]

KINDS = ("continuous", "discrete")
SCALES = ("raw", "ln", "log10")
DEFINITION_COLUMNS = [
    "name",
    "kind",
    "unit",
    "scale",
    "minimum",
    "maximum",
    "states",
    "state_map",
    "description",
]
_KEYS = set(DEFINITION_COLUMNS)


@lru_cache(maxsize=1)
def unit_registry() -> pint.UnitRegistry:
    """Return the one pint unit registry tipledger uses (built once)."""
    return pint.UnitRegistry()


def normalise_state(text: Any) -> str:
    """Return a written state lower-cased with blanks trimmed and collapsed,
    the form states and variants are compared in."""
    return " ".join(str(text).split()).casefold()


class DefineResult(BaseModel):
    """What :func:`define_traits` stored: names added and changed, and its event."""

    event_id: int
    added: list[str]
    changed: list[str]
    unchanged: list[str]


def read_definitions(path: str | os.PathLike[str]) -> list[dict[str, Any]]:
    """Read trait definitions from a TOML or JSON file.

    Returns:
        One mapping per trait, as written (not yet validated).

    Raises:
        NotFoundError / InputError: no such file.
        FormatError: the file is not valid TOML or JSON, or holds no list of traits.
    """
    from curation.imports.common import read_source_bytes

    file = Path(path)
    data = read_source_bytes(file)
    try:
        if file.suffix.lower() == ".json":
            parsed: Any = json.loads(data.decode("utf-8"))
        else:
            parsed = tomllib.loads(data.decode("utf-8"))
    except (tomllib.TOMLDecodeError, json.JSONDecodeError, UnicodeDecodeError) as exc:
        raise FormatError(
            f"{file.name!r} cannot be read as {'JSON' if file.suffix == '.json' else 'TOML'}: "
            f"{exc}",
            file=str(file),
            hint="write one [[trait]] table per trait (TOML) or a JSON list of objects",
        ) from None
    if isinstance(parsed, dict):
        parsed = parsed.get("trait", parsed.get("traits"))
    if not isinstance(parsed, list) or not all(isinstance(i, dict) for i in parsed):
        raise FormatError(
            f"{file.name!r} holds no list of trait definitions",
            file=str(file),
            hint="write one [[trait]] table per trait (TOML) or a JSON list of objects",
        )
    return parsed


def _number(item: dict[str, Any], key: str, where: dict[str, Any], out: list[Problem]) -> Any:
    value = item.get(key)
    if value is None:
        return None
    if isinstance(value, bool) or not isinstance(value, int | float) or math.isnan(value):
        out.append(
            Problem(f"{key} must be a number, not {value!r}", field=key, value=value, **where)
        )
        return None
    return float(value)


def validate_definitions(
    items: list[dict[str, Any]], *, file: str | None = None
) -> list[dict[str, Any]]:
    """Check every definition and return them in a normal form.

    Returns:
        One mapping per trait with the keys of :data:`DEFINITION_COLUMNS`,
        sorted by name; ``unit`` is the canonical pint spelling given.

    Raises:
        InputError: listing every problem of the whole input (unknown key,
            kind or scale, a unit pint does not know, a range the wrong way
            round, a mapping to a state that is not defined, a name twice).
    """
    problems: list[Problem] = []
    ureg = unit_registry()
    seen: set[str] = set()
    result: list[dict[str, Any]] = []
    for index, item in enumerate(items, start=1):
        name = str(item.get("name") or "").strip()
        where: dict[str, Any] = {"file": file, "row": index}
        if not name:
            problems.append(
                Problem("a trait has no name", field="name", hint="add name = ...", **where)
            )
            continue
        if name in seen:
            problems.append(
                Problem(f"trait {name!r} is defined twice", field="name", value=name, **where)
            )
        seen.add(name)
        for key in sorted(set(item) - _KEYS):
            problems.append(
                Problem(
                    f"trait {name!r}: unknown key {key!r}",
                    field=key,
                    hint=f"keys allowed: {', '.join(DEFINITION_COLUMNS)}",
                    **where,
                )
            )
        kind = item.get("kind", "continuous")
        if kind not in KINDS:
            problems.append(
                Problem(
                    f"trait {name!r}: kind {kind!r} is neither continuous nor discrete",
                    field="kind",
                    value=kind,
                    **where,
                )
            )
        scale = item.get("scale", "raw")
        if scale not in SCALES:
            problems.append(
                Problem(
                    f"trait {name!r}: scale {scale!r} is not one of {', '.join(SCALES)}",
                    field="scale",
                    value=scale,
                    **where,
                )
            )
        unit = item.get("unit")
        if unit is not None:
            try:
                ureg.Unit(str(unit))
            except (
                pint.errors.UndefinedUnitError,
                pint.errors.DefinitionSyntaxError,
                ValueError,
                AttributeError,
                TypeError,
                AssertionError,
            ):
                problems.append(
                    Problem(
                        f"trait {name!r}: unit {unit!r} is not a unit pint knows",
                        field="unit",
                        value=unit,
                        hint="write a unit such as mm, g, cm^2 or degC",
                        **where,
                    )
                )
        minimum = _number(item, "minimum", where, problems)
        maximum = _number(item, "maximum", where, problems)
        if minimum is not None and maximum is not None and minimum > maximum:
            problems.append(
                Problem(
                    f"trait {name!r}: minimum {minimum} is above maximum {maximum}",
                    field="minimum",
                    value=minimum,
                    **where,
                )
            )
        if scale in ("ln", "log10") and maximum is not None and maximum <= 0:
            problems.append(
                Problem(
                    f"trait {name!r}: a {scale} scale needs positive values, "
                    f"but the maximum is {maximum}",
                    field="maximum",
                    value=maximum,
                    **where,
                )
            )
        states = [str(s) for s in item.get("states") or []]
        state_map = {str(k): str(v) for k, v in (item.get("state_map") or {}).items()}
        if kind == "discrete":
            if not states:
                problems.append(
                    Problem(
                        f"trait {name!r}: a discrete trait needs its states",
                        field="states",
                        hint='add states = ["a", "b"]',
                        **where,
                    )
                )
            known = {normalise_state(s) for s in states}
            for written, target in state_map.items():
                if normalise_state(target) not in known:
                    problems.append(
                        Problem(
                            f"trait {name!r}: {written!r} maps to {target!r}, which is not one "
                            f"of its states ({', '.join(states)})",
                            field="state_map",
                            value=target,
                            hint="map to a defined state or add the state to states",
                            **where,
                        )
                    )
        elif states or state_map:
            problems.append(
                Problem(
                    f"trait {name!r}: states are given but the kind is {kind!r}",
                    field="states",
                    hint='set kind = "discrete"',
                    **where,
                )
            )
        result.append(
            {
                "name": name,
                "kind": kind,
                "unit": None if unit is None else str(unit),
                "scale": scale if kind == "continuous" else "raw",
                "minimum": minimum,
                "maximum": maximum,
                "states": states,
                "state_map": state_map,
                "description": str(item.get("description") or ""),
            }
        )
    if problems:
        raise InputError(
            f"{len(problems)} problem(s) in the trait definitions; nothing was stored",
            file=file,
            problems=problems,
        )
    return sorted(result, key=lambda d: d["name"])


def define_traits(
    store: Store,
    path_or_definitions: str | os.PathLike[str] | list[dict[str, Any]],
    who: str | None = None,
) -> DefineResult:
    """Store trait definitions from a file or a list of mappings.

    A definition for a name already stored replaces it (the ledger event
    keeps the earlier values). The whole input is validated first; one
    ledger event (``define-traits``) is written.

    Returns:
        A :class:`DefineResult` naming the traits added, changed and unchanged.

    Raises:
        InputError: any problem in the input (all listed); nothing is stored.
        FormatError: the file cannot be read.
    """
    if isinstance(path_or_definitions, list):
        items, file = path_or_definitions, None
    else:
        items, file = read_definitions(path_or_definitions), str(path_or_definitions)
    definitions = validate_definitions(items, file=file)
    with store.transaction() as session:
        stored = {d.name: d for d in session.scalars(select(TraitDefinition))}
        added, changed, unchanged = [], [], []
        earlier: dict[str, dict[str, Any]] = {}
        rows = []
        for definition in definitions:
            row = stored.get(definition["name"])
            if row is None:
                row = TraitDefinition(**definition)
                session.add(row)
                added.append(definition["name"])
            else:
                before = {k: getattr(row, k) for k in DEFINITION_COLUMNS}
                if before == definition:
                    unchanged.append(definition["name"])
                    continue
                earlier[row.name] = before
                for key, value in definition.items():
                    setattr(row, key, value)
                changed.append(definition["name"])
            rows.append(row)
        event = record_event(
            session,
            "define-traits",
            subject=Path(file).name if file else "definitions",
            summary=f"defined {len(added)} new and {len(changed)} changed traits",
            parameters={"definitions": definitions, "replaced": earlier, "file": file},
            who=who,
        )
        for row in rows:
            row.event_id = event.id
    return DefineResult(event_id=event.id, added=added, changed=changed, unchanged=unchanged)


def trait_definitions(session: Session) -> pd.DataFrame:
    """Return the stored definitions, one row per trait with
    :data:`DEFINITION_COLUMNS`, sorted by name."""
    rows = [
        {k: getattr(d, k) for k in DEFINITION_COLUMNS}
        for d in session.scalars(select(TraitDefinition).order_by(TraitDefinition.name))
    ]
    return pd.DataFrame(rows, columns=DEFINITION_COLUMNS)
