"""Name decisions in the store: reconciling a tree set's tips with every
written name, and recording a person's decisions.

Automatic decisions and pending names are :class:`NameDecision` rows. A
pending decision keeps its ranked candidates in its ``note``, as JSON
(``{"reason": ..., "candidates": [[tip, score], ...], ...}``), where review
reads them. A decision in force that is accepted or rejected is never
asked again; revising one adds a new decision that supersedes it, and the
old one stays.
"""

from __future__ import annotations

import json
from typing import Any

import pandas as pd
from pydantic import BaseModel, Field
from rapidfuzz import process
from sqlalchemy import insert, select
from sqlalchemy.exc import IntegrityError
from sqlalchemy.orm import Session

from curation import jsontext
from curation.errors import ConflictError, InputError, NotFoundError, Problem
from curation.findings import Finding
from curation.names.match import STAGES, MatchOptions, match_findings, match_names
from curation.store.decisions import current_decisions, decisions_for_names, known_written_names
from curation.store.engine import Store
from curation.store.ledger import current_user, record_event, record_findings
from curation.store.lineage import held_tips, lineage_of
from curation.store.models import Measurement, NameDecision, Synonym
from curation.timestamps import now
from curation.trees.stored import tip_labels_of_set

__all__ = [
    "DecisionResult",
    "ReconcileReport",
    "STATUSES",
    "apply_decisions",
    "check_decisions",
    "decision_history",
    "candidates_of",
    "decide_name",
    "reconcile_names",
    "written_names",
]

STATUSES = ("accepted", "rejected", "pending")


class ReconcileReport(BaseModel):
    """What :func:`reconcile_names` did for one tree set."""

    tree_set_id: int = Field(description="the tree set asked for")
    decisions_tree_set_id: int = Field(
        description="the origin of its lineage, where the decisions are recorded"
    )
    event_id: int
    written_names: int = Field(description="distinct written names in the measurements")
    tips: int
    reused: int = Field(description="names whose accepted or rejected decision was kept")
    new_decisions: int
    stages: dict[str, int] = Field(description="decisions in force per stage")
    accepted: int
    pending: int
    rejected: int
    findings: list[Finding]
    names_without_tip: list[str]
    tips_without_data: list[str]


class DecisionResult(BaseModel):
    """Decisions a person added: their ids, the ones they superseded, the
    ledger event."""

    event_id: int
    decision_ids: list[int]
    superseded_ids: list[int | None]


def candidates_of(note: str | None) -> list[list[Any]]:
    """Return the ranked candidates ``[[tip, score], ...]`` kept in a
    decision's note, or an empty list when the note holds none."""
    info = note_info(note)
    return [list(c) for c in info.get("candidates", [])]


def note_info(note: str | None) -> dict[str, Any]:
    """Return a decision note read as JSON (``{"text": note}`` when it is
    plain text)."""
    if not note:
        return {}
    try:
        value = json.loads(note)
    except ValueError:
        return {"text": note}
    return value if isinstance(value, dict) else {"text": note}


def written_names(session: Session) -> list[str]:
    """Return the sorted distinct written names of all measurements."""
    return sorted(session.scalars(select(Measurement.written_name).distinct()).all())


def _synonym_frame(session: Session) -> pd.DataFrame:
    rows = session.execute(select(Synonym.synonym, Synonym.accepted)).all()
    return pd.DataFrame(rows, columns=["synonym", "accepted"])


def _note(row: Any) -> str:
    return jsontext.dumps(
        {
            "automatic": True,
            "reason": row.reason,
            "canonical": row.canonical,
            "candidates": row.candidates,
        }
    )


def reconcile_names(
    store: Store,
    tree_set_id: int,
    *,
    options: MatchOptions | None = None,
    who: str | None = None,
) -> ReconcileReport:
    """Match every distinct written name of the measurements against the
    tips of tree set ``tree_set_id``'s lineage and record the decisions.

    Decisions belong to a lineage (:mod:`curation.store.lineage`): for a set
    derived by a repair they are matched against, and recorded on, the
    origin it was derived from, which every member of the lineage reads.

    Names with an accepted or rejected decision in force are reused, never
    matched again. Every other name is matched (:func:`match_names`): it is
    accepted automatically or left pending with its candidates in the note.
    A pending name whose result did not change gets no new row. New rows,
    the conflict findings and one ledger event (``reconcile-names``) are
    stored in one transaction.

    Returns:
        A :class:`ReconcileReport` with counts per stage and status, the
        findings and both leftover lists.

    Two runs at once are safe: the store lets a name have one first
    decision, so the run that records second is refused and runs once more,
    reusing what the first recorded.

    Raises:
        NotFoundError: no such tree set.
        ConflictError: the store changed under the run twice in a row.
    """
    opts = options or MatchOptions()
    user = current_user(who)
    try:
        return _reconcile(store, tree_set_id, opts, user)
    except ConflictError:
        # Another run recorded first decisions for the same names at the
        # same moment: once more, reusing what it recorded.
        return _reconcile(store, tree_set_id, opts, user)


def _reconcile(store: Store, tree_set_id: int, opts: MatchOptions, user: str) -> ReconcileReport:
    with store.transaction() as session:
        origin = lineage_of(session, tree_set_id).origin_id
        tips = tip_labels_of_set(session, origin)
        names = written_names(session)
        current = current_decisions(session, origin)
        settled = current[current["status"].isin(["accepted", "rejected"])]
        settled_names = set(settled["written_name"])
        to_match = [n for n in names if n not in settled_names]
        result = match_names(to_match, tips, _synonym_frame(session), opts)
        result["note"] = [_note(r) for r in result.itertuples(index=False)]
        previous = current.set_index("written_name")
        prev_note = previous["note"].reindex(result["written_name"]).to_numpy()
        prev_status = previous["status"].reindex(result["written_name"]).to_numpy()
        prev_id = previous["decision_id"].reindex(result["written_name"]).to_numpy()
        unchanged = (prev_status == "pending") & (prev_note == result["note"].to_numpy())
        fresh = result[~unchanged]
        fresh_prev = prev_id[~unchanged]
        event = record_event(
            session,
            "reconcile-names",
            subject=f"tree set {origin}",
            summary=(
                f"matched {len(result)} written names against {len(tips)} tips: "
                f"{int((fresh['status'] == 'accepted').sum())} accepted automatically, "
                f"{int((result['status'] == 'pending').sum())} pending, "
                f"{len(settled)} kept from earlier decisions"
            ),
            parameters={
                "tree_set_id": origin,
                "asked_tree_set_id": tree_set_id,
                "options": opts.model_dump(),
            },
            who=user,
        )
        at = now()
        rows = [
            {
                "tree_set_id": origin,
                "written_name": r.written_name,
                "tip_label": r.tip_label if r.status == "accepted" else None,
                "status": r.status,
                "stage": r.stage,
                "score": float(r.score),
                "runner_up": r.runner_up,
                "margin": None if pd.isna(r.margin) else float(r.margin),
                "decided_by": user,
                "decided_at": at,
                "note": r.note,
                "supersedes_id": None if pd.isna(p) else int(p),
                "event_id": event.id,
            }
            for r, p in zip(fresh.itertuples(index=False), fresh_prev, strict=True)
        ]
        if rows:
            try:
                session.execute(insert(NameDecision), rows)
            except IntegrityError:
                raise ConflictError(
                    f"another reconciliation or decision for tree set {origin} was recorded "
                    "while this one ran; nothing was recorded",
                    field="tree set",
                    hint="run the reconciliation again: it keeps what the other recorded",
                ) from None
        # Findings over everything in force now: earlier decisions and this run.
        kept = settled.assign(candidates=[[] for _ in range(len(settled))], reason="")
        in_force = pd.concat(
            [
                kept[["written_name", "status", "tip_label", "stage", "score", "runner_up"]]
                .assign(margin=kept["margin"], candidates=kept["candidates"], reason="")
                .astype({"margin": float}),
                result.drop(columns=["note", "canonical", "runner_up_score"]),
            ],
            ignore_index=True,
        )
        findings = match_findings(in_force, tips)
        record_findings(session, event, findings)
        report = _report(tree_set_id, event.id, names, tips, in_force, findings)
        report.decisions_tree_set_id = origin
        report.reused = len(settled)
        report.new_decisions = len(rows)
    return report


def _report(
    tree_set_id: int,
    event_id: int,
    names: list[str],
    tips: list[str],
    in_force: pd.DataFrame,
    findings: list[Finding],
) -> ReconcileReport:
    status = in_force["status"].value_counts()
    stages = in_force["stage"].value_counts()
    accepted = in_force[in_force["status"] == "accepted"]
    matched_names = set(accepted["written_name"])
    used_tips = set(accepted["tip_label"])
    return ReconcileReport(
        tree_set_id=tree_set_id,
        decisions_tree_set_id=tree_set_id,
        event_id=event_id,
        written_names=len(names),
        tips=len(tips),
        reused=0,
        new_decisions=0,
        stages={s: int(stages.get(s, 0)) for s in [*STAGES, "review", "sheet"] if s in stages},
        accepted=int(status.get("accepted", 0)),
        pending=int(status.get("pending", 0)),
        rejected=int(status.get("rejected", 0)),
        findings=findings,
        names_without_tip=sorted(n for n in names if n not in matched_names),
        tips_without_data=sorted(t for t in tips if t not in used_tips),
    )


def _close_tips(label: str, tips: list[str]) -> str:
    near = process.extract(label, tips, limit=3, score_cutoff=60)
    return ", ".join(repr(t) for t, _, _ in near) or "none close"


def check_decisions(
    session: Session,
    tree_set_id: int,
    items: list[dict[str, Any]],
    *,
    current: pd.DataFrame | None = None,
) -> list[Problem]:
    """Return every problem of a person's decisions (see
    :func:`apply_decisions`): unknown written names, statuses and tips (a
    tip must be one of the lineage's origin, see :mod:`curation.store.lineage`).
    Only the names and tips the items name are read from the store.
    ``current`` is the decisions in force for those names, when already read."""
    lineage = lineage_of(session, tree_set_id)
    names = [item["written_name"] for item in items]
    if current is None:
        current = decisions_for_names(session, lineage.origin_id, names)
    known = known_written_names(session, names) | set(current.index)
    wanted_tips = [str(i.get("tip_label")) for i in items if i.get("status") == "accepted"]
    held = held_tips(session, lineage.origin_id, wanted_tips)
    all_tips: list[str] | None = None
    problems: list[Problem] = []
    for item in items:
        name, status, tip = item["written_name"], item["status"], item.get("tip_label")
        row = item.get("row")
        if name not in known:
            problems.append(
                Problem(
                    f"written name {name!r} is in no measurement and has no decision",
                    row=row,
                    field="written_name",
                    value=name,
                    hint="use the name exactly as it is written in the trait source",
                )
            )
        if status not in STATUSES:
            problems.append(
                Problem(
                    f"decision {status!r} is not one of {', '.join(STATUSES)}",
                    row=row,
                    field="status",
                    value=status,
                )
            )
        if status == "accepted" and str(tip) not in held:
            if all_tips is None:  # only to name close tips in the message
                all_tips = tip_labels_of_set(session, lineage.origin_id)
            problems.append(
                Problem(
                    f"tip {tip!r} for {name!r} is not in {lineage.describe()} "
                    f"(close tips: {_close_tips(str(tip), all_tips)})",
                    row=row,
                    field="tip_label",
                    value=tip,
                    hint="give a tip label exactly as in the tree",
                )
            )
    return problems


def _in_force(current: pd.DataFrame, name: str) -> dict[str, Any] | None:
    """The decision in force for ``name`` as plain values, or None."""
    if name not in current.index:
        return None
    row = current.loc[name]
    at = row["decided_at"]
    return {
        "decision_id": int(row["decision_id"]),
        "written_name": name,
        "status": row["status"],
        "tip_label": row["tip_label"],
        "stage": row["stage"],
        "decided_by": row["decided_by"],
        "decided_at": at.isoformat() if hasattr(at, "isoformat") else str(at),
    }


def _conflict(conflicts: list[dict[str, Any]]) -> ConflictError:
    first = conflicts[0]["current"]
    shown = (
        f"{first['status']} by {first['decided_by']} (decision {first['decision_id']}"
        + (f", tip {first['tip_label']!r}" if first["tip_label"] else "")
        + ")"
        if first
        else "no decision"
    )
    return ConflictError(
        f"{len(conflicts)} decision(s) changed since they were read: for "
        f"{conflicts[0]['written_name']!r} the decision in force is now {shown}; "
        "nothing was recorded",
        field="expected_decision_id",
        hint="look at the decision in force and decide again if it still needs it",
        details={"conflicts": conflicts},
    )


def apply_decisions(
    session: Session,
    tree_set_id: int,
    items: list[dict[str, Any]],
    *,
    action: str,
    who: str | None = None,
    source: str = "review",
) -> DecisionResult:
    """Validate and add a person's decisions in ``session``'s transaction,
    with one ledger event ``action``.

    Each item has ``written_name``, ``status`` (accepted, rejected or
    pending), ``tip_label`` (required when accepted) and optional ``note``,
    ``stage``, ``row`` (the input row, for messages) and
    ``expected_decision_id``: the id of the decision in force the person
    saw (None: the name had none), for optimistic concurrency. Every item is
    checked before anything is added. The decisions are recorded on the
    origin of ``tree_set_id``'s lineage (:mod:`curation.store.lineage`), each
    superseding the decision in force; the store lets a decision be
    superseded only once, so of two people deciding the same name at once
    one is refused.

    Raises:
        InputError: listing every problem (unknown status, tip or name).
        ConflictError: a decision in force is not the one expected, or
            another person superseded it at the same moment (``details``
            holds the decisions in force); nothing is recorded.
    """
    origin = lineage_of(session, tree_set_id).origin_id
    current = decisions_for_names(session, origin, [i["written_name"] for i in items])
    problems = check_decisions(session, tree_set_id, items, current=current)
    if problems:
        raise InputError(
            f"{len(problems)} problem(s) in the decisions; nothing was recorded",
            problems=problems,
        )
    conflicts = []
    for item in items:
        if "expected_decision_id" not in item:
            continue
        now_in_force = _in_force(current, item["written_name"])
        seen = now_in_force["decision_id"] if now_in_force else None
        if item["expected_decision_id"] != seen:
            conflicts.append({"written_name": item["written_name"], "current": now_in_force})
    if conflicts:
        raise _conflict(conflicts)
    user = current_user(who)
    event = record_event(
        session,
        action,
        subject=f"tree set {origin}",
        summary=f"{len(items)} name decision(s) by {user}",
        parameters={
            "tree_set_id": origin,
            "asked_tree_set_id": tree_set_id,
            "count": len(items),
            "source": source,
        },
        who=user,
    )
    at = now()
    ids: list[int] = []
    superseded: list[int | None] = []
    for item in items:
        name = item["written_name"]
        prev = current.loc[name] if name in current.index else None
        prev_id = None if prev is None else int(prev["decision_id"])
        candidates = candidates_of(prev["note"]) if prev is not None else []
        tip = item.get("tip_label") if item["status"] == "accepted" else None
        score = next((float(s) for t, s in candidates if t == tip), 100.0) if tip else 0.0
        decision = NameDecision(
            tree_set_id=origin,
            written_name=name,
            tip_label=tip,
            status=item["status"],
            stage=item.get("stage") or source,
            score=item.get("score", score),
            runner_up=item.get("runner_up"),
            margin=item.get("margin"),
            decided_by=user,
            decided_at=at,
            note=item.get("note") or "",
            supersedes_id=prev_id,
            event_id=event.id,
        )
        session.add(decision)
        try:
            session.flush()
        except IntegrityError:
            # Another transaction superseded the same decision first.
            raise _conflict([{"written_name": name, "current": _in_force(current, name)}]) from None
        ids.append(decision.id)
        superseded.append(prev_id)
    return DecisionResult(event_id=event.id, decision_ids=ids, superseded_ids=superseded)


def decide_name(
    store: Store,
    tree_set_id: int,
    written_name: str,
    tip_label: str | None,
    status: str,
    note: str = "",
    who: str | None = None,
) -> DecisionResult:
    """Record a person's decision for ``written_name``: it supersedes the
    decision in force (kept as history) with one ledger event
    ``decide-name``.

    Raises:
        InputError: unknown status, a tip not in the tree set (the message
            names close tips), or a written name the store does not hold;
            nothing is recorded.
        NotFoundError: no such tree set.
    """
    with store.transaction() as session:
        return apply_decisions(
            session,
            tree_set_id,
            [
                {
                    "written_name": written_name,
                    "tip_label": tip_label,
                    "status": status,
                    "note": note,
                }
            ],
            action="decide-name",
            who=who,
        )


def decision_history(store: Store, tree_set_id: int, written_name: str) -> pd.DataFrame:
    """Return every decision recorded for ``written_name`` in a tree set's
    lineage, oldest first (the last one is in force).

    Raises:
        NotFoundError: no such tree set, or the name has no decision.
    """
    with store.reading() as session:
        origin = lineage_of(session, tree_set_id).origin_id
        rows = session.execute(
            select(
                NameDecision.id,
                NameDecision.status,
                NameDecision.tip_label,
                NameDecision.stage,
                NameDecision.score,
                NameDecision.decided_by,
                NameDecision.decided_at,
                NameDecision.supersedes_id,
                NameDecision.note,
            )
            .where(
                NameDecision.tree_set_id == origin,
                NameDecision.written_name == written_name,
            )
            .order_by(NameDecision.id)
        ).all()
    if not rows:
        raise NotFoundError(
            f"written name {written_name!r} has no decision for tree set {tree_set_id}",
            field="written_name",
            hint="run `tipledger reconcile-names` first",
        )
    return pd.DataFrame(
        rows,
        columns=[
            "decision_id",
            "status",
            "tip_label",
            "stage",
            "score",
            "decided_by",
            "decided_at",
            "supersedes_id",
            "note",
        ],
    )
