"""Commands that match written names to tips, review and show them."""

from __future__ import annotations

from typing import Annotated

import pandas as pd
import typer

from curation.cli.app import StoreOption, UserOption, app, console
from curation.cli.output import print_counts, print_frame
from curation.findings import findings_frame
from curation.names.decisions import decide_name, reconcile_names
from curation.names.match import MatchOptions
from curation.names.review import review_names
from curation.names.sheet import export_review_sheet, import_review_sheet
from curation.names.summary import summarise_names
from curation.store import open_store

TreeSetOption = Annotated[
    int, typer.Option("--tree-set", help="Id of the tree set (see show-store).")
]
_DEFAULTS = MatchOptions()


@app.command("reconcile-names")
def reconcile_names_command(
    tree_set: TreeSetOption,
    accept_score: Annotated[
        float, typer.Option(help="Lowest fuzzy score (0-100) accepted automatically.")
    ] = _DEFAULTS.accept_score,
    margin: Annotated[
        float, typer.Option(help="Points the best candidate must lead the runner-up by.")
    ] = _DEFAULTS.ambiguity_margin,
    review_score: Annotated[
        float, typer.Option(help="Lowest score of a candidate shown for review.")
    ] = _DEFAULTS.review_score,
    accept_genus_changes: Annotated[
        bool,
        typer.Option(
            "--accept-genus-changes",
            help="Accept automatically a spelling or fuzzy match whose genus is not the "
            "tip's genus (by default it waits for review).",
        ),
    ] = _DEFAULTS.accept_genus_changes,
    store: StoreOption = None,
    user: UserOption = None,
) -> None:
    """Match every written name of the measurements to the tips of a tree set,
    in stages (exact, canonical, synonym, gender, spelling, fuzzy, genus), and
    record the decisions; names decided before are kept. A match that changes
    the genus (Korvella written for a Corvella tip) waits for review unless
    asked otherwise; a synonym that moves a species to another genus does not.

    Example: tipledger reconcile-names --tree-set 1 --store lab.db
    """
    options = MatchOptions(
        accept_score=accept_score,
        ambiguity_margin=margin,
        review_score=review_score,
        accept_genus_changes=accept_genus_changes,
    )
    with open_store(store) as opened:
        report = reconcile_names(opened, tree_set, options=options, who=user)
    print_frame("Findings", findings_frame(report.findings).drop(columns=["details"]), limit=20)
    if report.decisions_tree_set_id != report.tree_set_id:
        console.print(
            f"Tree set {report.tree_set_id} was derived from tree set "
            f"{report.decisions_tree_set_id}: the decisions are recorded on tree set "
            f"{report.decisions_tree_set_id}, which every set derived from it reads."
        )
    print_counts(
        report.model_dump(
            exclude={"findings", "names_without_tip", "tips_without_data", "decisions_tree_set_id"}
        )
    )
    console.print(
        f"names without a tip: {len(report.names_without_tip)}; "
        f"tips without data: {len(report.tips_without_data)}"
    )


@app.command("review-names")
def review_names_command(
    tree_set: TreeSetOption, store: StoreOption = None, user: UserOption = None
) -> None:
    """Review the pending names one at a time: accept, pick another candidate,
    type a tip, reject, skip, undo or quit (decisions made are kept).

    Example: tipledger review-names --tree-set 1 --store lab.db
    """

    def ask(prompt: str) -> str:
        try:
            return str(typer.prompt(prompt, default="", show_default=False))
        except typer.Abort:
            return "q"

    with open_store(store) as opened:
        result = review_names(
            opened, tree_set, ask=ask, say=lambda t: console.print(t, markup=False), who=user
        )
    print_counts(result.model_dump())


@app.command("export-review-sheet")
def export_review_sheet_command(
    tree_set: TreeSetOption,
    path: Annotated[str, typer.Argument(help="CSV file to write.")],
    store: StoreOption = None,
) -> None:
    """Write the pending names with their candidates to a CSV sheet; fill its
    decision column (accept, reject or a candidate number) or tip_label column.

    Example: tipledger export-review-sheet --tree-set 1 review.csv --store lab.db
    """
    with open_store(store) as opened:
        result = export_review_sheet(opened, tree_set, path)
    console.print(f"Wrote {result.rows} pending names to {result.path}")


@app.command("import-review-sheet")
def import_review_sheet_command(
    tree_set: TreeSetOption,
    path: Annotated[str, typer.Argument(help="The filled CSV sheet.")],
    store: StoreOption = None,
    user: UserOption = None,
) -> None:
    """Apply a filled review sheet: every row is checked first, and nothing is
    applied unless the whole sheet is valid.

    Example: tipledger import-review-sheet --tree-set 1 review.csv --store lab.db
    """
    with open_store(store) as opened:
        result = import_review_sheet(opened, tree_set, path, who=user)
    print_counts(result.model_dump())


@app.command("decide-name")
def decide_name_command(
    tree_set: TreeSetOption,
    written_name: Annotated[str, typer.Argument(help="The name as written in the data.")],
    tip: Annotated[str | None, typer.Option(help="Tip label to map it to.")] = None,
    reject: Annotated[bool, typer.Option(help="Record that it matches no tip.")] = False,
    note: Annotated[str, typer.Option(help="Why, for the record.")] = "",
    store: StoreOption = None,
    user: UserOption = None,
) -> None:
    """Record a decision for one written name (it supersedes the one in force,
    which is kept).

    Example: tipledger decide-name --tree-set 1 "Aus bus" --tip Aus_bus --store lab.db
    """
    status = "rejected" if reject else "accepted"
    with open_store(store) as opened:
        result = decide_name(opened, tree_set, written_name, tip, status, note, who=user)
    console.print(f"Recorded decision {result.decision_ids[0]} ({status}).")


@app.command("show-names")
def show_names_command(
    tree_set: TreeSetOption,
    store: StoreOption = None,
    limit: Annotated[int, typer.Option(help="Most leftovers listed.")] = 20,
) -> None:
    """Show where the names stand: counts per stage, accepted, pending and
    rejected, and the leftovers (names without a tip, tips without data).

    Example: tipledger show-names --tree-set 1 --store lab.db
    """
    with open_store(store) as opened:
        summary = summarise_names(opened, tree_set)
    print_counts(summary.model_dump(exclude={"names_without_tip", "tips_without_data"}))
    for title, values in [
        ("Names without a tip", summary.names_without_tip),
        ("Tips without data", summary.tips_without_data),
    ]:
        print_frame(title, pd.DataFrame({"name": values}), limit=limit)
