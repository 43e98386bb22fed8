"""Commands that define traits, flag and review measurements, and show
species values and the source audit."""

from __future__ import annotations

from pathlib import Path
from typing import Annotated

import typer

from curation.cli.app import StoreOption, UserOption, app, console
from curation.cli.output import print_counts, print_frame
from curation.findings import findings_frame
from curation.store import open_store
from curation.traits import (
    FaultOptions,
    audit_sources,
    define_traits,
    exclude_measurements,
    flag_measurements,
    include_measurements,
    species_values,
)
from curation.traits.species import SourcePolicy

TreeSetOption = Annotated[
    int, typer.Option("--tree-set", help="Id of the tree set (see show-store).")
]
IdsOption = Annotated[list[int], typer.Option("--id", help="Measurement id (repeat for several).")]
ReasonOption = Annotated[str, typer.Option("--reason", help="Why, recorded in the ledger.")]
_DEFAULTS = FaultOptions()


@app.command("define-traits")
def define_traits_command(
    path: Annotated[Path, typer.Argument(help="TOML or JSON file of trait definitions.")],
    store: StoreOption = None,
    user: UserOption = None,
) -> None:
    """Store trait definitions (unit, scale and range, or states and their
    written variants) from a TOML or JSON file; the whole file is checked first.

    Example: tipledger define-traits traits.toml --store lab.db
    """
    with open_store(store) as opened:
        result = define_traits(opened, path, who=user)
    print_counts(result.model_dump())


@app.command("flag-measurements")
def flag_measurements_command(
    tree_set: TreeSetOption,
    outlier_threshold: Annotated[
        float,
        typer.Option(help="Robust z (median/MAD, log scale) above which a value is an outlier."),
    ] = _DEFAULTS.outlier_threshold,
    conflict_ratio: Annotated[
        float, typer.Option(help="Ratio of two sources' means above which they conflict.")
    ] = _DEFAULTS.conflict_ratio,
    genus_threshold: Annotated[
        float, typer.Option(help="Robust z above which a species is far from its genus.")
    ] = _DEFAULTS.genus_threshold,
    store: StoreOption = None,
    user: UserOption = None,
) -> None:
    """Flag impossible values, outliers, unit slips, duplicates and conflicts
    in the measurements, and store them as findings.

    Example: tipledger flag-measurements --tree-set 1 --store lab.db
    """
    options = FaultOptions(
        outlier_threshold=outlier_threshold,
        conflict_ratio=conflict_ratio,
        genus_threshold=genus_threshold,
    )
    with open_store(store) as opened:
        report = flag_measurements(opened, tree_set, options=options, who=user)
    print_frame("Findings", findings_frame(report.findings).drop(columns=["details"]), limit=30)
    print_counts(report.model_dump(exclude={"findings"}))


@app.command("exclude-measurement")
def exclude_measurement_command(
    ids: IdsOption, reason: ReasonOption, store: StoreOption = None, user: UserOption = None
) -> None:
    """Keep measurements out of species values, with a reason.

    Example: tipledger exclude-measurement --id 42 --reason "broken tail" --store lab.db
    """
    with open_store(store) as opened:
        result = exclude_measurements(opened, ids, reason, who=user)
    console.print(f"Excluded {len(result.measurement_ids)} measurements (event {result.event_id}).")


@app.command("include-measurement")
def include_measurement_command(
    ids: IdsOption, reason: ReasonOption, store: StoreOption = None, user: UserOption = None
) -> None:
    """Count measurements in species values even when flagged, with a reason.

    Example: tipledger include-measurement --id 42 --reason "checked the specimen" --store lab.db
    """
    with open_store(store) as opened:
        result = include_measurements(opened, ids, reason, who=user)
    console.print(f"Included {len(result.measurement_ids)} measurements (event {result.event_id}).")


@app.command("show-species-values")
def show_species_values_command(
    tree_set: TreeSetOption,
    trait: Annotated[list[str] | None, typer.Option("--trait", help="Only this trait.")] = None,
    policy: Annotated[
        SourcePolicy,
        typer.Option(
            help="How measurements of several sources make one value: pool them, take the "
            "preferred source (priority), or weight each source's mean by its n."
        ),
    ] = "pool",
    by_sex: Annotated[bool, typer.Option("--by-sex", help="One value per sex.")] = False,
    output: Annotated[Path | None, typer.Option(help="Also write the values to this CSV.")] = None,
    store: StoreOption = None,
) -> None:
    """Show one value per tip and trait (n, mean, SD, SE, median on the
    trait's scale, or the state) from the measurements that count.

    Example: tipledger show-species-values --tree-set 1 --policy priority --store lab.db
    """
    with open_store(store) as opened:
        values = species_values(opened, tree_set, traits=trait, policy=policy, by_sex=by_sex)
    if output is not None:
        values.to_csv(output, index=False, lineterminator="\n")
    print_frame("Species values", values.drop(columns=["measurement_ids"]).round(4))


@app.command("audit-sources")
def audit_sources_command(
    tree_set: TreeSetOption,
    json_file: Annotated[
        Path | None, typer.Option("--json", help="Write the audit as JSON.")
    ] = None,
    csv_folder: Annotated[
        Path | None, typer.Option("--csv", help="Write the audit tables as CSV into this folder.")
    ] = None,
    store: StoreOption = None,
) -> None:
    """Audit each trait source: measurements, tips covered, faults by kind,
    conversions; and the coverage of the tree's tips per trait.

    Example: tipledger audit-sources --tree-set 1 --json audit.json --store lab.db
    """
    with open_store(store) as opened:
        audit = audit_sources(opened, tree_set)
    print_frame("Sources", audit.sources)
    print_frame("Coverage of the tree's tips", audit.coverage)
    print_frame("Conversions", audit.conversions)
    if json_file is not None:
        audit.to_json(json_file)
    if csv_folder is not None:
        audit.to_csv(csv_folder)
