"""Reviewing pending names through a sheet (CSV) in any spreadsheet program.

The exported sheet has one row per pending name: ``written_name``,
``stage``, ``reason``, ``candidate_1`` / ``score_1`` ... and two columns to
fill, ``decision`` and ``tip_label``:

- ``decision`` blank: leave the name pending;
- ``accept``: accept ``tip_label`` when filled, else ``candidate_1``;
- a number ``n``: accept ``candidate_n``;
- ``reject``: the name matches no tip.

A number or a bare ``accept`` refers to the candidates the row shows: the
sheet holds only the first few of a name's candidates, and a number past
them would pick a tip the reviewer never saw, so it is refused with the
range the row shows. A shown candidate that is no longer among the name's
candidates in the store (the sheet is older than the last reconciling) is
refused too.

Importing validates the whole sheet first (missing columns, malformed
decisions, unknown names and tips, repeated names, candidates not shown)
and reports every problem with its row and column; only a clean sheet is
applied, all of it in one transaction with one ledger event.
"""

from __future__ import annotations

import re
from pathlib import Path

import pandas as pd
from pydantic import BaseModel

from curation.errors import FormatError, InputError, Problem
from curation.names.decisions import apply_decisions, check_decisions
from curation.names.summary import pending_names
from curation.store.engine import Store

__all__ = ["SheetResult", "export_review_sheet", "import_review_sheet"]

REQUIRED = ["written_name", "decision", "tip_label"]
_CANDIDATE_COLUMN = re.compile(r"candidate_([1-9][0-9]*)")


class SheetResult(BaseModel):
    """What a sheet export or import did."""

    path: str
    rows: int
    accepted: int = 0
    rejected: int = 0
    left_pending: int = 0
    event_id: int | None = None


def export_review_sheet(
    store: Store, tree_set_id: int, path: str | Path, *, candidates: int = 3
) -> SheetResult:
    """Write the pending names of tree set ``tree_set_id`` to the CSV file
    ``path`` with up to ``candidates`` ranked candidates each and empty
    ``decision`` and ``tip_label`` columns.

    Returns:
        A :class:`SheetResult` with the number of rows written.

    Raises:
        NotFoundError: no such tree set.
    """
    pending = pending_names(store, tree_set_id)
    sheet = pd.DataFrame(
        {
            "written_name": pending["written_name"],
            "stage": pending["stage"],
            "reason": pending["reason"],
        }
    )
    for k in range(candidates):
        sheet[f"candidate_{k + 1}"] = [c[k][0] if len(c) > k else "" for c in pending["candidates"]]
        sheet[f"score_{k + 1}"] = [c[k][1] if len(c) > k else "" for c in pending["candidates"]]
    sheet["decision"] = ""
    sheet["tip_label"] = ""
    target = Path(path)
    sheet.to_csv(target, index=False, encoding="utf-8")
    return SheetResult(path=str(target), rows=len(sheet))


def _shown_range(shown: dict[int, str]) -> str:
    """Say which candidate numbers a row offers: ``a candidate number shown
    on the row (1 to 3)``, or that it shows none."""
    if not shown:
        return "a candidate number (the row shows no candidates)"
    numbers = sorted(shown)
    if numbers == list(range(1, len(numbers) + 1)):
        span = f"1 to {numbers[-1]}" if len(numbers) > 1 else "1"
    else:
        span = ", ".join(map(str, numbers))
    return f"a candidate number shown on the row ({span})"


def import_review_sheet(
    store: Store, tree_set_id: int, path: str | Path, *, who: str | None = None
) -> SheetResult:
    """Apply the decisions filled in a review sheet, all or nothing.

    Returns:
        A :class:`SheetResult` with counts of accepted, rejected and
        still-pending rows and the ledger event (``import-review-sheet``).

    Raises:
        FormatError: the file cannot be read as CSV or lacks a column.
        InputError: listing every problem with its row (rows counted as a
            spreadsheet shows them: the header is row 1) and column, among
            them a candidate number the row does not show (the message
            gives the range it shows) and a shown candidate that is no
            longer one of the name's; nothing applied.
        NotFoundError: no such tree set.
    """
    source = Path(path)
    try:
        sheet = pd.read_csv(
            source, dtype=str, keep_default_na=False, encoding="utf-8-sig", skip_blank_lines=True
        )
    except (OSError, UnicodeDecodeError, pd.errors.ParserError, pd.errors.EmptyDataError) as exc:
        raise FormatError(
            f"cannot read the review sheet as CSV: {exc}",
            file=str(source),
            hint="export a sheet with `tipledger export-review-sheet` and fill it in",
        ) from exc
    sheet.columns = [str(c).strip() for c in sheet.columns]
    missing = [c for c in REQUIRED if c not in sheet.columns]
    if missing:
        raise FormatError(
            f"the review sheet lacks the column(s) {', '.join(map(repr, missing))} "
            f"(columns found: {', '.join(map(repr, sheet.columns)) or 'none'})",
            file=str(source),
            hint="keep the header row of the exported sheet as it was",
        )
    numbered = sorted(
        (int(found.group(1)), column)
        for column in sheet.columns
        if (found := _CANDIDATE_COLUMN.fullmatch(column))
    )
    pending = pending_names(store, tree_set_id).set_index("written_name")
    problems: list[Problem] = []
    items = []
    seen: dict[str, int] = {}
    left = 0
    for position, record in enumerate(sheet.to_dict("records")):
        row = position + 2  # the header is row 1
        name = record["written_name"]
        decision = record["decision"].strip().lower()
        typed = record["tip_label"].strip()
        if name in seen:
            problems.append(
                Problem(
                    f"written name {name!r} is also on row {seen[name]}",
                    file=str(source),
                    row=row,
                    field="written_name",
                    hint="keep one row per written name",
                )
            )
            continue
        seen[name] = row
        if not decision and not typed:
            left += 1
            continue
        if name not in pending.index:
            problems.append(
                Problem(
                    f"written name {name!r} is not pending for tree set {tree_set_id}",
                    file=str(source),
                    row=row,
                    field="written_name",
                    hint="export a fresh sheet; names decided since are no longer in it",
                )
            )
            continue
        candidates = pending.at[name, "candidates"]
        if decision == "reject":
            items.append({"written_name": name, "status": "rejected", "row": row})
            continue
        # The candidates this row shows, by number: only these can be chosen.
        shown = {k: record[column].strip() for k, column in numbered if record[column].strip()}
        tip: str | None = None
        picked: int | None = None
        if decision == "accept" or (not decision and typed):
            if not typed and 1 not in shown:
                problems.append(
                    Problem(
                        f"{name!r} has no candidate to accept",
                        file=str(source),
                        row=row,
                        field="tip_label",
                        hint="type the tip label in the tip_label column, or write reject",
                    )
                )
                continue
            tip = typed or shown[1]
            picked = None if typed else 1
        elif decision.isdigit() and int(decision) in shown:
            picked = int(decision)
            tip = shown[picked]
        else:
            problems.append(
                Problem(
                    f"decision {record['decision']!r} is not accept, reject, blank or "
                    f"{_shown_range(shown)}",
                    file=str(source),
                    row=row,
                    field="decision",
                    hint="choose among the candidates the row shows, or type the tip "
                    "label in the tip_label column",
                )
            )
            continue
        if picked is not None and tip not in {c[0] for c in candidates}:
            listed = ", ".join(repr(c[0]) for c in candidates) or "none"
            problems.append(
                Problem(
                    f"candidate {picked} of {name!r} reads {tip!r}, which is not among its "
                    f"candidates in the store ({listed})",
                    file=str(source),
                    row=row,
                    field=f"candidate_{picked}",
                    hint="export a fresh sheet, or type the tip label in the tip_label column",
                )
            )
            continue
        items.append(
            {
                "written_name": name,
                "status": "accepted",
                "tip_label": tip,
                "row": row,
                "note": f"accepted in review sheet {source.name}, row {row}",
            }
        )
    with store.transaction() as session:
        for problem in check_decisions(session, tree_set_id, items):
            problems.append(
                Problem(
                    problem.message,
                    file=str(source),
                    row=problem.row,
                    field=problem.field,
                    hint=problem.hint,
                )
            )
        if problems:
            problems.sort(key=lambda p: p.row or 0)
            raise InputError(
                f"the review sheet has {len(problems)} problem(s); nothing was applied",
                file=str(source),
                problems=problems,
                hint="fix the rows listed and import the sheet again",
            )
        result = apply_decisions(
            session, tree_set_id, items, action="import-review-sheet", who=who, source="sheet"
        )
    return SheetResult(
        path=str(source),
        rows=len(sheet),
        accepted=sum(1 for i in items if i["status"] == "accepted"),
        rejected=sum(1 for i in items if i["status"] == "rejected"),
        left_pending=left,
        event_id=result.event_id,
    )
