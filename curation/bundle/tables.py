"""The tables of a bundle, built from :class:`~curation.bundle.inputs.BundleInputs`:
the species trait table, the measurements used, the names, the findings
with what was done about each, and the accounting of every tip and every
written name."""

from __future__ import annotations

import itertools
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd

from curation import jsontext
from curation.bundle.inputs import MEASUREMENT_FIELDS, BundleInputs
from curation.names.decisions import note_info
from curation.store.decisions import DECISION_COLUMNS

__all__ = [
    "NAME_OUTCOMES",
    "BundleTables",
    "applied_repairs",
    "build_tables",
    "finding_actions",
]

# What a repair does about a kind of tree finding (the repair names are the
# ones the trees stage records on derived tree sets).
REPAIR_ADDRESSES = {
    "tree.polytomy": {"resolve-polytomies"},
    "tree.basal_trifurcation": {"resolve-polytomies"},
    "tree.not_ultrametric": {"make-ultrametric"},
    "tree.zero_length_terminal": {"lengthen-zero-tips"},
    "tree.zero_length_internal": {"collapse-short-branches"},
    "tree.short_internal": {"collapse-short-branches"},
    "tree.tips_not_shared": {"prune-trees"},
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


def applied_repairs(repairs: list[dict[str, Any]]) -> list[dict[str, Any]]:
    """Return the repairs of a chain that changed a tree. A derived set
    whose ledger event says no tree changed (earlier versions stored one
    for a repair that changed nothing) stays in the provenance but is no
    repair applied."""
    return [r for r in repairs if (r.get("parameters") or {}).get("trees_changed", 1) != 0]


def finding_actions(inputs: BundleInputs, findings: pd.DataFrame) -> pd.Series:
    """Return, per finding, what was done about it in this bundle: a repair
    that addresses it, the name decisions it led to, whether a flagged
    measurement was left out of the species values, or that it was
    reported and the data used as they are."""
    repairs = {r["repair"] for r in applied_repairs(inputs.repairs)}
    m = inputs.measurements
    counted = set(m.loc[m["used"], "measurement_id"].to_numpy().tolist())
    by_curator = set(m.loc[m["curator_excluded"], "measurement_id"].to_numpy().tolist())
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


ACCOUNTING_COLUMNS = ["kind", "name", "tip_label", "status", "in_bundle", "reason"]


def _tip_accounting(
    inputs: BundleInputs, all_tips: list[str], keep: set[str], with_data: set[str]
) -> pd.DataFrame:
    tips = pd.Series(all_tips, dtype=object)
    names = inputs.names
    reached = set(names.loc[names["status"] == "accepted", "tip_label"])
    has_data = tips.isin(with_data).to_numpy(dtype=bool)
    in_bundle = tips.isin(keep).to_numpy(dtype=bool)
    reason = np.select(
        [has_data, tips.isin(reached).to_numpy(dtype=bool)],
        ["has trait data", "names match but no usable value"],
        "no written name matches this tip",
    ).astype(object)
    pruned = ~(in_bundle | has_data)
    reason[pruned] = reason[pruned] + "; pruned"
    return pd.DataFrame(
        {
            "kind": "tip",
            "name": tips,
            "tip_label": tips,
            "status": np.where(has_data, "matched", "missing data"),
            "in_bundle": in_bundle,
            "reason": reason,
        },
        columns=ACCOUNTING_COLUMNS,
    )


#: The outcomes of a written name in the accounting, each kept apart.
NAME_OUTCOMES = (
    "matched",
    "missing data",
    "excluded",
    "rejected",
    "pending review",
    "not yet reconciled",
)


def _name_accounting(
    inputs: BundleInputs, all_tips: list[str], keep: set[str], with_data: set[str]
) -> pd.DataFrame:
    names = inputs.names.reset_index(drop=True)
    status = names["status"].to_numpy(dtype=object)
    tip = names["tip_label"].astype(object)
    accepted = status == "accepted"
    on_tree = accepted & tip.isin(set(all_tips)).to_numpy(dtype=bool)
    rejected = status == "rejected"
    pending = status == "pending"
    reason = np.full(len(names), "", dtype=object)
    decided_by = names["decided_by"].astype(str)
    reason[on_tree] = (names["stage"].astype(str) + " match, decided by " + decided_by)[on_tree]
    elsewhere = accepted & ~on_tree
    # Only the few names that are not plainly matched need text of their own.
    reason[elsewhere] = [
        f"its tip {label!r} is not on the bundle's tree" for label in tip[elsewhere]
    ]
    reason[rejected] = [
        f"rejected by {who}: {_short_note(note) or 'no note'}"
        for who, note in zip(decided_by[rejected], names["note"][rejected], strict=True)
    ]
    reason[pending] = [
        f"waiting for review ({stage} stage, score {score:.0f}): {_short_note(note) or 'no note'}"
        for stage, score, note in zip(
            names["stage"][pending], names["score"][pending], names["note"][pending], strict=True
        )
    ]
    has_data = tip.isin(with_data).to_numpy(dtype=bool)
    outcome = np.select(
        [on_tree & has_data, on_tree, elsewhere, rejected, pending],
        ["matched", "missing data", "excluded", "rejected", "pending review"],
        "excluded",
    ).astype(object)
    decided = pd.DataFrame(
        {
            "kind": "written name",
            "name": names["written_name"],
            "tip_label": tip.where(accepted, None),
            "status": outcome,
            "in_bundle": accepted & tip.isin(keep).to_numpy(dtype=bool),
            "reason": reason,
        },
        columns=ACCOUNTING_COLUMNS,
    )
    undecided = pd.DataFrame(
        {
            "kind": "written name",
            "name": pd.Series(inputs.undecided, dtype=object),
            "tip_label": None,
            "status": "not yet reconciled",
            "in_bundle": False,
            "reason": "no name decision yet (imported after the last reconciliation); "
            "made with stale input allowed",
        },
        columns=ACCOUNTING_COLUMNS,
    )
    return pd.concat([decided, undecided], ignore_index=True) if len(undecided) else decided


def _measurement_accounting(inputs: BundleInputs, keep: set[str]) -> pd.DataFrame:
    """The measurements the latest flagging does not cover, one row each."""
    m = inputs.unflagged
    staleness = inputs.staleness
    redefined = set(staleness.redefined_since_flagging)
    if staleness.last_flag_event is None:
        why = pd.Series("the measurements were never flagged", index=m.index, dtype=object)
    else:
        why = pd.Series(
            f"imported after the latest flagging (event {staleness.last_flag_event})",
            index=m.index,
            dtype=object,
        )
        changed = m["trait"].isin(redefined)
        why[changed] = (
            "the definition of " + m.loc[changed, "trait"].astype(str) + " changed after the "
            f"latest flagging (event {staleness.last_flag_event})"
        )
    return pd.DataFrame(
        {
            "kind": "measurement",
            "name": "measurement " + m["measurement_id"].astype(str),
            "tip_label": m["tip_label"],
            "status": "not yet flagged",
            "in_bundle": m["used"].to_numpy(dtype=bool) & m["tip_label"].isin(keep).to_numpy(),
            "reason": why + "; made with stale input allowed",
        },
        columns=ACCOUNTING_COLUMNS,
    )


def _accounting(inputs: BundleInputs, all_tips: list[str], keep: set[str]) -> pd.DataFrame:
    """Every tip and every written name with its outcome and why (a name:
    one of :data:`NAME_OUTCOMES`), and every measurement not yet flagged,
    sorted by kind then name."""
    with_data = set(inputs.species["tip_label"].unique()) if not inputs.species.empty else set()
    parts = [
        _tip_accounting(inputs, all_tips, keep, with_data),
        _name_accounting(inputs, all_tips, keep, with_data),
    ]
    if len(inputs.unflagged):
        parts.append(_measurement_accounting(inputs, keep))
    frame = pd.concat(parts, ignore_index=True)
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
    m = m[m["tip_label"].isin(keep) & m["trait"].isin(traits)]
    lists = inputs.species.get("measurement_ids", pd.Series(dtype=object))
    used_ids = np.fromiter(
        itertools.chain.from_iterable(i for i in lists if isinstance(i, (list, tuple, np.ndarray))),
        dtype=np.int64,
    )
    m = m[list(MEASUREMENT_FIELDS)].assign(in_species_value=m["measurement_id"].isin(used_ids))
    # Sorted by tip, trait and id through integer codes (a string sort of a
    # million rows is the slow part otherwise).
    tip_code = pd.factorize(m["tip_label"], sort=True)[0]
    trait_code = pd.factorize(m["trait"], sort=True)[0]
    order = np.lexsort((m["measurement_id"].to_numpy(), trait_code, tip_code))
    return m.iloc[order].reset_index(drop=True)


def build_tables(inputs: BundleInputs) -> BundleTables:
    """Build every table of the bundle from ``inputs``.

    The tips kept are those of the bundle's tree(s) with data for at least
    one chosen trait (``missing="prune"``), or every tip (``"keep"``),
    sorted by label.
    """
    all_tips = sorted(set().union(*(set(a.tip_labels) for _, _, a in inputs.trees)))
    species = inputs.species[inputs.species["tip_label"].isin(all_tips)]
    keep = (
        sorted(set(species["tip_label"].unique()))
        if inputs.options.missing == "prune"
        else all_tips
    )
    traits = _trait_frame(inputs.species)
    wide = _wide_species(species, traits, keep)
    findings = inputs.findings.copy()
    if not findings.empty:
        findings["action"] = finding_actions(inputs, findings)
        findings["details"] = findings["details"].map(lambda d: jsontext.dumps(d))
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
