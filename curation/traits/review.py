"""Storing fault flags as findings, and a curator's exclusions and
re-inclusions of measurements."""

from __future__ import annotations

import pandas as pd
from pydantic import BaseModel
from sqlalchemy import select

from curation.errors import InputError, NotFoundError
from curation.findings import Finding, Severity
from curation.store.engine import Store
from curation.store.ledger import current_user, record_event, record_findings
from curation.store.models import Measurement, MeasurementReview
from curation.timestamps import now
from curation.traits.faults import FAULT_KINDS, SPECIES_KINDS, FaultOptions
from curation.traits.frame import measurements_frame

__all__ = [
    "FaultReport",
    "ReviewResult",
    "exclude_measurements",
    "fault_findings",
    "flag_measurements",
    "include_measurements",
]

_MESSAGES = {
    "unknown_unit": "unit {unit!r} is not a unit pint knows; the value stays unconverted",
    "incompatible_unit": "unit {unit!r} cannot be converted to {target!r}",
    "no_unit": "no unit is written, and the trait is measured in {target!r}",
    "impossible": "{value_written!r} {unit} is impossible for a trait on the {scale} scale",
    "out_of_range": "{value:.6g} {target} is outside the allowed range {minimum:g} to {maximum:g}",
    "unit_slip": "{value:.6g} {target} is about {slip_factor:g} times off the species median",
    "outlier": "{value:.6g} {target} is an outlier within its species (robust z {robust_z:.1f})",
    "duplicate_specimen": "specimen {institution} {specimen_id} is measured again (kept once)",
    "exact_duplicate": "row {row_number} repeats an earlier row of the same source",
    "unknown_state": "{value_written!r} is not a defined state of {trait!r}",
}
_SPECIES_MESSAGES = {
    "state_conflict": "the measurements of {tip} disagree on the state of {trait}",
    "far_from_genus": "{tip} lies far from the other species of its genus for {trait}",
    "source_conflict": "sources disagree on {trait} of {tip} (ratio of means above {ratio:g})",
}
_SEVERITY = {"duplicate_specimen": Severity.warning, "exact_duplicate": Severity.info}


class FaultReport(BaseModel):
    """What :func:`flag_measurements` found and stored."""

    event_id: int
    tree_set_id: int
    measurements: int
    excluded: int
    counts: dict[str, int]
    findings: list[Finding]


class ReviewResult(BaseModel):
    """The reviews a curator recorded, and their event."""

    event_id: int
    action: str
    measurement_ids: list[int]
    reason: str


def fault_findings(frame: pd.DataFrame, options: FaultOptions | None = None) -> list[Finding]:
    """Return one finding per flagged measurement and kind, and one per
    species, trait and species-level kind, from a measurements frame."""
    options = options or FaultOptions()
    findings: list[Finding] = []
    for kind in FAULT_KINDS:
        if kind in SPECIES_KINDS:
            continue
        hit = frame[frame[kind]]
        for row in hit.to_dict("records"):  # flagged rows only, a small share
            code = row["unit_problem"] if kind == "unconverted" else kind
            fields = {k: ("" if v is None else v) for k, v in row.items()}
            for key in ("value", "minimum", "maximum", "slip_factor", "robust_z"):
                if fields[key] == "" or pd.isna(fields[key]):
                    fields[key] = float("nan")
            findings.append(
                Finding(
                    code=f"trait.{code}",
                    severity=_SEVERITY.get(kind, Severity.error),
                    subject=f"measurement {row['id']}",
                    message=_MESSAGES[code].format(**fields),
                    details={
                        "measurement_id": int(row["id"]),
                        "trait": row["trait"],
                        "tip_label": row["tip_label"],
                        "written_name": row["written_name"],
                        "trait_source_id": int(row["trait_source_id"]),
                        "row_number": int(row["row_number"]),
                        "excluded": bool(row["excluded"]),
                    },
                )
            )
    for kind in SPECIES_KINDS:
        hit = frame[frame[kind]]
        key = hit["tip_label"].fillna("name:" + hit["written_name"].astype(str))
        for (tip, trait), ids in hit.groupby([key, hit["trait"]], sort=True)["id"]:
            findings.append(
                Finding(
                    code=f"trait.{kind}",
                    severity=Severity.warning,
                    subject=f"{tip} / {trait}",
                    message=_SPECIES_MESSAGES[kind].format(
                        tip=tip, trait=trait, ratio=options.conflict_ratio
                    ),
                    details={"tip_label": tip, "trait": trait, "measurement_ids": ids.tolist()},
                )
            )
    return findings


def flag_measurements(
    store: Store,
    tree_set_id: int,
    *,
    options: FaultOptions | None = None,
    who: str | None = None,
) -> FaultReport:
    """Flag the faults of every measurement (see :mod:`curation.traits.faults`)
    and store them as findings with one ledger event (``flag-measurements``).

    Returns:
        A :class:`FaultReport` with counts per kind and the findings.

    Raises:
        NotFoundError: no such tree set.
    """
    options = options or FaultOptions()
    frame = measurements_frame(store, tree_set_id, options=options)
    findings = fault_findings(frame, options)
    counts = {kind: int(frame[kind].sum()) for kind in FAULT_KINDS}
    with store.transaction() as session:
        event = record_event(
            session,
            "flag-measurements",
            subject=f"tree set {tree_set_id}",
            summary=f"flagged {sum(counts.values())} faults in {len(frame)} measurements",
            parameters={
                "tree_set_id": tree_set_id,
                "options": options.model_dump(),
                "counts": counts,
            },
            who=who,
        )
        record_findings(session, event, findings)
    return FaultReport(
        event_id=event.id,
        tree_set_id=tree_set_id,
        measurements=len(frame),
        excluded=int(frame["excluded"].sum()),
        counts=counts,
        findings=findings,
    )


def _review(
    store: Store, ids: list[int], reason: str, who: str | None, action: str
) -> ReviewResult:
    wanted = sorted({int(i) for i in ids})
    if not wanted:
        raise InputError("no measurement ids given", hint="give one or more ids (--id)")
    if not reason or not reason.strip():
        raise InputError(
            f"a reason is needed to {action} a measurement",
            field="reason",
            hint="say why with --reason",
        )
    with store.transaction() as session:
        found = set(session.scalars(select(Measurement.id).where(Measurement.id.in_(wanted))))
        missing = [i for i in wanted if i not in found]
        if missing:
            raise NotFoundError(
                f"there is no measurement {', '.join(map(str, missing))} in the store; "
                "nothing was changed",
                field="measurement id",
                hint="see the ids with `tipledger show-species-values` or the audit",
            )
        event = record_event(
            session,
            f"{action}-measurements",
            subject=f"{len(wanted)} measurements",
            summary=f"{action}d {len(wanted)} measurements: {reason.strip()}",
            parameters={"measurement_ids": wanted, "reason": reason.strip()},
            who=who,
        )
        at = now()
        session.add_all(
            MeasurementReview(
                measurement_id=i,
                action=action,
                reason=reason.strip(),
                who=current_user(who),
                at=at,
                event_id=event.id,
            )
            for i in wanted
        )
    return ReviewResult(
        event_id=event.id, action=action, measurement_ids=wanted, reason=reason.strip()
    )


def exclude_measurements(
    store: Store, ids: list[int], reason: str, who: str | None = None
) -> ReviewResult:
    """Exclude measurements from species values, with a reason: one
    :class:`MeasurementReview` per id and one ledger event.

    Raises:
        NotFoundError: an id is not a stored measurement (nothing changes).
        InputError: no ids or no reason.
    """
    return _review(store, ids, reason, who, "exclude")


def include_measurements(
    store: Store, ids: list[int], reason: str, who: str | None = None
) -> ReviewResult:
    """Include measurements in species values even when flagged, with a
    reason: one :class:`MeasurementReview` per id and one ledger event.

    Raises:
        NotFoundError: an id is not a stored measurement (nothing changes).
        InputError: no ids or no reason.
    """
    return _review(store, ids, reason, who, "include")
