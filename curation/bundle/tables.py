"""The tables of a bundle, built from :class:`~curation.bundle.inputs.BundleInputs`:
the species trait table, the measurements used, the names, the findings
with what was done about each, and the accounting of every tip and every
written name."""

from __future__ import annotations

import json
from dataclasses import dataclass

import numpy as np
import pandas as pd

from curation.bundle.inputs import BundleInputs
from curation.names.decisions import note_info
from curation.store.decisions import DECISION_COLUMNS

__all__ = [
    "BundleTables",
    "build_tables",
    "finding_actions",
]

# What a repair does about a kind of tree finding (the repair names are the
# ones the trees stage records on derived tree sets).
REPAIR_ADDRESSES = {
    "tree.polytomy": {"resolve_polytomies"},
    "tree.basal_trifurcation": {"resolve_polytomies"},
    "tree.not_ultrametric": {"make_ultrametric"},
    "tree.zero_length_terminal": {"lengthen_zero_tips"},
    "tree.zero_length_internal": {"collapse_short_branches"},
    "tree.short_internal": {"collapse_short_branches"},
    "tree.tips_not_shared": {"prune_trees"},
}


FINDING_COLUMNS = [
    "finding_id",
    "code",
    "severity",
    "subject",
    "message",
    "action",
    "event_action",
    "event_id",
    "details",
]


@dataclass
class BundleTables:
    """The tables written into a bundle, and the tree tips they agree on.

    Attributes:
        keep: tip labels of the bundle's tree(s), sorted: the keys of
            ``species``, in the order of its rows.
        species: the species trait table (tip_label, then per continuous
            trait value, sd, se, n; per discrete trait state and n).
        traits: one row per trait (name, kind, scale, unit, columns).
        measurements: the measurements behind the species values.
        names: written name, tip, status, stage, score, who and when.
        findings: every finding with what was done about it.
        accounting: every tip and every written name with its outcome.
    """

    keep: list[str]
    species: pd.DataFrame
    traits: pd.DataFrame
    measurements: pd.DataFrame
    names: pd.DataFrame
    findings: pd.DataFrame
    accounting: pd.DataFrame


def _trait_frame(species: pd.DataFrame) -> pd.DataFrame:
    columns = ["trait", "kind", "scale", "unit"]
    if species.empty:
        return pd.DataFrame(columns=columns)
    frame = species[[c for c in columns if c in species.columns]].copy()
    for column in columns:
        if column not in frame:
            frame[column] = ""
    frame = frame.fillna("").drop_duplicates("trait").sort_values("trait")
    return frame[columns].reset_index(drop=True)


def _wide_species(species: pd.DataFrame, traits: pd.DataFrame, keep: list[str]) -> pd.DataFrame:
    wide = pd.DataFrame({"tip_label": keep})
    indexed = species.set_index(["trait", "tip_label"]) if not species.empty else None
    for trait, kind in zip(traits["trait"], traits["kind"], strict=True):
        rows = indexed.loc[trait] if indexed is not None else pd.DataFrame()
        rows = rows.reindex(keep)
        if kind == "discrete":
            wide[trait] = rows["state"].to_numpy() if "state" in rows else None
        else:
            wide[trait] = rows["mean"].to_numpy(dtype=float)
            wide[f"{trait}_sd"] = rows["sd"].to_numpy(dtype=float)
            wide[f"{trait}_se"] = rows["se"].to_numpy(dtype=float)
        wide[f"{trait}_n"] = rows["n"].astype("Int64").to_numpy()
    return wide


def finding_actions(inputs: BundleInputs, findings: pd.DataFrame) -> pd.Series:
    """Return, per finding, what was done about it in this bundle: a repair
    that addresses it, the name decisions it led to, whether a flagged
    measurement was left out of the species values, or that it was
    reported and the data used as they are."""
    repairs = {r["repair"] for r in inputs.repairs}
    m = inputs.measurements
    counted = set(m.loc[m["used"], "measurement_id"])
    by_curator = set(m.loc[m["curator_excluded"], "measurement_id"])
    actions = []
    for code, details in zip(findings["code"], findings["details"], strict=True):
        details = details if isinstance(details, dict) else {}
        fixed_by = sorted(REPAIR_ADDRESSES.get(code, set()) & repairs)
        ids = details.get("measurement_ids") or (
            [details["measurement_id"]] if "measurement_id" in details else []
        )
        if fixed_by:
            actions.append("repaired: " + ", ".join(fixed_by))
        elif code.startswith("names."):
            actions.append("see the name decisions (names.csv)")
        elif ids and set(ids) & by_curator:
            actions.append("measurement excluded by a curator")
        elif ids and not set(ids) & counted:
            actions.append("left out of the species values")
        elif ids:
            actions.append("kept in the species values")
        elif code.startswith("tree."):
            actions.append("reported; tree used as stored")
        else:
            actions.append("reported")
    return pd.Series(actions, index=findings.index, dtype=object)


def _accounting(inputs: BundleInputs, all_tips: list[str], keep: set[str]) -> pd.DataFrame:
    with_data = set(inputs.species["tip_label"]) if not inputs.species.empty else set()
    names = inputs.names
    reached = (
        names[names["status"] == "accepted"]
        .groupby("tip_label")["written_name"]
        .agg(lambda s: "; ".join(sorted(s)))
    )
    rows = []
    for tip in all_tips:
        if tip in with_data:
            status, reason = "matched", "has trait data"
        elif tip in reached.index:
            status, reason = "missing data", "names match but no usable value"
        else:
            status, reason = "missing data", "no written name matches this tip"
        rows.append(
            {
                "kind": "tip",
                "name": tip,
                "tip_label": tip,
                "status": status,
                "in_bundle": tip in keep,
                "reason": reason if tip in keep or tip in with_data else reason + "; pruned",
            }
        )
    tip_set = set(all_tips)
    for row in names.itertuples(index=False):
        if row.status == "accepted" and row.tip_label in tip_set:
            status = "matched" if row.tip_label in with_data else "missing data"
            reason = f"{row.stage} match, decided by {row.decided_by}"
        elif row.status == "accepted":
            status, reason = "excluded", f"its tip {row.tip_label!r} is not on the bundle's tree"
        elif row.status == "rejected":
            note = _short_note(row.note) or "no note"
            status, reason = "excluded", f"rejected by {row.decided_by}: {note}"
        else:
            status, reason = "excluded", "waiting for review (pending)"
        rows.append(
            {
                "kind": "written name",
                "name": row.written_name,
                "tip_label": row.tip_label if row.status == "accepted" else None,
                "status": status,
                "in_bundle": row.status == "accepted" and row.tip_label in keep,
                "reason": reason,
            }
        )
    frame = pd.DataFrame(
        rows, columns=["kind", "name", "tip_label", "status", "in_bundle", "reason"]
    )
    return frame.sort_values(["kind", "name"], kind="stable").reset_index(drop=True)


def _names_table(names: pd.DataFrame) -> pd.DataFrame:
    frame = names.copy()
    frame["decided_at"] = frame["decided_at"].map(
        lambda t: t.isoformat() if hasattr(t, "isoformat") else t
    )
    frame["note"] = frame["note"].map(_short_note)
    # The decision columns, with the decision's id last (people read names.csv).
    columns = [c for c in DECISION_COLUMNS if c != "decision_id"] + ["decision_id"]
    return frame[columns].sort_values("written_name").reset_index(drop=True)


def _short_note(note: object) -> str:
    """A decision's note for people: its text or reason, without the
    machine-readable candidates."""
    info = note_info(note if isinstance(note, str) else None)
    return str(info.get("text") or info.get("reason") or "")


def _measurements_table(inputs: BundleInputs, keep: set[str], traits: set[str]) -> pd.DataFrame:
    m = inputs.measurements
    m = m[m["tip_label"].isin(keep) & m["trait"].isin(traits)].copy()
    used_ids: set[int] = set()
    if "measurement_ids" in inputs.species:
        for ids in inputs.species["measurement_ids"]:
            if isinstance(ids, (list, tuple, np.ndarray)):
                used_ids.update(int(i) for i in ids)
    m["in_species_value"] = m["measurement_id"].isin(used_ids)
    columns = [
        "measurement_id",
        "tip_label",
        "trait",
        "written_name",
        "source_id",
        "trait_source",
        "row_number",
        "specimen_id",
        "institution",
        "sex",
        "life_stage",
        "value_written",
        "unit",
        "value",
        "target_unit",
        "factor",
        "status",
        "reason",
        "flags",
        "exclusion",
        "curator_excluded",
        "in_species_value",
    ]
    return m[columns].sort_values(["tip_label", "trait", "measurement_id"]).reset_index(drop=True)


def build_tables(inputs: BundleInputs) -> BundleTables:
    """Build every table of the bundle from ``inputs``.

    The tips kept are those of the bundle's tree(s) with data for at least
    one chosen trait (``missing="prune"``), or every tip (``"keep"``),
    sorted by label.
    """
    all_tips = sorted(set().union(*(set(a.tip_labels) for _, _, a in inputs.trees)))
    species = inputs.species[inputs.species["tip_label"].isin(all_tips)]
    keep = sorted(set(species["tip_label"])) if inputs.options.missing == "prune" else all_tips
    traits = _trait_frame(inputs.species)
    wide = _wide_species(species, traits, keep)
    findings = inputs.findings.copy()
    if not findings.empty:
        findings["action"] = finding_actions(inputs, findings)
        findings["details"] = findings["details"].map(
            lambda d: json.dumps(d, sort_keys=True, default=str)
        )
        findings = findings.sort_values(["code", "subject", "finding_id"]).reset_index(drop=True)
        findings = findings[FINDING_COLUMNS]
    else:
        findings = pd.DataFrame(columns=FINDING_COLUMNS)
    return BundleTables(
        keep=keep,
        species=wide,
        traits=traits,
        measurements=_measurements_table(inputs, set(keep), set(traits["trait"])),
        names=_names_table(inputs.names),
        findings=findings,
        accounting=_accounting(inputs, all_tips, set(keep)),
    )
