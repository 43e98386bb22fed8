"""Commands that check stored trees and repair them on request."""

from __future__ import annotations

from pathlib import Path
from typing import Annotated

import typer

from curation.cli.app import StoreOption, UserOption, app, console
from curation.cli.output import print_frame
from curation.errors import InputError
from curation.store import open_store
from curation.trees.checks import (
    DEFAULT_NEAR_ZERO,
    DEFAULT_OUTLIER_THRESHOLD,
    DEFAULT_TOLERANCE,
    tree_findings,
)
from curation.trees.checks import check_trees as check_trees_in_store
from curation.trees.edits import DEFAULT_TIP_LENGTH_SHARE, UltrametricMethod
from curation.trees.matrix import DEFAULT_MEMORY_LIMIT_BYTES
from curation.trees.repairs import (
    RepairReport,
    collapse_short_branches,
    lengthen_zero_tips,
    make_ultrametric,
    prune_trees,
    resolve_polytomies,
    sort_children,
)

TreeSetArgument = Annotated[
    int | None, typer.Argument(help="Id of the tree set (see show-store).", show_default=False)
]
TreeOption = Annotated[
    int | None, typer.Option("--tree", help="Id of one tree, instead of a whole tree set.")
]
ToleranceOption = Annotated[
    float,
    typer.Option(
        "--tolerance",
        help="Largest spread of root-to-tip distances, relative to tree height, "
        "still taken as ultrametric.",
    ),
]
NearZeroOption = Annotated[
    float,
    typer.Option(
        "--near-zero",
        help="Share of a tree's height below which a branch is too short to be real and "
        "counts as zero length; 0 counts exact zeros only (they always count). The default "
        "is 400 years on a tree 40 million years deep, younger than any split between "
        "species a dated tree resolves (our reasoning).",
    ),
]


def _print_repair(report: RepairReport) -> None:
    console.print(report.message)


@app.command("check-trees")
def check_trees_command(
    tree_set: TreeSetArgument = None,
    tree: TreeOption = None,
    tolerance: ToleranceOption = DEFAULT_TOLERANCE,
    outlier_threshold: Annotated[
        float,
        typer.Option(help="Modified z-score of a log branch length above which it is extreme."),
    ] = DEFAULT_OUTLIER_THRESHOLD,
    near_zero: NearZeroOption = DEFAULT_NEAR_ZERO,
    rooted: Annotated[
        bool | None,
        typer.Option("--rooted/--unrooted", help="Whether trees are meant to be rooted."),
    ] = None,
    matrix: Annotated[
        bool, typer.Option("--matrix", help="Also check the n x n covariance matrix.")
    ] = False,
    memory_limit: Annotated[
        int, typer.Option(help="Refuse a covariance matrix above this many bytes.")
    ] = DEFAULT_MEMORY_LIMIT_BYTES,
    store: StoreOption = None,
    user: UserOption = None,
) -> None:
    """Check every tree of a tree set (or one tree) and store the findings.

    Example: tipledger check-trees 1 --tolerance 1e-6
    """
    with open_store(store) as opened:
        report = check_trees_in_store(
            opened,
            tree_set,
            tree_id=tree,
            tolerance=tolerance,
            outlier_threshold=outlier_threshold,
            near_zero=near_zero,
            expect_rooted=rooted,
            matrix=matrix,
            memory_limit_bytes=memory_limit,
            who=user,
        )
    print_frame("Tree findings", report.frame()[["code", "severity", "subject", "message"]])
    for sentence in report.sentences:
        console.print(sentence)
    console.print(f"Checked {len(report.tree_ids)} trees; ledger event {report.event_id}.")


@app.command("show-tree-findings")
def show_tree_findings_command(
    tree_set: TreeSetArgument = None, tree: TreeOption = None, store: StoreOption = None
) -> None:
    """Show the findings of the latest check of a tree set (or one tree).

    Example: tipledger show-tree-findings 1
    """
    with open_store(store) as opened:
        frame = tree_findings(opened, tree_set, tree_id=tree)
    print_frame("Tree findings", frame[["code", "severity", "subject", "message"]])


@app.command("prune-trees")
def prune_trees_command(
    tree_set: TreeSetArgument = None,
    tips: Annotated[str | None, typer.Option(help="Tips to keep, separated by commas.")] = None,
    tips_file: Annotated[
        Path | None, typer.Option(help="File of tips to keep, one per line.")
    ] = None,
    tree: TreeOption = None,
    store: StoreOption = None,
    user: UserOption = None,
) -> None:
    """Prune trees to the given tips into a derived tree set.

    Example: tipledger prune-trees 1 --tips Aus_bus,Aus_cus,Dus_eus
    """
    keep = [t.strip() for t in (tips or "").split(",") if t.strip()]
    if tips_file is not None:
        if not tips_file.is_file():
            raise InputError(f"there is no file {str(tips_file)!r}", field="tips file")
        keep += [line.strip() for line in tips_file.read_text().splitlines() if line.strip()]
    with open_store(store) as opened:
        _print_repair(prune_trees(opened, tree_set, tips=keep, tree_id=tree, who=user))


@app.command("resolve-polytomies")
def resolve_polytomies_command(
    tree_set: TreeSetArgument = None,
    branch_length: Annotated[float, typer.Option(help="Length of the new branches.")] = 0.0,
    seed: Annotated[
        int | None, typer.Option(help="Resolve at random with this seed (default: in order).")
    ] = None,
    tree: TreeOption = None,
    store: StoreOption = None,
    user: UserOption = None,
) -> None:
    """Resolve polytomies into dichotomies, in a derived tree set.

    Example: tipledger resolve-polytomies 1 --branch-length 1e-6 --seed 7
    """
    with open_store(store) as opened:
        report = resolve_polytomies(
            opened, tree_set, tree_id=tree, branch_length=branch_length, seed=seed, who=user
        )
    _print_repair(report)


@app.command("collapse-short-branches")
def collapse_short_branches_command(
    tree_set: TreeSetArgument = None,
    threshold: Annotated[float, typer.Option(help="Collapse internal branches shorter.")] = 1e-8,
    tree: TreeOption = None,
    store: StoreOption = None,
    user: UserOption = None,
) -> None:
    """Collapse internal branches shorter than a threshold, in a derived tree set.

    Example: tipledger collapse-short-branches 1 --threshold 1e-6
    """
    with open_store(store) as opened:
        report = collapse_short_branches(
            opened, tree_set, threshold=threshold, tree_id=tree, who=user
        )
    _print_repair(report)


@app.command("make-ultrametric")
def make_ultrametric_command(
    tree_set: TreeSetArgument = None,
    method: Annotated[
        UltrametricMethod,
        typer.Option(
            help="extend: lengthen terminal branches to the deepest tip; least_squares: "
            "fit node ages that change branch lengths least."
        ),
    ] = "extend",
    tolerance: ToleranceOption = DEFAULT_TOLERANCE,
    force: Annotated[
        bool, typer.Option("--force", help="Also change trees whose deviation is substantive.")
    ] = False,
    tree: TreeOption = None,
    store: StoreOption = None,
    user: UserOption = None,
) -> None:
    """Make trees ultrametric when their deviation is rounding-level, in a derived tree set.

    A deviation is rounding-level when the decimals written in the file can
    explain it and it is at most 1% of the tree's height; anything more is
    substantive and needs --force. A run that changes no tree says so and
    stores nothing.

    Example: tipledger make-ultrametric 1 --method extend
    """
    with open_store(store) as opened:
        report = make_ultrametric(
            opened,
            tree_set,
            tree_id=tree,
            method=method,
            tolerance=tolerance,
            force=force,
            who=user,
        )
    _print_repair(report)


@app.command("lengthen-zero-tips")
def lengthen_zero_tips_command(
    tree_set: TreeSetArgument = None,
    length: Annotated[
        float | None,
        typer.Option(
            help="New length of each zero or near-zero terminal branch, in the tree's units "
            f"(default: {DEFAULT_TIP_LENGTH_SHARE:g} of each tree's height).",
            show_default=False,
        ),
    ] = None,
    near_zero: NearZeroOption = DEFAULT_NEAR_ZERO,
    keep_depths: Annotated[
        bool,
        typer.Option(
            "--keep-depths/--lengthen-only",
            help="Keep every root-to-tip distance by moving the short tips' parent towards "
            "the root (an ultrametric tree stays ultrametric), or lengthen the tips alone.",
        ),
    ] = True,
    tree: TreeOption = None,
    store: StoreOption = None,
    user: UserOption = None,
) -> None:
    """Lengthen zero and near-zero terminal branches, in a derived tree set.

    A branch is near zero when it is shorter than --near-zero times its
    tree's height (the rule check-trees uses). A run that changes no tree
    says so and stores nothing.

    Example: tipledger lengthen-zero-tips 1 --length 0.01 --near-zero 1e-5
    """
    with open_store(store) as opened:
        report = lengthen_zero_tips(
            opened,
            tree_set,
            length=length,
            near_zero=near_zero,
            keep_depths=keep_depths,
            tree_id=tree,
            who=user,
        )
    _print_repair(report)
    moved = report.details.get("tips_moved_from_root", 0)
    if moved:
        console.print(
            f"{moved} lengthened tips now end further from the root: their parent's branch "
            "was too short to give the length."
        )


@app.command("sort-children")
def sort_children_command(
    tree_set: TreeSetArgument = None,
    tree: TreeOption = None,
    store: StoreOption = None,
    user: UserOption = None,
) -> None:
    """Order every node's children (fewer tips first), in a derived tree set.

    Example: tipledger sort-children 1
    """
    with open_store(store) as opened:
        _print_repair(sort_children(opened, tree_set, tree_id=tree, who=user))
