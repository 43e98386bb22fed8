"""Where the names of a tree set stand: counts per stage and status, the
pending names with their candidates, and both leftover lists."""

from __future__ import annotations

import pandas as pd
from pydantic import BaseModel, Field

from curation.names.decisions import candidates_of, note_info, written_names
from curation.store.decisions import current_decisions
from curation.store.engine import Store
from curation.trees.stored import tip_labels_of_set

__all__ = ["NameSummary", "pending_names", "summarise_names"]


class NameSummary(BaseModel):
    """Counts of the decisions in force for one tree set, and the leftovers."""

    tree_set_id: int
    written_names: int
    tips: int
    stages: dict[str, int]
    accepted: int
    pending: int
    rejected: int
    undecided: int = Field(description="written names with no decision yet")
    names_without_tip: list[str]
    tips_without_data: list[str]


def pending_names(store: Store, tree_set_id: int) -> pd.DataFrame:
    """Return the pending names of a tree set, sorted by written name, with
    columns written_name, stage, score, reason and candidates (list of
    [tip, score], best first).

    Raises:
        NotFoundError: no such tree set.
    """
    with store.reading() as session:
        tip_labels_of_set(session, tree_set_id)
        current = current_decisions(session, tree_set_id)
    pending = current[current["status"] == "pending"].reset_index(drop=True)
    return pd.DataFrame(
        {
            "decision_id": pending["decision_id"],
            "written_name": pending["written_name"],
            "stage": pending["stage"],
            "score": pending["score"],
            "reason": [note_info(n).get("reason", "") for n in pending["note"]],
            "candidates": [candidates_of(n) for n in pending["note"]],
        }
    )


def summarise_names(store: Store, tree_set_id: int) -> NameSummary:
    """Return where the names of tree set ``tree_set_id`` stand.

    Raises:
        NotFoundError: no such tree set.
    """
    with store.reading() as session:
        tips = tip_labels_of_set(session, tree_set_id)
        names = written_names(session)
        current = current_decisions(session, tree_set_id)
    current = current[current["written_name"].isin(set(names))]
    status = current["status"].value_counts()
    accepted = current[current["status"] == "accepted"]
    matched = set(accepted["written_name"])
    used = set(accepted["tip_label"])
    return NameSummary(
        tree_set_id=tree_set_id,
        written_names=len(names),
        tips=len(tips),
        stages={str(k): int(v) for k, v in current["stage"].value_counts().sort_index().items()},
        accepted=int(status.get("accepted", 0)),
        pending=int(status.get("pending", 0)),
        rejected=int(status.get("rejected", 0)),
        undecided=len(names) - len(current),
        names_without_tip=[n for n in names if n not in matched],
        tips_without_data=[t for t in tips if t not in used],
    )
