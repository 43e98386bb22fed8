"""Commands of the diagnostics stage: how much the phylogeny matters for
each trait."""

from __future__ import annotations

from pathlib import Path
from typing import Annotated

import typer

from curation.cli.app import StoreOption, app, console
from curation.cli.output import print_frame
from curation.store import open_store

# The diagnostics stage (with scipy.stats) is imported when its command
# runs, so that every other command starts faster.


@app.command("diagnose-traits")
def diagnose_traits_command(
    tree: Annotated[int, typer.Option("--tree", help="Id of the stored tree to use.")],
    values: Annotated[
        Path | None,
        typer.Option(
            "--values",
            help="CSV of species values (tip_label, trait, mean, optional se, kind, sex); "
            "default: the traits stage's species values for the tree's set.",
        ),
    ] = None,
    trait: Annotated[
        list[str] | None, typer.Option("--trait", help="Only this trait (repeatable).")
    ] = None,
    permutations: Annotated[
        int, typer.Option("--permutations", help="Permutations for Blomberg's K p-value.")
    ] = 1000,
    seed: Annotated[int, typer.Option("--seed", help="Seed of the permutations.")] = 0,
    no_se: Annotated[
        bool, typer.Option("--no-se", help="Leave out the measurement-error variants.")
    ] = False,
    store: StoreOption = None,
) -> None:
    """Show, per continuous trait, the phylogenetic mean and SE beside the
    ordinary ones, the Brownian rate, Pagel's lambda, Blomberg's K and the
    contrasts' branch-length check, with one sentence on what they mean
    for treating species as independent.

    Example: tipledger diagnose-traits --tree 1 --values species.csv --permutations 999
    """
    from curation.diagnostics import diagnose_traits, diagnostics_frame

    with open_store(store) as opened:
        results = diagnose_traits(
            opened,
            tree,
            values,
            traits=trait,
            permutations=permutations,
            seed=seed,
            use_se=not no_se,
        )
    print_frame("Trait diagnostics", diagnostics_frame(results))
    for result in results:
        console.print(result.sentence, markup=False)
