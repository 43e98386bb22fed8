"""The demo commands: generate the invented scenario, run the demo."""

from __future__ import annotations

from typing import Annotated

import pandas as pd
import typer

from curation.cli.app import app, console
from curation.cli.output import print_frame, print_store_summary
from curation.demo.generator import DEFAULT_SEED, generate_scenario
from curation.demo.pipeline import run_demo


@app.command("demo")
def demo_command(
    folder: Annotated[str, typer.Option(help="Folder for the demo store.")] = "demo-output",
    samples: Annotated[
        str | None,
        typer.Option(help="Use this scenario folder instead of generating one in FOLDER/samples."),
    ] = None,
    store: Annotated[
        str | None,
        typer.Option(help="Store file or SQLAlchemy URL to build (default: FOLDER/tipledger.db)."),
    ] = None,
) -> None:
    """Build a demo store from the invented sample scenario and run every
    stage end to end.

    Example: tipledger demo --folder demo-output
    """
    report = run_demo(folder, samples=samples, store=store)
    print_frame("Demo steps", pd.DataFrame([s.model_dump() for s in report.steps]))
    console.print(f"Demo store {report.store} (samples in {report.samples}):")
    print_store_summary(report.summary)


@app.command("generate-scenario")
def generate_scenario_command(
    folder: Annotated[str, typer.Option(help="Folder to write the scenario into.")] = "samples",
    seed: Annotated[int, typer.Option(help="Seed of the random generator.")] = DEFAULT_SEED,
    tips: Annotated[int, typer.Option(help="Tips of the dated tree (30 or more).")] = 200,
    posterior_trees: Annotated[
        int, typer.Option(help="Trees in the posterior sample (5 or more).")
    ] = 50,
) -> None:
    """Write the invented demo scenario (trees, three trait sources, synonyms,
    trait definitions and the ground truth) into a folder; the same seed
    gives byte-identical files.

    Example: tipledger generate-scenario --folder samples --seed 20261202
    """
    files = generate_scenario(folder, seed=seed, tips=tips, posterior_trees=posterior_trees)
    print_frame(
        f"Scenario written to {files.folder} (seed {seed})",
        pd.DataFrame({"file": [str(p.relative_to(files.folder)) for p in files.all_files()]}),
    )
