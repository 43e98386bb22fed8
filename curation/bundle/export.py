"""Making a bundle: the analysis-ready folder (and optional zip) an analyst
loads straight into a comparative analysis.

The bundle is written into a temporary folder beside its destination and
moved into place only when every file is complete, in the same store
transaction as its ledger event: a failure leaves neither a half bundle
nor a partial event.
"""

from __future__ import annotations

import os
import shutil
import tempfile
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
from pydantic import BaseModel, Field

from curation import jsontext
from curation.bundle.files import (
    CHECKSUM_FILE,
    checksum_lines,
    write_csv,
    write_newick,
    write_nexus,
    write_zip,
)
from curation.bundle.inputs import BundleInputs, BundleOptions, gather_bundle_inputs
from curation.bundle.package import data_package, provenance
from curation.bundle.report import render_report
from curation.bundle.tables import NAME_OUTCOMES, BundleTables, build_tables
from curation.errors import ConflictError, InputError, TipledgerError
from curation.progress import Progress
from curation.store.engine import Store
from curation.store.ledger import record_event
from curation.trees.arrays import TreeArrays
from curation.trees.edits import pruned
from curation.trees.matrix import covariance_matrix

__all__ = ["BundleResult", "bundle_diagnostics", "make_bundle"]


class BundleResult(BaseModel):
    """What :func:`make_bundle` wrote."""

    folder: str
    zip_path: str | None
    event_id: int
    tree_file: str
    trees: int
    tips: int
    traits: list[str]
    files: list[str]
    tips_pruned: int
    names: dict[str, int] = Field(
        description="written names by outcome (matched, missing data, excluded, rejected, "
        "pending review, not yet reconciled)"
    )
    measurements_unflagged: int = Field(description="measurements not covered by the flagging")
    warnings: list[str] = Field(description="what the bundle's user should know")


def _json(data: Any) -> str:
    return jsontext.dumps(data, indent=2) + "\n"


def _bundle_trees(inputs: BundleInputs, keep: list[str]) -> list[tuple[str, TreeArrays]]:
    out = []
    wanted = set(keep)
    for tree_id, name, arrays in inputs.trees:
        tips = arrays.tip_labels
        if set(tips) != wanted:
            missing = wanted - set(tips)
            if missing:
                raise InputError(
                    f"tree {tree_id} lacks {len(missing)} tip(s) of the bundle "
                    f"(e.g. {sorted(missing)[0]!r}); every tree of a set must hold every tip kept",
                    field="tree set",
                    hint="prune the set to shared tips first (prune-trees), "
                    "or choose one tree with --tree",
                )
            arrays = pruned(arrays, keep)
        out.append((name or f"tree_{tree_id}", arrays))
    return out


def bundle_diagnostics(
    tree: TreeArrays,
    tables: BundleTables,
    *,
    permutations: int,
    seed: int,
    progress: Progress | None = None,
) -> list[dict[str, Any]]:
    """Return the phylogenetic diagnostics of every continuous trait of the
    bundle on ``tree`` (as plain dicts for JSON), or a note why a trait's
    could not be computed. ``progress(done, total)`` is called after each
    trait."""
    from curation.diagnostics import trait_diagnostics

    out: list[dict[str, Any]] = []
    species = tables.species.set_index("tip_label")
    continuous = tables.traits[tables.traits["kind"] != "discrete"]
    for done, row in enumerate(continuous.itertuples(index=False), start=1):
        if progress is not None:
            progress(done - 1, len(continuous))
        values = species[row.trait].astype(float).dropna()
        se_column = f"{row.trait}_se"
        se = (
            species[se_column].astype(float).reindex(values.index) if se_column in species else None
        )
        if se is not None and (se.isna().any() or not (se > 0).any()):
            se = None  # species with one measurement have no SE
        try:
            result = trait_diagnostics(
                tree, values, se=se, permutations=permutations, seed=seed, trait=row.trait
            )
            out.append(result.model_dump(mode="json"))
        except TipledgerError as exc:
            out.append(
                {
                    "trait": row.trait,
                    "status": "not_computed",
                    "tips_used": int(values.size),
                    "sentence": f"Not computed: {exc.message}",
                }
            )
        if progress is not None:
            progress(done, len(continuous))
    return out


def _write_files(
    inputs: BundleInputs, tables: BundleTables, folder: Path, progress: Progress | None
) -> tuple[str, list[dict[str, Any]]]:
    trees = _bundle_trees(inputs, tables.keep)
    if len(trees) == 1:
        tree_file = "tree.nwk"
        write_newick([trees[0][1]], folder / tree_file)
    else:
        tree_file = "trees.nex"
        write_nexus(trees, tables.keep, folder / tree_file)
    written: dict[str, pd.DataFrame] = {
        "species_traits": tables.species,
        "traits": tables.traits,
        "measurements_used": tables.measurements,
        "names": tables.names,
        "findings": tables.findings,
        "accounting": tables.accounting,
    }
    if inputs.options.include_matrix:
        labels, matrix = covariance_matrix(
            trees[0][1], memory_limit_bytes=inputs.options.matrix_limit_bytes
        )
        order = np.argsort(labels, kind="stable")
        ordered = [labels[i] for i in order]
        frame = pd.DataFrame(matrix[np.ix_(order, order)], columns=ordered)
        frame.insert(0, "tip_label", ordered)
        written["covariance"] = frame
    for name, frame in written.items():
        write_csv(frame, folder / f"{name}.csv")
    diagnostics: list[dict[str, Any]] = []
    if inputs.options.diagnostics and not tables.species.empty:
        diagnostics = bundle_diagnostics(
            trees[0][1],
            tables,
            permutations=inputs.options.permutations,
            seed=inputs.options.seed,
            progress=progress,
        )
    (folder / "datapackage.json").write_text(
        _json(data_package(inputs, tables, written, tree_file)), encoding="utf-8"
    )
    (folder / "provenance.json").write_text(
        _json(provenance(inputs, tables, {"tree_file": tree_file, "diagnostics": diagnostics})),
        encoding="utf-8",
    )
    (folder / "report.html").write_text(
        render_report(inputs, tables, [t for _, t in trees], diagnostics), encoding="utf-8"
    )
    (folder / CHECKSUM_FILE).write_text(checksum_lines(folder), encoding="utf-8")
    return tree_file, diagnostics


def make_bundle(
    store: Store,
    folder: str | os.PathLike[str],
    options: BundleOptions,
    *,
    replace: bool = False,
    who: str | None = None,
    progress: Progress | None = None,
) -> BundleResult:
    """Write an analysis-ready bundle of the store into ``folder``.

    The folder holds the tree (``tree.nwk``, or ``trees.nex`` with a
    TRANSLATE block for a tree set) whose tip labels are exactly the keys
    of ``species_traits.csv``; the tables of measurements used, names,
    findings and the accounting of every tip and written name; on request
    the variance-covariance matrix; ``datapackage.json``, ``provenance.json``,
    ``report.html`` and ``SHA256SUMS``; on request a zip beside the folder.
    With SOURCE_DATE_EPOCH set, the same store and options give the same
    bytes. ``progress(done, total)`` follows the diagnostics, trait by
    trait (the slow part of a large bundle).

    Returns:
        :class:`BundleResult`.

    Raises:
        ConflictError: ``folder`` exists and is not empty (and ``replace``
            is False).
        StaleError: written names without a decision or measurements not
            yet flagged, unless ``options.allow_stale``.
        NotFoundError: the tree or tree set is not in the store.
        InputError: bad options (see :class:`BundleOptions`), no tip with
            data, or a matrix above its memory limit.
    """
    target = Path(folder)
    if target.exists() and any(target.iterdir()) and not replace:
        raise ConflictError(
            f"the folder {str(target)!r} exists and is not empty",
            file=str(target),
            hint="choose a new folder, or replace the bundle there (replace)",
        )
    inputs = gather_bundle_inputs(store, options)
    tables = build_tables(inputs)
    if not tables.keep:
        raise InputError(
            "no tip of the chosen tree has trait data, so the bundle would be empty",
            field="tree",
            hint="reconcile the names first, or keep every tip (missing='keep')",
        )
    target.parent.mkdir(parents=True, exist_ok=True)
    work = Path(tempfile.mkdtemp(prefix=f".{target.name}.partial-", dir=target.parent))
    umask = os.umask(0)
    os.umask(umask)
    os.chmod(work, 0o777 & ~umask)  # a temporary folder is private; a bundle is not
    old: Path | None = None
    moved = zipped = False
    zip_path = target.with_suffix(".zip") if options.make_zip else None
    partial_zip = target.parent / f".{target.name}.partial.zip"
    try:
        tree_file, _ = _write_files(inputs, tables, work, progress)
        files = sorted(p.relative_to(work).as_posix() for p in work.rglob("*") if p.is_file())
        if zip_path is not None:
            write_zip(work, partial_zip, target.name)
        with store.transaction() as session:
            event = record_event(
                session,
                "make-bundle",
                subject=str(target),
                summary=f"bundle of {len(tables.keep)} tips and {len(tables.traits)} traits",
                parameters={"options": options.model_dump(mode="json"), "files": files},
                who=who,
            )
            event_id = event.id
            # Moved into place inside the transaction: if the event cannot
            # be stored, the handler below takes the bundle away again.
            if target.exists():
                old = Path(tempfile.mkdtemp(prefix=f".{target.name}.old-", dir=target.parent))
                os.replace(target, old / "bundle")
            os.replace(work, target)
            moved = True
            if zip_path is not None:
                os.replace(partial_zip, zip_path)
                zipped = True
    except BaseException:
        shutil.rmtree(target if moved else work, ignore_errors=True)
        partial_zip.unlink(missing_ok=True)
        if zipped and zip_path is not None:
            zip_path.unlink(missing_ok=True)
        if old is not None:
            os.replace(old / "bundle", target)
            shutil.rmtree(old, ignore_errors=True)
        raise
    if old is not None:
        shutil.rmtree(old, ignore_errors=True)
    accounting = tables.accounting
    outcomes = accounting.loc[accounting["kind"] == "written name", "status"].value_counts()
    names = {o: int(outcomes.get(o, 0)) for o in NAME_OUTCOMES}
    return BundleResult(
        folder=str(target),
        zip_path=str(zip_path) if zip_path else None,
        event_id=event_id,
        tree_file=tree_file,
        trees=len(inputs.trees),
        tips=len(tables.keep),
        traits=list(tables.traits["trait"]),
        files=files,
        tips_pruned=int(((accounting["kind"] == "tip") & ~accounting["in_bundle"]).sum()),
        names=names,
        measurements_unflagged=len(inputs.unflagged),
        warnings=bundle_warnings(names, len(inputs.unflagged)),
    )


def bundle_warnings(names: dict[str, int], unflagged: int) -> list[str]:
    """Return what a bundle's user should know about names and flags not
    settled: names waiting for review, and (made with stale input allowed)
    names without a decision and measurements not yet flagged."""
    out = []
    if names.get("pending review"):
        n = names["pending review"]
        out.append(
            f"{n} written name{'s' if n != 1 else ''} still wait{'s' if n == 1 else ''} for "
            "review; their measurements are not in the species values"
        )
    if names.get("not yet reconciled"):
        n = names["not yet reconciled"]
        out.append(
            f"{n} written name{'s have' if n != 1 else ' has'} no name decision yet "
            "(listed in the accounting as not yet reconciled)"
        )
    if unflagged:
        out.append(
            f"{unflagged} measurement{'s are' if unflagged != 1 else ' is'} not covered by the "
            "latest flagging (listed in the accounting as not yet flagged)"
        )
    return out
