"""Commands that make and verify bundles."""

from __future__ import annotations

from pathlib import Path
from typing import Annotated, Literal

import typer

from curation.cli.app import StoreOption, UserOption, app, console
from curation.cli.output import progress_bar
from curation.store import open_store
from curation.traits.species import SourcePolicy

# The bundle stage (with pyarrow and the report) is imported when a bundle
# command runs, so that every other command starts faster; so the values of
# BundleOptions.missing are spelled here too (tests/test_cli.py checks that
# they agree).
MissingTips = Literal["prune", "keep"]


@app.command("make-bundle")
def make_bundle_command(
    folder: Annotated[Path, typer.Argument(help="Folder to write the bundle into (new or empty).")],
    tree: Annotated[
        int | None, typer.Option("--tree", help="Id of one tree (Newick output).")
    ] = None,
    tree_set: Annotated[
        int | None, typer.Option("--tree-set", help="Id of a tree set (NEXUS output).")
    ] = None,
    trait: Annotated[
        list[str] | None,
        typer.Option("--trait", help="A trait to include; repeat it (default: all)."),
    ] = None,
    missing: Annotated[
        MissingTips,
        typer.Option(help="prune: drop tips without data; keep: keep them with empty values."),
    ] = "prune",
    policy: Annotated[
        SourcePolicy,
        typer.Option(
            help="How measurements of several sources make one species value: pool them, "
            "take the preferred source (priority), or weight each source's mean by its n."
        ),
    ] = "pool",
    matrix: Annotated[
        bool, typer.Option("--matrix", help="Also write the covariance matrix.")
    ] = False,
    matrix_limit: Annotated[
        float, typer.Option(help="Refuse a matrix needing more than this many GB.")
    ] = 2.0,
    make_zip: Annotated[bool, typer.Option("--zip", help="Also write FOLDER.zip.")] = False,
    diagnostics: Annotated[
        bool, typer.Option(help="Compute the phylogenetic diagnostics per trait.")
    ] = True,
    permutations: Annotated[int, typer.Option(help="Permutations of Blomberg's K test.")] = 1000,
    seed: Annotated[int, typer.Option(help="Seed of the permutations.")] = 0,
    replace: Annotated[
        bool, typer.Option("--replace", help="Overwrite a bundle in FOLDER.")
    ] = False,
    allow_stale: Annotated[
        bool,
        typer.Option(
            "--allow-stale",
            help="Make the bundle even when written names have no decision yet or "
            "measurements are not yet flagged (refused by default); they are listed in "
            "the accounting as not yet reconciled / not yet flagged.",
        ),
    ] = False,
    store: StoreOption = None,
    user: UserOption = None,
) -> None:
    """Write an analysis-ready bundle: tree, species traits, measurements
    used, names, findings, Data Package, provenance, checksums and report.

    Example: tipledger make-bundle demo-bundle --tree 1 --zip
    """
    from curation.bundle import BundleOptions, make_bundle
    from curation.errors import StaleError

    options = BundleOptions(
        tree_id=tree,
        tree_set_id=tree_set,
        traits=trait or None,
        missing=missing,
        policy=policy,
        include_matrix=matrix,
        matrix_limit_bytes=int(matrix_limit * 1e9),
        make_zip=make_zip,
        diagnostics=diagnostics,
        permutations=permutations,
        seed=seed,
        allow_stale=allow_stale,
    )
    with open_store(store) as opened, progress_bar("diagnosing traits") as progress:
        try:
            result = make_bundle(
                opened, folder, options, replace=replace, who=user, progress=progress
            )
        except StaleError as exc:
            exc.hint = (
                "run `tipledger reconcile-names --tree-set N` and `tipledger flag-measurements "
                "--tree-set N` for the tree set named above, or give --allow-stale to make the "
                "bundle anyway with them listed in its accounting"
            )
            raise
    names = ", ".join(f"{n} {outcome}" for outcome, n in result.names.items() if n)
    console.print(
        f"Bundle in {result.folder}: {result.tips} tips, {len(result.traits)} traits, "
        f"{len(result.files)} files ({result.tips_pruned} tips pruned; written names: "
        f"{names or 'none'}; ledger event {result.event_id})."
    )
    if result.zip_path:
        console.print(f"Zip: {result.zip_path}")
    for warning in result.warnings:
        console.print(f"warning: {warning}", markup=False)


@app.command("verify-bundle")
def verify_bundle_command(
    path: Annotated[Path, typer.Argument(help="A bundle folder or its zip.")],
) -> None:
    """Re-check a bundle: checksums, tree tips against trait rows, the Data
    Package and its tables, and the provenance. Exits 1 if anything is wrong.

    Example: tipledger verify-bundle demo-bundle.zip
    """
    from curation.bundle import verify_bundle

    report = verify_bundle(path)
    for problem in report.problems:
        console.print(f"problem: {problem}", markup=False)
    if not report.ok:
        console.print(f"{len(report.problems)} problem(s) in {report.path}.")
        raise typer.Exit(1)
    console.print(
        f"{report.path} verifies: {report.files_checked} files, {report.tips} tips, "
        f"{report.trait_rows} trait rows."
    )
