"""The demo command."""

from __future__ import annotations

from typing import Annotated

import typer

from curation.cli.app import app, console
from curation.cli.output import print_counts
from curation.demo.pipeline import run_demo


@app.command("demo")
def demo_command(
    folder: Annotated[str, typer.Option(help="Folder for the demo store.")] = "demo-output",
) -> None:
    """Build a demo store from the invented sample scenario and run every
    stage end to end.

    Example: tipledger demo --folder demo-output
    """
    summary = run_demo(folder)
    console.print(f"Demo store in {folder}:")
    print_counts(summary.model_dump())
