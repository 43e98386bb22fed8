"""The source audit: what each trait source brings and what is wrong with it."""

from __future__ import annotations

import json
import os
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
from pydantic import BaseModel, ConfigDict
from sqlalchemy import select

from curation import jsontext
from curation.store.engine import Store
from curation.store.models import Source, TraitSource
from curation.traits.faults import FAULT_KINDS, FaultOptions
from curation.traits.frame import measurements_frame
from curation.trees.stored import tip_labels_of_set

__all__ = ["SourceAudit", "audit_frame", "audit_sources"]


class SourceAudit(BaseModel):
    """Per source: counts, faults by kind, conflicts and conversions; per
    trait: the coverage of the tree's tips by each source and by all."""

    model_config = ConfigDict(arbitrary_types_allowed=True)

    tree_set_id: int
    tips: int
    sources: pd.DataFrame
    coverage: pd.DataFrame
    conversions: pd.DataFrame

    def to_dict(self) -> dict[str, Any]:
        """Return the audit as plain lists of records."""
        return {
            "tree_set_id": self.tree_set_id,
            "tips": self.tips,
            "sources": json.loads(self.sources.to_json(orient="records")),
            "coverage": json.loads(self.coverage.to_json(orient="records")),
            "conversions": json.loads(self.conversions.to_json(orient="records")),
        }

    def to_json(self, path: str | os.PathLike[str] | None = None) -> str:
        """Return the audit as JSON text (sorted keys), written to ``path`` if given."""
        text = jsontext.dumps(self.to_dict(), indent=2) + "\n"
        if path is not None:
            Path(path).write_text(text, encoding="utf-8")
        return text

    def to_csv(self, folder: str | os.PathLike[str]) -> list[Path]:
        """Write sources.csv, coverage.csv and conversions.csv into ``folder``;
        return their paths."""
        target = Path(folder)
        target.mkdir(parents=True, exist_ok=True)
        paths = []
        for name in ("sources", "coverage", "conversions"):
            path = target / f"audit_{name}.csv"
            getattr(self, name).to_csv(path, index=False, lineterminator="\n")
            paths.append(path)
        return paths


def audit_frame(frame: pd.DataFrame, tip_labels: list[str], names: pd.DataFrame) -> dict[str, Any]:
    """Audit a prepared measurements frame against the tree's tips.

    ``names`` maps trait_source_id to a source ``name``. Returns the three
    frames of :class:`SourceAudit` (sources, coverage, conversions).
    """
    tips = pd.Index(tip_labels).unique()
    on_tree = frame["tip_label"].isin(tips)
    source = frame["trait_source_id"].to_numpy()
    name_code = pd.factorize(frame["written_name"])[0]
    tip_code = pd.factorize(frame["tip_label"])[0]
    ids = pd.DataFrame({"s": source, "name": name_code, "tip": tip_code, "on": on_tree.to_numpy()})

    def distinct(column: str, rows: pd.DataFrame) -> pd.Series:
        return rows[["s", column]].drop_duplicates().groupby("s").size()

    factor = frame["factor"].to_numpy(dtype=float)
    per_row = pd.DataFrame(
        {
            "s": source,
            "measurements": 1,
            "unmatched": frame["tip_label"].isna().to_numpy(),
            "excluded": frame["excluded"].to_numpy(),
            "converted": ~np.isnan(factor) & (factor != 1.0),
        }
    )
    sources = per_row.groupby("s").sum()
    sources.insert(1, "names", distinct("name", ids))
    sources.insert(2, "tips", distinct("tip", ids[ids["on"]]))
    sources.index.name = "trait_source_id"
    faults = frame.groupby("trait_source_id")[list(FAULT_KINDS)].sum()
    sources = sources.join(faults.add_prefix("fault_"))
    sources = sources.fillna(0).astype(int).reset_index()
    sources = names.merge(sources, on="trait_source_id", how="right")
    counted = frame[~frame["excluded"] & on_tree]
    per = counted.groupby(["trait", "trait_source_id"])["tip_label"].nunique().unstack(fill_value=0)
    per.columns = [f"source_{c}" for c in per.columns]
    total = counted.groupby("trait")["tip_label"].nunique().rename("tips_with_values")
    traits = pd.Index(sorted(frame["trait"].unique()), name="trait")
    # With nothing counted (no name matched yet) there is no source column.
    coverage = total.to_frame().join(per) if len(per.columns) else total.to_frame()
    coverage = coverage.reindex(traits).fillna(0).astype(int)
    coverage["tips"] = len(tips)
    coverage["coverage"] = (coverage["tips_with_values"] / max(len(tips), 1)).round(4)
    coverage = coverage.reset_index()
    numeric = frame[frame["factor"].notna()]
    conversions = (
        numeric.groupby(["trait_source_id", "trait", "unit", "target", "factor"], dropna=False)
        .size()
        .rename("measurements")
        .reset_index()
    )
    problems = frame[frame["unit_problem"] != ""]
    unconverted = (
        problems.groupby(["trait_source_id", "trait", "unit", "unit_problem"], dropna=False)
        .size()
        .rename("measurements")
        .reset_index()
    )
    conversions = pd.concat([conversions, unconverted], ignore_index=True)
    conversions["unit_problem"] = conversions["unit_problem"].fillna("")
    conversions = conversions.sort_values(["trait_source_id", "trait", "unit"], na_position="first")
    return {
        "sources": sources,
        "coverage": coverage,
        "conversions": conversions.reset_index(drop=True),
    }


def audit_sources(
    store: Store, tree_set_id: int, *, options: FaultOptions | None = None
) -> SourceAudit:
    """Audit every trait source against tree set ``tree_set_id``: per source
    its measurements, written names, tips covered, unmatched and excluded
    values, faults by kind (source conflicts included) and conversions;
    per trait the tips covered by each source and by all.

    Raises:
        NotFoundError: no such tree set.
    """
    frame = measurements_frame(store, tree_set_id, options=options)
    with store.reading() as session:
        tips = tip_labels_of_set(session, tree_set_id)
        names = pd.DataFrame(
            session.execute(
                select(TraitSource.id, TraitSource.name, Source.file_name, TraitSource.priority)
                .join(Source, Source.id == TraitSource.source_id)
                .order_by(TraitSource.id)
            ).all(),
            columns=["trait_source_id", "name", "file_name", "priority"],
        )
    parts = audit_frame(frame, list(tips), names)
    return SourceAudit(tree_set_id=tree_set_id, tips=len(set(tips)), **parts)
