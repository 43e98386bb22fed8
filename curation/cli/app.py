"""The Typer application and what every command shares.

Commands live in one module per stage (``store_commands``,
``import_commands`` ...) and register themselves on :data:`app`. Each one
opens the store, calls one library function and prints its result.
"""

from __future__ import annotations

from typing import Annotated

import typer
from rich.console import Console

__all__ = [
    "CitationOption",
    "LabelOption",
    "LicenceOption",
    "NotesOption",
    "StoreOption",
    "UserOption",
    "app",
    "console",
]

app = typer.Typer(
    name="tipledger",
    help=(
        "Reconcile a phylogeny with species trait tables: import sources into a "
        "store, match names, check and repair trees, curate traits, and export "
        "an analysis-ready bundle with full provenance.\n\n"
        "Example: tipledger demo --folder demo-output"
    ),
    no_args_is_help=True,
    add_completion=False,
    pretty_exceptions_enable=False,
    rich_markup_mode=None,
)

console = Console(highlight=False, soft_wrap=True)

StoreOption = Annotated[
    str | None,
    typer.Option(
        "--store",
        envvar="TIPLEDGER_STORE",
        help="SQLite file or SQLAlchemy URL of the store (default: tipledger.db here).",
        show_envvar=True,
    ),
]

UserOption = Annotated[
    str | None,
    typer.Option(
        "--user",
        envvar="TIPLEDGER_USER",
        help="Name recorded as who acted, in the ledger (default: your login name).",
        show_envvar=True,
    ),
]

# What a user says about a source file when importing it (SourceInfo).
LabelOption = Annotated[
    str, typer.Option("--label", help="Short name of the source (default: the file name).")
]
CitationOption = Annotated[
    str, typer.Option("--citation", help="Where the source was published or came from.")
]
LicenceOption = Annotated[
    str, typer.Option("--licence", help="Terms the source may be used under (e.g. CC-BY-4.0).")
]
NotesOption = Annotated[str, typer.Option("--notes", help="Anything else worth recording.")]
