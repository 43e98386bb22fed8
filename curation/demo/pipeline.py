"""The demo: build a store from the invented sample scenario and run every
stage, end to end.

The pipeline is a list of steps, each calling the library functions of
one stage in the order the data flows; a new stage slots in by adding one
step. A step that fails stops the demo with its error: the demo is the
project's smoke test.
"""

from __future__ import annotations

import json
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import pandas as pd
from pydantic import BaseModel
from sqlalchemy import select

from curation.demo.generator import (
    DEFAULT_SEED,
    ScenarioFiles,
    generate_scenario,
    scenario_files,
)
from curation.errors import ConflictError, NotFoundError
from curation.imports import import_darwin_core, import_synonyms, import_traits, import_trees
from curation.imports.common import SourceInfo, read_source_bytes, sha256_of
from curation.names import reconcile_names
from curation.store import Store, create_store, current_decisions
from curation.store.models import Source, Tree, TreeSet
from curation.store.summary import StoreSummary, summarise_store
from curation.traits import define_traits, flag_measurements, species_values
from curation.trees import check_trees, lengthen_zero_tips, make_ultrametric

__all__ = ["DEMO_STEPS", "DemoReport", "StepResult", "demo_name_decisions", "run_demo"]

DEMO_USER = "demo"


class StepResult(BaseModel):
    """What one step of the demo did."""

    step: str
    status: str  # done (a step that fails raises its error)
    message: str


class DemoReport(BaseModel):
    """The steps run, and what the demo store holds at the end."""

    folder: str
    store: str
    samples: str
    steps: list[StepResult]
    ids: dict[str, int]  # tree_set, posterior_set, tree: what the steps stored
    summary: StoreSummary


@dataclass
class DemoContext:
    """What the steps share: the store, the sample files and what earlier
    steps produced (tree set ids, species values ...)."""

    store: Store
    files: ScenarioFiles
    folder: Path
    burn_in: int
    results: dict[str, Any] = field(default_factory=dict)


def _import_once(
    context: DemoContext, importer: Callable[..., Any], path: Path, **options: Any
) -> int:
    """Import ``path`` unless the store already holds it (a demo run again
    in the same folder); return the source id either way."""
    info = SourceInfo(
        label=f"demo: {path.name}",
        citation=f"Invented demo scenario (generate-scenario --seed {context.files.seed})",
        licence="CC0-1.0",
    )
    try:
        result = importer(context.store, path, info=info, who=DEMO_USER, **options)
        return int(result.source_id)
    except ConflictError:
        digest = sha256_of(read_source_bytes(path))
        with context.store.reading() as session:
            stored = session.scalar(select(Source.id).where(Source.sha256 == digest))
        if stored is None:  # a conflict of another kind: show it
            raise
        return int(stored)


def _tree_set_of(context: DemoContext, source_id: int) -> int:
    with context.store.reading() as session:
        found = session.scalar(
            select(TreeSet.id).where(TreeSet.source_id == source_id).order_by(TreeSet.id)
        )
    return int(found)


def _step_import_trees(context: DemoContext) -> str:
    tree_source = _import_once(context, import_trees, context.files.tree)
    posterior_source = _import_once(
        context, import_trees, context.files.posterior, burn_in=context.burn_in
    )
    context.results["tree_set"] = _tree_set_of(context, tree_source)
    context.results["posterior_set"] = _tree_set_of(context, posterior_source)
    with context.store.reading() as session:
        tree_id = session.scalar(
            select(Tree.id).where(Tree.tree_set_id == context.results["tree_set"])
        )
    context.results["tree"] = int(tree_id)
    return (
        f"dated tree as set {context.results['tree_set']}, posterior sample (burn-in "
        f"{context.burn_in} skipped) as set {context.results['posterior_set']}"
    )


def _step_import_synonyms(context: DemoContext) -> str:
    _import_once(context, import_synonyms, context.files.synonyms)
    _import_once(context, import_synonyms, context.files.checklist)
    table, checklist = context.files.synonyms.name, context.files.checklist.name
    return f"synonym table {table}, Darwin Core Taxon checklist {checklist}"


def _step_import_traits(context: DemoContext) -> str:
    # Source 1: one row per specimen; units in the headers (body_mass_g).
    _import_once(
        context,
        import_traits,
        context.files.traits_wide,
        layout="wide",
        columns={"taxon": "taxon", "institution": "institution", "specimen": "catalog_number"},
        traits=["body_length_mm", "tail_length_mm", "head_width_mm", "body_mass_g", "activity"],
        priority=10,
    )
    # Source 2: one row per measurement, Windows-1252 with decimal commas.
    _import_once(
        context,
        import_traits,
        context.files.traits_long,
        layout="long",
        columns={
            "taxon": "species",
            "institution": "museum",
            "specimen": "catalogue_no",
            "trait": "trait",
            "value": "value",
            "unit": "unit",
        },
        delimiter="\t",
        encoding="cp1252",
        decimal=",",
        priority=20,
    )
    wide, long = context.files.traits_wide.name, context.files.traits_long.name
    return f"{wide} (wide, mm and g), {long} (long, cm and kg)"


def _step_import_darwin_core(context: DemoContext) -> str:
    _import_once(context, import_darwin_core, context.files.darwin_core, priority=30)
    return f"Darwin Core Archive {context.files.darwin_core.name}"


def _step_define_traits(context: DemoContext) -> str:
    define_traits(context.store, context.files.trait_definitions, who=DEMO_USER)
    return f"trait definitions from {context.files.trait_definitions.name}"


def _step_reconcile_names(context: DemoContext) -> str:
    report = reconcile_names(context.store, context.results["tree_set"], who=DEMO_USER)
    context.results["names"] = report
    return _describe(report)


def _step_check_trees(context: DemoContext) -> str:
    parts = []
    for key in ("tree_set", "posterior_set"):
        report = check_trees(context.store, context.results[key])
        parts.append(_describe(report))
    return "; ".join(parts)


def _step_flag_measurements(context: DemoContext) -> str:
    report = flag_measurements(context.store, context.results["tree_set"])
    return _describe(report)


def _step_species_values(context: DemoContext) -> str:
    frame = species_values(context.store, context.results["tree_set"])
    context.results["species"] = frame
    return f"{len(frame)} species values"


def _step_diagnose_traits(context: DemoContext) -> str:
    # Imported here, as the command that runs it does: the diagnostics
    # stage (with scipy.stats) is not loaded at start-up.
    from curation.diagnostics import diagnose_traits

    found = diagnose_traits(context.store, context.results["tree"], context.results["species"])
    return f"{len(found)} trait diagnostics"


def _step_repair_tree(context: DemoContext) -> str:
    # Opt-in repairs, each a derived tree set and a ledger event when it
    # changes a tree: first the rounding-level deviation, then the zero and
    # near-zero tips that would make the Brownian covariance singular or
    # let one sister contrast dominate the diagnostics. A repair that
    # changes nothing stores nothing, and the next one reads what is there.
    current = int(context.results["tree_set"])
    parts = []
    for name, repair in (
        ("made ultrametric", make_ultrametric),
        ("zero and near-zero tips lengthened", lengthen_zero_tips),
    ):
        report = repair(context.store, current, who=DEMO_USER)
        if report.changed:
            current = int(report.derived_tree_set_id)
            parts.append(f"{name} (set {current}, {report.trees_changed} of {report.trees} trees)")
        else:
            parts.append(report.message)
    if current != context.results["tree_set"]:
        with context.store.reading() as session:
            tree_id = session.scalar(select(Tree.id).where(Tree.tree_set_id == current))
        context.results["repaired_tree"] = int(tree_id)
    return "; ".join(parts)


def _step_make_bundle(context: DemoContext) -> str:
    # Imported here, as the commands that run it do: the bundle stage (with
    # pyarrow and the report) is not loaded at start-up.
    from curation.bundle import BundleOptions, make_bundle, verify_bundle

    target = context.folder / "bundle"
    # The repaired tree, or the dated tree itself when no repair changed it.
    tree = context.results.get("repaired_tree", context.results["tree"])
    options = BundleOptions(tree_id=tree, make_zip=True, permutations=999, seed=1)
    result = make_bundle(context.store, target, options, replace=True, who=DEMO_USER)
    report = verify_bundle(target)
    verdict = "verifies" if report.ok else f"{len(report.problems)} problems"
    return (
        f"bundle in {target} ({result.tips} tips, {len(result.traits)} traits, "
        f"{result.tips_pruned} tips pruned): {verdict}"
    )


def _describe(report: Any) -> str:
    """A one-line account of a stage's report: its own sentence if it has
    one, else its counts (integer fields and mappings of them)."""
    for attribute in ("sentence", "summary_line", "describe"):
        value = getattr(report, attribute, None)
        if callable(value):
            value = value()
        if isinstance(value, str):
            return value
    names = type(report).model_fields if isinstance(report, BaseModel) else {}
    fields = {name: getattr(report, name) for name in names}
    parts: list[str] = []
    for key, value in fields.items():
        if isinstance(value, bool):
            continue
        if isinstance(value, int):
            parts.append(f"{key.replace('_', ' ')}: {value}")
        elif isinstance(value, dict) and value and all(isinstance(v, int) for v in value.values()):
            inner = ", ".join(f"{k}: {v}" for k, v in value.items())
            parts.append(f"{key.replace('_', ' ')}: {inner}")
    return "; ".join(parts[:8]) or type(report).__name__


# Steps in the order the data flows; each needs what those before it stored.
DEMO_STEPS: list[tuple[str, Callable[[DemoContext], str]]] = [
    ("import trees", _step_import_trees),
    ("import synonyms", _step_import_synonyms),
    ("import traits", _step_import_traits),
    ("import Darwin Core", _step_import_darwin_core),
    ("define traits", _step_define_traits),
    ("reconcile names", _step_reconcile_names),
    ("check trees", _step_check_trees),
    ("flag measurements", _step_flag_measurements),
    ("species values", _step_species_values),
    ("diagnose traits", _step_diagnose_traits),
    ("repair tree", _step_repair_tree),
    ("make bundle", _step_make_bundle),
]


def run_demo(
    folder: str | Path = "demo-output",
    *,
    samples: str | Path | None = None,
    seed: int = DEFAULT_SEED,
    store: str | None = None,
) -> DemoReport:
    """Build the demo store ``folder/tipledger.db`` from the sample scenario
    and run every stage, in order.

    Args:
        folder: where the store (and the bundle) go; created if needed. A
            store already there is reused: files it holds are not imported
            again.
        samples: a folder written by :func:`generate_scenario`; by default
            the scenario is generated afresh into ``folder/samples`` with
            ``seed`` (byte-identical to the committed ``samples/``).
        store: a store file or SQLAlchemy URL to build instead of
            ``folder/tipledger.db`` (created when new, reused otherwise).

    Returns:
        A :class:`DemoReport`: what each step did, and the counts of what
        the store holds.

    Raises:
        TipledgerError: a stage failed on the samples.
    """
    target = Path(folder)
    target.mkdir(parents=True, exist_ok=True)
    if samples is None:
        files = generate_scenario(target / "samples", seed=seed)
    else:
        files = scenario_files(Path(samples), seed=seed)
        absent = [str(p) for p in files.all_files() if not p.exists()]
        if absent:
            raise NotFoundError(
                f"{samples!s} is not a complete sample scenario: {', '.join(absent)} missing",
                file=str(samples),
                hint="write one with tipledger generate-scenario --folder FOLDER",
            )
    burn_in = int(_tree_truth(files)["posterior"]["burn_in"])
    opened = create_store(store or target / "tipledger.db")
    with opened:
        context = DemoContext(opened, files, target, burn_in)
        steps = _run_steps(context)
        summary = summarise_store(opened)
        shown = opened.display_url()
    return DemoReport(
        folder=str(target),
        store=shown,
        samples=str(files.folder),
        steps=steps,
        ids={k: v for k, v in context.results.items() if isinstance(v, int)},
        summary=summary,
    )


def demo_name_decisions(folder: str | Path) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Write the demo scenario into ``folder/samples``, run the demo's steps
    up to and including the names stage on a new store ``folder/names.db``,
    and return what to judge the names stage by.

    Returns:
        The scenario's name truth (``samples/truth/names.csv``: written_name,
        true_tip ('' for none), kind ...) and the decisions in force for the
        dated tree (:func:`curation.store.current_decisions`).
    """
    target = Path(folder)
    files = generate_scenario(target / "samples")
    burn_in = int(_tree_truth(files)["posterior"]["burn_in"])
    with create_store(target / "names.db") as store:
        context = DemoContext(store, files, target, burn_in)
        _run_steps(context, until="reconcile names")
        with store.reading() as session:
            decided = current_decisions(session, context.results["tree_set"])
    truth = pd.read_csv(files.truth_names, keep_default_na=False)
    return truth, decided


def _run_steps(context: DemoContext, *, until: str | None = None) -> list[StepResult]:
    """Run the steps of :data:`DEMO_STEPS` in order, up to and including
    the step named ``until`` (all by default)."""
    steps: list[StepResult] = []
    for name, step in DEMO_STEPS:
        steps.append(StepResult(step=name, status="done", message=step(context)))
        if name == until:
            break
    return steps


def _tree_truth(files: ScenarioFiles) -> dict[str, Any]:
    return json.loads(files.truth_trees.read_text(encoding="utf-8"))  # type: ignore[no-any-return]
