"""The bundle's descriptors: ``datapackage.json`` (a Frictionless Data
Package describing every table) and ``provenance.json`` (what the bundle
was made from and how).

The Data Package follows the Frictionless Data Package and Table Schema
specifications (frictionlessdata.io, v1); it names no profile by URL so
that it validates offline.
"""

from __future__ import annotations

import importlib.metadata
import platform
from typing import Any

import pandas as pd

from curation.bundle.inputs import BundleInputs
from curation.bundle.tables import BundleTables
from curation.timestamps import now_iso

__all__ = ["DEPENDENCIES", "data_package", "field_schema", "provenance", "versions"]

DEPENDENCIES = [
    "tipledger",
    "numpy",
    "pandas",
    "pyarrow",
    "scipy",
    "dendropy",
    "rapidfuzz",
    "pint",
    "pydantic",
    "sqlalchemy",
    "alembic",
]

TABLE_DESCRIPTIONS = {
    "species_traits": "One row per tip of the bundle's tree: the species value of each trait "
    "(on the trait's scale) with its SD, SE and number of measurements.",
    "traits": "One row per trait: kind, scale and unit of its columns in species_traits.",
    "measurements_used": "The measurements of the bundle's tips, with their source file, row "
    "and specimen identifiers; in_species_value says whether each went into a species value.",
    "names": "The name decision in force for every written name: its tip, stage, score, and "
    "who decided when.",
    "findings": "Every finding of the latest checks, with what was done about it.",
    "accounting": "Every tip of the tree and every written name, with its outcome: matched, "
    "excluded with its reason, or missing data.",
    "covariance": "The phylogenetic variance-covariance matrix: shared path lengths from the "
    "root, rows and columns in the order of species_traits.",
}

FIELD_DESCRIPTIONS = {
    "tip_label": "Tip label of the tree, exactly as in the tree file",
    "written_name": "The taxon name as written in the trait source",
    "measurement_id": "Id of the measurement in the store",
    "source_id": "Id of the source file in the store; provenance.json gives its name and sha256",
    "row_number": "Row of the source file the value was read from (1 = first data row)",
}


def _field_type(series: pd.Series) -> str:
    kind = series.dtype.kind
    if kind == "b":
        return "boolean"
    if kind in "iu" or str(series.dtype) == "Int64":
        return "integer"
    if kind == "f":
        return "number"
    return "string"


def field_schema(frame: pd.DataFrame, units: dict[str, str] | None = None) -> dict[str, Any]:
    """Return the Table Schema of ``frame``: one field per column with its
    type, a description and, for trait columns, the unit."""
    units = units or {}
    fields = []
    for column in frame.columns:
        field: dict[str, Any] = {"name": str(column), "type": _field_type(frame[column])}
        if column in FIELD_DESCRIPTIONS:
            field["description"] = FIELD_DESCRIPTIONS[column]
        if column in units:
            field["description"] = units[column]["description"]
            if units[column]["unit"]:
                field["unit"] = units[column]["unit"]
        fields.append(field)
    return {"fields": fields}


def _trait_units(tables: BundleTables) -> dict[str, dict[str, str]]:
    out: dict[str, dict[str, str]] = {}
    for row in tables.traits.itertuples(index=False):
        scale = {"ln": "natural log of ", "log10": "log10 of "}.get(str(row.scale), "")
        unit = str(row.unit or "")
        if row.kind == "discrete":
            out[row.trait] = {"unit": "", "description": f"state of {row.trait}"}
        else:
            out[row.trait] = {
                "unit": unit,
                "description": f"species mean of {scale}{row.trait}"
                + (f" ({unit})" if unit else ""),
            }
            out[f"{row.trait}_sd"] = {
                "unit": unit,
                "description": f"SD of {row.trait} on its scale",
            }
            out[f"{row.trait}_se"] = {"unit": unit, "description": f"SE of the mean of {row.trait}"}
        out[f"{row.trait}_n"] = {"unit": "", "description": f"measurements behind {row.trait}"}
    return out


def data_package(
    inputs: BundleInputs,
    tables: BundleTables,
    written: dict[str, pd.DataFrame],
    tree_file: str,
) -> dict[str, Any]:
    """Return the ``datapackage.json`` descriptor of a bundle.

    ``written`` maps each CSV file's resource name to the frame written.
    """
    units = _trait_units(tables)
    resources: list[dict[str, Any]] = []
    for name, frame in written.items():
        resource: dict[str, Any] = {
            "name": name,
            "path": f"{name}.csv",
            "format": "csv",
            "mediatype": "text/csv",
            "encoding": "utf-8",
            "description": TABLE_DESCRIPTIONS.get(name, ""),
            "schema": field_schema(frame, units if name == "species_traits" else None),
        }
        if name in {"species_traits", "covariance"}:
            resource["schema"]["primaryKey"] = ["tip_label"]
        resources.append(resource)
    sources = [
        {
            "title": row.label or row.file_name,
            "path": row.file_name,
            **({"description": row.citation} if row.citation else {}),
        }
        for row in inputs.sources.itertuples(index=False)
    ]
    licences = sorted({str(s) for s in inputs.sources.get("licence", []) if s})
    descriptor: dict[str, Any] = {
        "name": "tipledger-bundle",
        "title": "Analysis-ready tree and species traits",
        "description": (
            f"Tree file {tree_file} with {len(tables.keep)} tips and the species values of "
            f"{len(tables.traits)} traits; every value traces to its source (measurements_used) "
            "and every choice to a decision (provenance.json)."
        ),
        "created": now_iso(),
        "sources": sources,
        "resources": resources,
    }
    if licences:
        descriptor["licenses"] = [{"name": name, "title": name} for name in licences]
    return descriptor


def versions() -> dict[str, str]:
    """Return the versions of Python, tipledger and its main dependencies."""
    out = {"python": platform.python_version()}
    for name in DEPENDENCIES:
        try:
            out[name] = importlib.metadata.version(name)
        except importlib.metadata.PackageNotFoundError:
            out[name] = "not installed"
    return out


def _records(frame: pd.DataFrame) -> list[dict[str, Any]]:
    if frame.empty:
        return []
    clean = frame.astype(object).where(frame.notna(), None)
    return clean.to_dict(orient="records")


def provenance(
    inputs: BundleInputs, tables: BundleTables, extra: dict[str, Any] | None = None
) -> dict[str, Any]:
    """Return ``provenance.json``: the inputs with their sha256, every name
    decision, exclusion and repair that shaped the bundle, every ledger
    event its content depends on in order
    (:func:`curation.store.provenance.events_in_force`), what was not yet
    settled when it was made with stale input allowed, the options, the
    software versions, the store and the creation time (SOURCE_DATE_EPOCH
    when set)."""
    decisions = inputs.names
    decision_records = [
        {
            "decision_id": int(r.decision_id),
            "written_name": r.written_name,
            "tip_label": r.tip_label,
            "status": r.status,
            "stage": r.stage,
            "score": float(r.score),
            "decided_by": r.decided_by,
            "decided_at": r.decided_at.isoformat()
            if hasattr(r.decided_at, "isoformat")
            else r.decided_at,
        }
        for r in decisions.itertuples(index=False)
    ]
    exclusions = inputs.exclusions
    return {
        "created": now_iso(),
        "store": inputs.store_url,
        "options": inputs.options.model_dump(mode="json"),
        "tree_set": inputs.tree_set,
        "trees": [
            {"tree_id": tid, "name": name, "tips": a.tip_labels.__len__()}
            for tid, name, a in inputs.trees
        ],
        "name_decisions_from_tree_set": inputs.decision_set_id,
        "lineage": {
            "origin_tree_set": inputs.lineage.origin_id,
            "path": list(inputs.lineage.path),
        },
        "inputs": _records(inputs.sources.drop(columns=["event_id"])),
        "decisions": decision_records,
        "exclusions": _records(exclusions),
        "repairs": inputs.repairs,
        "events": _records(inputs.events),
        "not_settled": {
            "written_names_not_yet_reconciled": list(inputs.undecided),
            "measurements_not_yet_flagged": [
                int(i) for i in inputs.unflagged["measurement_id"].to_numpy()
            ],
            "last_flag_event": inputs.staleness.last_flag_event,
        },
        "versions": versions(),
        **(extra or {}),
    }
