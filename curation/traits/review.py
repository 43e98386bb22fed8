"""Storing fault flags as findings, and a curator's exclusions and
re-inclusions of measurements.

What a finding says, and how severe it is, is each kind's row of
:data:`curation.traits.faults.FAULT_TABLE`; this module only renders it."""

from __future__ import annotations

import pandas as pd
from pydantic import BaseModel
from sqlalchemy import select

from curation.errors import InputError, NotFoundError
from curation.findings import Finding
from curation.store.engine import Store
from curation.store.ledger import current_user, record_event, record_findings
from curation.store.models import Measurement, MeasurementReview
from curation.timestamps import now
from curation.traits.faults import FAULT_KINDS, FAULT_TABLE, FaultKind, FaultOptions
from curation.traits.frame import measurements_frame

__all__ = [
    "FaultReport",
    "ReviewResult",
    "exclude_measurements",
    "fault_findings",
    "flag_measurements",
    "include_measurements",
]


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
    """Return the findings of a measurements frame's flags, as
    :data:`~curation.traits.faults.FAULT_TABLE` words them: one per flagged
    measurement and kind, then one per species, trait and species-level
    kind, in table order."""
    options = options or FaultOptions()
    findings: list[Finding] = []
    for kind in FAULT_TABLE:
        if kind.level == "measurement":
            findings.extend(_measurement_findings(frame, kind))
    for kind in FAULT_TABLE:
        if kind.level == "species":
            findings.extend(_species_findings(frame, kind, options))
    return findings


def _measurement_findings(frame: pd.DataFrame, kind: FaultKind) -> list[Finding]:
    findings = []
    for row in frame[frame[kind.name]].to_dict("records"):  # flagged rows only, a small share
        code, template = kind.template(row)
        fields = {k: ("" if v is None else v) for k, v in row.items()}
        for key in ("value", "minimum", "maximum", "slip_factor", "robust_z"):
            if fields[key] == "" or pd.isna(fields[key]):
                fields[key] = float("nan")
        findings.append(
            Finding(
                code=f"trait.{code}",
                severity=kind.severity,
                subject=f"measurement {row['id']}",
                message=template.format(**fields),
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
    return findings


def _species_findings(frame: pd.DataFrame, kind: FaultKind, options: FaultOptions) -> list[Finding]:
    hit = frame[frame[kind.name]]
    key = hit["tip_label"].fillna("name:" + hit["written_name"].astype(str))
    _, template = kind.template({})
    return [
        Finding(
            code=f"trait.{kind.name}",
            severity=kind.severity,
            subject=f"{tip} / {trait}",
            message=template.format(tip=tip, trait=trait, **options.model_dump()),
            details={"tip_label": tip, "trait": trait, "measurement_ids": ids.tolist()},
        )
        for (tip, trait), ids in hit.groupby([key, hit["trait"]], sort=True)["id"]
    ]


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
