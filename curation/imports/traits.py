"""Importing trait tables (CSV, TSV, ``.xlsx``) as measurements.

Two layouts:

- ``wide``: one row per specimen (or species), one column per trait. The
  unit of a trait comes from ``units``, from the column header
  (``mass_g``, ``length (mm)``, ``wing [cm]``) or from ``default_unit``.
- ``long``: one row per measurement, with columns for the taxon, the trait,
  the value and (optionally) the unit.

Columns are found by their roles (taxon, specimen, institution, sex,
life_stage, trait, value, unit), recognised from common header names or
given with ``columns={"taxon": "Species name", ...}``. The whole file is
checked before anything is stored and every problem is reported at once.
"""

from __future__ import annotations

import os
import re
from pathlib import Path
from typing import Literal, get_args

import numpy as np
import pandas as pd
from sqlalchemy import select

from curation.errors import InputError, Problem, check_choice
from curation.formats.tables import Table, read_table
from curation.imports.common import ImportResult, SourceInfo, read_source_bytes, register_source
from curation.imports.measurements import (
    MEASUREMENT_COLUMNS,
    DecimalMark,
    check_decimal,
    mark_discrete,
    parse_values,
    store_measurements,
)
from curation.progress import Progress
from curation.store.engine import Store
from curation.store.models import TraitDefinition, TraitSource

__all__ = [
    "ROLES",
    "LAYOUTS",
    "TraitLayout",
    "import_traits",
    "measurements_from_table",
    "resolve_columns",
    "split_unit",
]

#: What a column can hold, for ``columns=``.
ROLES = ("taxon", "specimen", "institution", "sex", "life_stage", "trait", "value", "unit")
#: How a trait table is laid out: a column per trait, or taxon, trait and
#: value columns.
TraitLayout = Literal["wide", "long"]
LAYOUTS: tuple[str, ...] = get_args(TraitLayout)

_REQUIRED = {"wide": ("taxon",), "long": ("taxon", "trait", "value")}
_LONG_ONLY = ("trait", "value", "unit")

# Header names recognised for each role, compared after lower-casing and
# dropping blanks, underscores, hyphens and dots. Darwin Core term names are
# among them (TDWG Darwin Core terms: scientificName, catalogNumber, ...).
_ALIASES: dict[str, tuple[str, ...]] = {
    "taxon": ("taxon", "species", "scientificname", "speciesname", "taxonname", "binomial"),
    "specimen": (
        "specimen",
        "specimenid",
        "catalognumber",
        "catalogno",
        "voucher",
        "individual",
        "individualid",
    ),
    "institution": ("institution", "institutioncode", "collection", "collectioncode", "museum"),
    "sex": ("sex",),
    "life_stage": ("lifestage", "agestage", "ageclass", "stage"),
    "trait": ("trait", "traitname", "measurementtype", "variable", "character"),
    "value": ("value", "measurementvalue", "traitvalue"),
    "unit": ("unit", "units", "measurementunit"),
}

# Unit suffixes recognised after an underscore at the end of a wide
# header (``body_mass_g``); longer units belong in parentheses.
_UNIT_SUFFIXES = {
    "mm",
    "cm",
    "m",
    "km",
    "um",
    "µm",
    "nm",
    "mg",
    "g",
    "kg",
    "ml",
    "mm2",
    "cm2",
    "m2",
    "mm3",
    "cm3",
    "ms",
    "s",
    "min",
    "yr",
    "mya",
    "degc",
    "pct",
    "hz",
    "khz",
}
_BRACKETED = re.compile(r"^(?P<trait>.*?\S)\s*[\(\[]\s*(?P<unit>[^()\[\]]*?)\s*[\)\]]$")
_SUFFIXED = re.compile(r"^(?P<trait>.*[^_\s])[_\s](?P<unit>[^_\s]+)$")


def _key(name: str) -> str:
    return re.sub(r"[\s_\-.]", "", name).lower()


def split_unit(header: str) -> tuple[str, str | None]:
    """Split a trait column header into the trait and the unit it names.

    ``"length (mm)"`` and ``"length [mm]"`` give ``("length", "mm")``;
    ``"body_mass_g"`` gives ``("body_mass", "g")`` for the short unit
    suffixes tipledger knows; anything else is a trait without a unit.
    """
    text = header.strip()
    bracketed = _BRACKETED.match(text)
    if bracketed and bracketed["unit"]:
        return bracketed["trait"], bracketed["unit"]
    suffixed = _SUFFIXED.match(text)
    if suffixed and suffixed["unit"].lower() in _UNIT_SUFFIXES:
        return suffixed["trait"], suffixed["unit"]
    return text, None


def resolve_columns(
    present: list[str],
    layout: str,
    columns: dict[str, str] | None = None,
    *,
    file_name: str = "",
) -> dict[str, str]:
    """Return which file column plays each role.

    Roles given in ``columns`` are taken as given; the others are found by
    their usual header names. Every problem is collected first.

    Raises:
        InputError: a required role has no column (listing every missing
            role, the columns present and the ``--columns`` option that
            fixes it), a given column is not in the file, or a role is
            unknown or does not fit the layout.
    """
    check_choice(layout, LAYOUTS, "layout")
    problems: list[Problem] = []
    given = dict(columns or {})
    for role, column in given.items():
        if role not in ROLES:
            problems.append(
                Problem(
                    f"{role!r} is not a column role",
                    field=role,
                    hint="roles are " + ", ".join(ROLES),
                )
            )
        elif layout == "wide" and role in _LONG_ONLY:
            problems.append(
                Problem(
                    f"the role {role!r} belongs to the long layout",
                    field=role,
                    hint="give --layout long, or leave it out (in the wide layout each "
                    "trait is a column)",
                )
            )
        elif column not in present:
            problems.append(
                Problem(
                    f"--columns {role}={column} names a column that is not in the file",
                    file=file_name or None,
                    field=column,
                    hint="columns present: " + ", ".join(repr(c) for c in present),
                )
            )
    resolved = {r: c for r, c in given.items() if r in ROLES and c in present}
    taken = set(resolved.values())
    by_key = {}
    for column in present:
        by_key.setdefault(_key(column), column)
    wanted = [r for r in ROLES if r not in resolved and (layout == "long" or r not in _LONG_ONLY)]
    for role in wanted:
        for alias in _ALIASES[role]:
            column = by_key.get(alias)
            if column is not None and column not in taken:
                resolved[role] = column
                taken.add(column)
                break
    missing = [r for r in _REQUIRED[layout] if r not in resolved]
    if missing:
        example = " ".join(f"--columns {r}=<column>" for r in missing)
        problems.append(
            Problem(
                "no column for the required role(s) " + ", ".join(repr(r) for r in missing),
                file=file_name or None,
                hint=f"name them with {example}; the columns present are "
                + ", ".join(repr(c) for c in present),
            )
        )
    if problems:
        raise InputError(
            f"the columns of {file_name or 'the table'!r} do not fit the {layout} layout "
            f"({len(problems)} problem(s))",
            file=file_name or None,
            problems=problems,
            hint="see `tipledger import-traits --help` for --columns and --layout",
        )
    return {r: resolved[r] for r in ROLES if r in resolved}


def _text(frame: pd.DataFrame, roles: dict[str, str], role: str) -> pd.Series:
    if role not in roles:
        return pd.Series([None] * len(frame), index=frame.index, dtype=object)
    text = frame[roles[role]].astype(object).str.strip()
    return text.where(text != "", None)


def _wide_trait_columns(
    table: Table,
    roles: dict[str, str],
    traits: list[str] | None,
    units: dict[str, str],
    default_unit: str | None,
    defined: dict[str, str],
    decimal: str,
) -> tuple[dict[str, tuple[str, str | None]], list[str], list[Problem]]:
    """Choose the trait columns of a wide table and their trait names and units.

    Returns:
        ``{header: (trait, unit)}``, the columns left out, and problems.
    """
    problems: list[Problem] = []
    candidates = [c for c in table.columns if c not in roles.values()]
    left_out: list[str] = []
    if traits is not None:
        for name in traits:
            if name not in table.columns:
                problems.append(
                    Problem(
                        f"--trait {name} names a column that is not in the file",
                        file=table.file_name,
                        field=name,
                        hint="columns present: " + ", ".join(repr(c) for c in table.columns),
                    )
                )
            elif name in roles.values():
                problems.append(
                    Problem(
                        f"the column {name!r} is the {_role_of(roles, name)} column, not a trait",
                        file=table.file_name,
                        field=name,
                    )
                )
        chosen = [c for c in candidates if c in traits]
        left_out = [c for c in candidates if c not in traits]
    else:
        # Without --trait, a column is a trait when some value in it is a
        # number or a trait definition names it; text-only columns (notes,
        # localities, dates) are left out and reported.
        chosen = []
        for column in candidates:
            trait_name = split_unit(column)[0]
            if column in defined or trait_name in defined:
                chosen.append(column)
                continue
            parsed = parse_values(table.frame[column], decimal=decimal)
            if (parsed["status"] == "ok").any():
                chosen.append(column)
            else:
                left_out.append(column)
    result: dict[str, tuple[str, str | None]] = {}
    for column in chosen:
        trait, header_unit = split_unit(column)
        if column in defined:
            trait, header_unit = column, None
        given = units.get(column, units.get(trait))
        if given is not None and header_unit is not None and given != header_unit:
            problems.append(
                Problem(
                    f"--unit gives {given!r} for {trait!r} but its header says {header_unit!r}",
                    file=table.file_name,
                    field=column,
                    hint="leave --unit out for this trait, or correct the header",
                )
            )
        result[column] = (trait, given or header_unit or default_unit)
    names = [t for t, _ in result.values()]
    for trait in sorted({t for t in names if names.count(t) > 1}):
        headers = [c for c, (t, _) in result.items() if t == trait]
        problems.append(
            Problem(
                f"the columns {', '.join(repr(h) for h in headers)} are all the trait {trait!r}",
                file=table.file_name,
                field=headers[0],
                hint="rename them, or import one with --trait",
            )
        )
    known = set(result) | {t for t, _ in result.values()}
    for name in units:
        if name not in known:
            problems.append(
                Problem(
                    f"--unit names {name!r}, which is not a trait column of the file",
                    file=table.file_name,
                    field=name,
                    hint="trait columns: " + ", ".join(repr(c) for c in result),
                )
            )
    if not result:
        problems.append(
            Problem(
                "no column holds trait values (no column other than the taxon, "
                "specimen, institution, sex and life-stage columns was chosen or has a "
                "number in it)",
                file=table.file_name,
                hint="name the trait columns with --trait, or use --layout long",
            )
        )
    return result, left_out, problems


def _role_of(roles: dict[str, str], column: str) -> str:
    return next(r for r, c in roles.items() if c == column)


def measurements_from_table(
    table: Table,
    *,
    layout: str = "wide",
    columns: dict[str, str] | None = None,
    traits: list[str] | None = None,
    decimal: str = ".",
    default_unit: str | None = None,
    units: dict[str, str] | None = None,
    definitions: dict[str, str] | None = None,
) -> tuple[pd.DataFrame, dict[str, object]]:
    """Turn a read table into a frame of measurements (no store needed).

    Args:
        definitions: trait name -> kind (``continuous``/``discrete``) of the
            traits the store defines; a defined trait column is always read.

    Returns:
        The measurements (columns :data:`MEASUREMENT_COLUMNS`, one row per
        specimen and trait, in file order) and a description of how the
        columns were read (``roles``, ``traits``, ``left_out``), for the
        trait source's column map.

    Raises:
        InputError: the columns do not fit the layout, or options name
            columns or traits that are not there (every problem listed).
    """
    check_decimal(decimal)
    units = dict(units or {})
    defined = dict(definitions or {})
    roles = resolve_columns(table.columns, layout, columns, file_name=table.file_name)
    frame = table.frame
    rows = table.row_numbers
    problems: list[Problem] = []
    taxon = _text(frame, roles, "taxon")
    base = {
        "written_name": taxon,
        "specimen_id": _text(frame, roles, "specimen"),
        "institution": _text(frame, roles, "institution"),
        "sex": _text(frame, roles, "sex"),
        "life_stage": _text(frame, roles, "life_stage"),
    }
    described: dict[str, object] = {"roles": roles}
    if layout == "wide":
        chosen, left_out, problems = _wide_trait_columns(
            table, roles, traits, units, default_unit, defined, decimal
        )
        if problems:
            raise InputError(
                f"the trait columns of {table.file_name!r} have {len(problems)} problem(s)",
                file=table.file_name,
                problems=problems,
            )
        headers = list(chosen)
        k, n = len(headers), len(frame)
        # Row-major: the traits of one row stay together, in file order.
        values = frame[headers].to_numpy(dtype=object).reshape(-1) if k else np.array([])
        measurements = pd.DataFrame(
            {key: np.repeat(series.to_numpy(dtype=object), k) for key, series in base.items()}
        )
        measurements["row_number"] = np.repeat(rows, k)
        measurements["trait"] = np.tile(np.array([chosen[h][0] for h in headers], dtype=object), n)
        measurements["unit"] = np.tile(np.array([chosen[h][1] for h in headers], dtype=object), n)
        written = pd.Series(values, index=measurements.index, dtype=object)
        described["traits"] = {h: {"trait": t, "unit": u} for h, (t, u) in chosen.items()}
        described["left_out"] = left_out
    else:
        trait_text = _text(frame, roles, "trait")
        value_text = _text(frame, roles, "value")
        unit_text = _text(frame, roles, "unit")
        no_trait = trait_text.isna() & value_text.notna()
        for row in rows[no_trait.to_numpy()][:50]:
            problems.append(
                Problem(
                    "the row has a value but no trait name",
                    file=table.file_name,
                    row=int(row),
                    field=roles["trait"],
                    hint="give the trait of every value",
                )
            )
        if no_trait.sum() > 50:
            problems.append(
                Problem(f"... and {int(no_trait.sum()) - 50} more rows without a trait name")
            )
        unknown_units = sorted(set(units) - set(trait_text.dropna().unique()))
        for name in unknown_units:
            problems.append(
                Problem(
                    f"--unit names the trait {name!r}, which the file does not have",
                    file=table.file_name,
                    field=name,
                )
            )
        if problems:
            raise InputError(
                f"{table.file_name!r} has {len(problems)} problem(s) in the long layout",
                file=table.file_name,
                problems=problems,
            )
        keep = trait_text.notna().to_numpy()
        distinct = {t: split_unit(t) for t in trait_text[keep].unique()}
        for name in distinct:
            if name in defined:
                distinct[name] = (name, None)
        trait_name = trait_text[keep].map(lambda t: distinct[t][0])
        named_unit = trait_text[keep].map(lambda t: distinct[t][1])
        option_unit = trait_name.map(lambda t: units.get(t, default_unit))
        unit = unit_text[keep].fillna(named_unit).fillna(option_unit)
        measurements = pd.DataFrame({key: s[keep].to_numpy() for key, s in base.items()})
        measurements["row_number"] = rows[keep]
        measurements["trait"] = trait_name.to_numpy()
        measurements["unit"] = unit.to_numpy(dtype=object)
        written = pd.Series(value_text[keep].to_numpy(), index=measurements.index, dtype=object)
        described["traits"] = {t: {"trait": n, "unit": u} for t, (n, u) in distinct.items()}
        described["left_out_rows"] = int((~keep).sum())
    parsed = parse_values(written, decimal=decimal)
    for column in parsed.columns:
        measurements[column] = parsed[column].to_numpy()
    no_name = measurements["written_name"].isna()
    measurements["written_name"] = measurements["written_name"].fillna("")
    usable = no_name & (measurements["status"] != "missing")
    measurements.loc[usable, "status"] = "unparsed"
    earlier = measurements.loc[usable, "reason"]
    measurements.loc[usable, "reason"] = ("the row names no taxon; " + earlier).fillna(
        "the row names no taxon"
    )
    described["rows_without_taxon"] = int(no_name.groupby(measurements["row_number"]).any().sum())
    return measurements[MEASUREMENT_COLUMNS], described


def import_traits(
    store: Store,
    path: str | os.PathLike[str],
    *,
    layout: TraitLayout = "wide",
    columns: dict[str, str] | None = None,
    traits: list[str] | None = None,
    delimiter: str | None = None,
    encoding: str | None = None,
    decimal: DecimalMark = ".",
    sheet: str | None = None,
    default_unit: str | None = None,
    units: dict[str, str] | None = None,
    priority: int = 100,
    info: SourceInfo | None = None,
    who: str | None = None,
    progress: Progress | None = None,
) -> ImportResult:
    """Import a trait table as one trait source with its measurements.

    Args:
        layout: ``wide`` (a column per trait) or ``long`` (taxon, trait,
            value and unit columns).
        columns: role -> column name, for roles whose column has an
            unusual name (roles: :data:`ROLES`).
        traits: wide layout: the columns that hold traits (default: every
            other column with a number in it, and columns a trait
            definition names).
        delimiter, encoding: of a text table; detected when ``None``.
        decimal: ``.`` or ``,``.
        sheet: the worksheet of an ``.xlsx`` file (name or 1-based position).
        default_unit: the unit of traits no header, unit column or
            ``units`` entry gives one.
        units: trait (or column header) -> unit.
        priority: the source's rank for source policies (lower = preferred).
        info: label, citation, licence and notes of the source.
        who: the user recorded in the ledger.
        progress: called as ``progress(done, total)`` while storing.

    Returns:
        The :class:`ImportResult` with counts ``rows``, ``measurements``,
        ``ok``, ``unparsed``, ``missing``, ``traits`` and ``taxa``.

    Raises:
        InputError: ``layout`` or ``decimal`` is not one of its values
            (checked before the file is read); the file is empty or its
            columns do not fit (every problem listed).
        NotFoundError: no such file, or no such worksheet.
        FormatError: the bytes are not text in the encoding, or rows do not
            split into columns.
        ConflictError: the same file (sha256) is already stored.
    """
    check_choice(layout, LAYOUTS, "layout")
    check_decimal(decimal)
    data = read_source_bytes(path)
    with store.transaction() as session:
        # Registering first refuses a file already stored before any parsing;
        # the format and options are completed once the file is read.
        source, event = register_source(
            session,
            path,
            data,
            kind="trait",
            format="table",
            info=info,
            options={"layout": layout, "priority": priority},
            who=who,
        )
        table = read_table(
            data, file_name=Path(path).name, delimiter=delimiter, encoding=encoding, sheet=sheet
        )
        definitions = {
            name: kind
            for name, kind in session.execute(select(TraitDefinition.name, TraitDefinition.kind))
        }
        measurements, described = measurements_from_table(
            table,
            layout=layout,
            columns=columns,
            traits=traits,
            decimal=decimal,
            default_unit=default_unit,
            units=units,
            definitions=definitions,
        )
        options = {
            "layout": layout,
            "columns": described["roles"],
            "traits": list(traits) if traits is not None else None,
            "decimal": decimal,
            "encoding": table.encoding,
            "delimiter": table.delimiter,
            "sheet": table.sheet,
            "default_unit": default_unit,
            "units": dict(units or {}),
            "priority": priority,
        }
        source.format = table.format
        source.options = options
        event.parameters = {**event.parameters, "format": table.format, **options}
        trait_source = TraitSource(
            source_id=source.id,
            name=source.label,
            layout=layout,
            priority=priority,
            column_map=described,
        )
        session.add(trait_source)
        session.flush()
        discrete = mark_discrete(measurements, definitions)
        counts = store_measurements(session, trait_source.id, measurements, progress=progress)
        counts["rows"] = len(table.frame)
        counts["traits"] = int(measurements["trait"].nunique())
        named = measurements["written_name"]
        counts["taxa"] = int(named[named != ""].nunique())
        event.summary = (
            f"imported {counts['measurements']} measurements of {counts['traits']} traits "
            f"on {counts['taxa']} taxa from {source.file_name}"
        )
        event.parameters = {
            **event.parameters,
            "trait_source_id": trait_source.id,
            "counts": counts,
            "discrete": discrete,
        }
    warnings = _warnings(measurements, described, discrete)
    return ImportResult(
        source_id=source.id,
        event_id=event.id,
        sha256=source.sha256,
        file_name=source.file_name,
        kind="trait",
        format=table.format,
        counts=counts,
        warnings=warnings,
    )


def _warnings(
    measurements: pd.DataFrame, described: dict[str, object], discrete: list[str]
) -> list[str]:
    """Say what a person should know about an import that stored fine."""
    warnings: list[str] = []
    left_out = described.get("left_out") or []
    if left_out:
        warnings.append(
            "columns left out (no number in them and no trait definition names them): "
            + ", ".join(repr(c) for c in left_out)  # type: ignore[union-attr]
        )
    if discrete:
        warnings.append(
            "traits read as discrete states (no value is a number): "
            + ", ".join(repr(t) for t in discrete)
        )
    unparsed = measurements[measurements["status"] == "unparsed"]
    if len(unparsed):
        first = unparsed.iloc[0]
        warnings.append(
            f"{len(unparsed)} values kept as written but not read as numbers, e.g. row "
            f"{first['row_number']} {first['trait']!r} = {first['value_written']!r}: "
            f"{first['reason']}"
        )
    without = described.get("rows_without_taxon") or 0
    if without:
        warnings.append(f"{without} rows name no taxon; their values are kept as unparsed")
    return warnings
