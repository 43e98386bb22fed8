"""Reviewing pending names in the terminal, one at a time.

The loop talks through two functions, ``ask(prompt) -> answer`` and
``say(text)``, so the command line passes its prompt and printer and a
test passes scripted answers. Each decision is stored as soon as it is
made (its own ledger event), so quitting keeps the progress.

Keys: ``a`` accept the first candidate, a number picks that candidate,
``t`` type a tip label, ``r`` reject (no tip), ``s`` skip, ``u`` undo the
last decision of this session, ``q`` quit.
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

from pydantic import BaseModel
from rapidfuzz import process

from curation.names.decisions import apply_decisions
from curation.names.summary import pending_names
from curation.store.decisions import current_decisions
from curation.store.engine import Store
from curation.store.lineage import lineage_of
from curation.trees.stored import tip_labels_of_set

__all__ = ["KEYS", "ReviewResult", "review_names"]

KEYS = "a accept first | 1-9 pick candidate | t type a tip | r reject | s skip | u undo | q quit"


class ReviewResult(BaseModel):
    """What one review session did (an undone decision is no longer
    counted as accepted or rejected)."""

    accepted: int = 0
    rejected: int = 0
    skipped: int = 0
    undone: int = 0
    remaining: int = 0
    quit: bool = False


def review_names(
    store: Store,
    tree_set_id: int,
    *,
    ask: Callable[[str], str],
    say: Callable[[str], None],
    who: str | None = None,
) -> ReviewResult:
    """Walk through the pending names of tree set ``tree_set_id``, asking
    for a decision on each (see the module's keys) and storing it at once.

    Returns:
        A :class:`ReviewResult`: counts of what was decided, skipped and
        undone, and how many names remain pending.

    Raises:
        NotFoundError: no such tree set.
    """
    pending = pending_names(store, tree_set_id)
    with store.reading() as session:
        # A typed tip may be any tip of the lineage (decisions are the origin's).
        tips = tip_labels_of_set(session, lineage_of(session, tree_set_id).origin_id)
    tip_set = set(tips)
    result = ReviewResult()
    history: list[tuple[int, dict[str, Any], str]] = []
    total = len(pending)
    if total == 0:
        say("No pending names: nothing to review.")
    i = 0

    def record(item: dict[str, Any]) -> None:
        with store.transaction() as session:
            before = current_decisions(session, tree_set_id)
            previous = before[before["written_name"] == item["written_name"]]
            apply_decisions(session, tree_set_id, [item], action="review-names", who=who)
        history.append((i, previous.iloc[0].to_dict(), item["status"]))

    while i < total:
        row = pending.iloc[i]
        name, candidates = row["written_name"], row["candidates"]
        say(f"[{i + 1}/{total}] {name!r}  stage {row['stage']}; {row['reason'] or 'pending'}")
        for number, (tip, score) in enumerate(candidates, start=1):
            say(f"  {number}. {tip}  ({score:g})")
        if not candidates:
            say("  no candidates")
        answer = ask(KEYS).strip()
        key = answer.lower()
        choice: str | None = None
        if key == "q":
            result.quit = True
            break
        if key == "s":
            result.skipped += 1
            i += 1
            continue
        if key == "u":
            if not history:
                say("Nothing to undo in this session.")
                continue
            back_to, previous, undone_status = history.pop()
            with store.transaction() as session:
                apply_decisions(
                    session,
                    tree_set_id,
                    [
                        {
                            "written_name": previous["written_name"],
                            "status": previous["status"],
                            "tip_label": previous["tip_label"],
                            "stage": previous["stage"],
                            "score": float(previous["score"]),
                            "runner_up": previous["runner_up"],
                            "margin": previous["margin"],
                            "note": previous["note"],
                        }
                    ],
                    action="review-names",
                    who=who,
                )
            result.undone += 1
            if undone_status == "accepted":
                result.accepted -= 1
            else:
                result.rejected -= 1
            say(f"Undone: {previous['written_name']!r} is {previous['status']} again.")
            i = back_to
            continue
        if key == "r":
            record({"written_name": name, "status": "rejected", "note": "rejected in review"})
            result.rejected += 1
            i += 1
            continue
        if key == "a":
            choice = candidates[0][0] if candidates else None
            if choice is None:
                say("There is no candidate to accept: type a tip (t) or reject (r).")
                continue
        elif key.isdigit():
            number = int(key)
            if not candidates:
                say("There are no candidates to pick: type a tip (t) or reject (r).")
                continue
            if not 1 <= number <= len(candidates):
                say(f"Pick a number from 1 to {len(candidates)}.")
                continue
            choice = candidates[number - 1][0]
        elif key == "t":
            typed = ask("tip label").strip()
            if typed not in tip_set:
                near = process.extract(typed, tips, limit=3, score_cutoff=50)
                shown = ", ".join(t for t, _, _ in near) or "none close"
                say(f"{typed!r} is not a tip of this tree set (close: {shown}).")
                continue
            choice = typed
        else:
            say(f"Unknown key {answer!r}. Keys: {KEYS}")
            continue
        record(
            {
                "written_name": name,
                "status": "accepted",
                "tip_label": choice,
                "note": f"accepted in review (key {key!r})",
            }
        )
        result.accepted += 1
        say(f"Accepted: {name!r} -> {choice!r}")
        i += 1
    result.remaining = len(pending_names(store, tree_set_id))
    return result
