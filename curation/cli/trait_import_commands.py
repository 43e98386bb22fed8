"""Commands that import trait tables, Darwin Core Archives and synonyms."""

from __future__ import annotations

from collections.abc import Sequence
from pathlib import Path
from typing import Annotated

import typer

from curation.cli.app import (
    CitationOption,
    LabelOption,
    LicenceOption,
    NotesOption,
    StoreOption,
    UserOption,
    app,
    console,
)
from curation.cli.output import print_counts, progress_bar
from curation.errors import InputError, choice_error
from curation.imports.common import ImportResult, SourceInfo
from curation.imports.dwca import import_darwin_core
from curation.imports.measurements import DecimalMark
from curation.imports.synonyms import PAIR_ROLES, SynonymLayout, import_synonyms
from curation.imports.traits import ROLES, TraitLayout, import_traits
from curation.store import open_store

__all__ = ["parse_pairs"]

FileArgument = Annotated[
    Path, typer.Argument(help="The file to import.", exists=False, dir_okay=False)
]
PriorityOption = Annotated[
    int,
    typer.Option(
        "--priority", help="Rank of this source when sources disagree (lower = preferred)."
    ),
]
DecimalOption = Annotated[
    DecimalMark, typer.Option("--decimal", help="The decimal mark of the values.")
]
DelimiterOption = Annotated[
    str | None,
    typer.Option("--delimiter", help="Field delimiter of a text table (tab: '\\t'); detected."),
]
EncodingOption = Annotated[
    str | None,
    typer.Option("--encoding", help="Text encoding, e.g. utf-8, cp1252, utf-16; detected."),
]
SheetOption = Annotated[
    str | None,
    typer.Option("--sheet", help="Worksheet of an .xlsx file, by name or position (1 = first)."),
]


def parse_pairs(
    values: list[str] | None, option: str, keys: Sequence[str] | None = None
) -> dict[str, str]:
    """Turn repeated ``KEY=VALUE`` option values into a dict.

    Args:
        values: the option's values as given.
        option: the option's name, for messages.
        keys: the keys allowed (any key when None).

    Raises:
        InputError: a value has no ``=``, or its key is not one of ``keys``.
    """
    result: dict[str, str] = {}
    for value in values or []:
        key, sep, rest = value.partition("=")
        if not sep or not key.strip():
            raise InputError(
                f"{option} {value!r} is not KEY=VALUE",
                field=option,
                hint=f"write it as {option} name=value, e.g. {option} taxon='Species name'",
            )
        if keys is not None and key.strip() not in keys:
            raise choice_error(
                key.strip(),
                keys,
                field=option,
                hint=f"the part before '=' is a role, e.g. {option} {keys[0]}=COLUMN",
            )
        result[key.strip()] = rest.strip()
    return result


def _report(result: ImportResult) -> None:
    console.print(
        f"Imported {result.file_name} as source {result.source_id} "
        f"({result.kind}, {result.format}; ledger event {result.event_id})."
    )
    print_counts(result.counts)
    for warning in result.warnings:
        console.print(f"Note: {warning}", markup=False)


def _info(label: str, citation: str, licence: str, notes: str) -> SourceInfo:
    return SourceInfo(label=label, citation=citation, licence=licence, notes=notes)


@app.command("import-traits")
def import_traits_command(
    path: FileArgument,
    layout: Annotated[
        TraitLayout,
        typer.Option(
            "--layout", help="wide: a column per trait; long: taxon, trait, value (unit) columns."
        ),
    ] = "wide",
    column: Annotated[
        list[str] | None,
        typer.Option(
            "--columns",
            help="ROLE=COLUMN for a column with an unusual name; repeat it. Roles: "
            + ", ".join(ROLES)
            + ".",
        ),
    ] = None,
    trait: Annotated[
        list[str] | None,
        typer.Option(
            "--trait",
            help="Wide layout: a column that holds a trait; repeat it (default: every other "
            "column with numbers in it).",
        ),
    ] = None,
    unit: Annotated[
        list[str] | None,
        typer.Option("--unit", help="TRAIT=UNIT, the unit of a trait; repeat it."),
    ] = None,
    default_unit: Annotated[
        str | None,
        typer.Option("--default-unit", help="Unit of traits nothing else gives a unit."),
    ] = None,
    decimal: DecimalOption = ".",
    delimiter: DelimiterOption = None,
    encoding: EncodingOption = None,
    sheet: SheetOption = None,
    priority: PriorityOption = 100,
    label: LabelOption = "",
    citation: CitationOption = "",
    licence: LicenceOption = "",
    notes: NotesOption = "",
    store: StoreOption = None,
    user: UserOption = None,
) -> None:
    """Import a trait table (CSV, TSV or .xlsx) as measurements, one per
    specimen and trait, each kept as written beside its parsed number.

    Example: tipledger import-traits museum.csv --decimal ,
    """
    columns = parse_pairs(column, "--columns", ROLES)
    units = parse_pairs(unit, "--unit")
    with open_store(store) as opened, progress_bar("Storing measurements") as progress:
        result = import_traits(
            opened,
            path,
            layout=layout,
            columns=columns,
            traits=trait or None,
            delimiter=delimiter,
            encoding=encoding,
            decimal=decimal,
            sheet=sheet,
            default_unit=default_unit,
            units=units,
            priority=priority,
            info=_info(label, citation, licence, notes),
            who=user,
            progress=progress,
        )
    _report(result)


@app.command("import-darwin-core")
def import_darwin_core_command(
    path: FileArgument,
    decimal: DecimalOption = ".",
    priority: PriorityOption = 100,
    label: LabelOption = "",
    citation: CitationOption = "",
    licence: LicenceOption = "",
    notes: NotesOption = "",
    store: StoreOption = None,
    user: UserOption = None,
) -> None:
    """Import a Darwin Core Archive (zip with meta.xml: an Occurrence or Taxon
    core with the MeasurementOrFact extension) as measurements.

    Example: tipledger import-darwin-core collection-dwca.zip --priority 10
    """
    with open_store(store) as opened, progress_bar("Storing measurements") as progress:
        result = import_darwin_core(
            opened,
            path,
            decimal=decimal,
            priority=priority,
            info=_info(label, citation, licence, notes),
            who=user,
            progress=progress,
        )
    _report(result)


@app.command("import-synonyms")
def import_synonyms_command(
    path: FileArgument,
    layout: Annotated[
        SynonymLayout | None,
        typer.Option(
            "--layout",
            help="pairs: synonym and accepted-name columns; checklist: Darwin Core Taxon "
            "terms (taxonID, scientificName, taxonomicStatus, acceptedNameUsageID). Guessed.",
        ),
    ] = None,
    column: Annotated[
        list[str] | None,
        typer.Option(
            "--columns",
            help="ROLE=COLUMN for pairs; repeat it. Roles: " + ", ".join(PAIR_ROLES) + ".",
        ),
    ] = None,
    delimiter: DelimiterOption = None,
    encoding: EncodingOption = None,
    sheet: SheetOption = None,
    label: LabelOption = "",
    citation: CitationOption = "",
    licence: LicenceOption = "",
    notes: NotesOption = "",
    store: StoreOption = None,
    user: UserOption = None,
) -> None:
    """Import synonyms: a table of (synonym, accepted name) pairs, or a Darwin
    Core Taxon checklist as a table or an archive.

    Example: tipledger import-synonyms synonyms.csv --columns accepted=current
    """
    columns = parse_pairs(column, "--columns", PAIR_ROLES)
    with open_store(store) as opened, progress_bar("Storing synonyms") as progress:
        result = import_synonyms(
            opened,
            path,
            layout=layout,
            columns=columns,
            delimiter=delimiter,
            encoding=encoding,
            sheet=sheet,
            info=_info(label, citation, licence, notes),
            who=user,
            progress=progress,
        )
    _report(result)
