"""Commands that import tree files into the store."""

from __future__ import annotations

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
from curation.cli.output import progress_bar
from curation.imports.common import SourceInfo
from curation.imports.trees import TreeFormat, import_trees
from curation.store import open_store


@app.command("import-trees")
def import_trees_command(
    path: Annotated[Path, typer.Argument(help="Newick, NEXUS or NeXML file of one or more trees.")],
    format: Annotated[
        TreeFormat | None,
        typer.Option(
            "--format",
            case_sensitive=False,
            help="The file's format (default: told from its content, then its name).",
        ),
    ] = None,
    burn_in: Annotated[
        int, typer.Option("--burn-in", help="Number of trees to skip at the start of the file.")
    ] = 0,
    keep_every: Annotated[
        int,
        typer.Option("--keep-every", help="After the burn-in, keep every k-th tree (1: all)."),
    ] = 1,
    label: LabelOption = "",
    citation: CitationOption = "",
    licence: LicenceOption = "",
    notes: NotesOption = "",
    store: StoreOption = None,
    user: UserOption = None,
) -> None:
    """Import the trees of a file as one tree set (a posterior sample may be
    thinned with --burn-in and --keep-every). Labels are kept as written.

    Example: tipledger import-trees posterior.nex --burn-in 100 --keep-every 10
    """
    info = SourceInfo(label=label, citation=citation, licence=licence, notes=notes)
    with open_store(store) as opened, progress_bar(f"importing {path.name}") as progress:
        result = import_trees(
            opened,
            path,
            format=format,
            burn_in=burn_in,
            keep_every=keep_every,
            info=info,
            who=user,
            progress=progress,
        )
    counts = result.counts
    console.print(
        f"Stored tree set {result.tree_set_id} from {result.file_name} "
        f"({result.format}, source {result.source_id}): {counts['trees_stored']} of "
        f"{counts['trees_in_file']} trees, {counts['distinct_tips']} distinct tips."
    )
    if counts["burn_in_skipped"] or keep_every > 1:
        console.print(
            f"Skipped {counts['burn_in_skipped']} as burn-in, then kept every {keep_every}."
        )
    for warning in result.warnings:
        console.print(f"Note: {warning}")
