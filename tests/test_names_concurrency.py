"""Curators at the same time: a decision supersedes the decision in force
exactly once, so of two people deciding one name at once one is refused
(never silently lost), and two reconciliations at once leave one first
decision per name. Real concurrency: several threads, each with its own
connection to the same store, on SQLite and on PostgreSQL."""

from __future__ import annotations

import itertools
import threading
from collections import Counter
from pathlib import Path

import pytest
from sqlalchemy import select

from curation.errors import ConflictError
from curation.names import decide_name, reconcile_names
from curation.store import Store, open_store
from curation.store.models import LedgerEvent, NameDecision
from tests.names_helpers import seed_store

TREE = "((Alpha_one:1,Alpha_two:1):1,(Beta_three:1,Beta_four:1):1);"
WRITTEN = ["Alpha one", "Alpha_two", "Beta three", "Beta fuor", "Gamma nine"]


def _run_at_once(count: int, work) -> list[object]:  # type: ignore[no-untyped-def]
    """Run ``work(i)`` in ``count`` threads released together; return what
    each returned or raised."""
    barrier = threading.Barrier(count)
    results: list[object] = [None] * count

    def run(i: int) -> None:
        barrier.wait()
        try:
            results[i] = work(i)
        except Exception as exc:  # the test looks at every outcome
            results[i] = exc

    threads = [threading.Thread(target=run, args=(i,)) for i in range(count)]
    for thread in threads:
        thread.start()
    for thread in threads:
        thread.join(timeout=120)
    return results


def _chain_is_linear(store: Store, name: str) -> list[NameDecision]:
    with store.reading() as session:
        rows = session.scalars(
            select(NameDecision).where(NameDecision.written_name == name).order_by(NameDecision.id)
        ).all()
    # Each decision supersedes the one before it, and none is superseded twice.
    assert rows[0].supersedes_id is None
    for before, after in itertools.pairwise(rows):
        assert after.supersedes_id == before.id
    return list(rows)


def test_curators_deciding_one_name_at_once_never_lose_a_decision(
    store: Store, store_url: str
) -> None:
    tree_set = seed_store(store, TREE, WRITTEN)
    reconcile_names(store, tree_set)
    before = len(_chain_is_linear(store, "Beta fuor"))
    tips = ["Beta_four", "Beta_three", "Alpha_one", "Alpha_two"]

    def work(i: int) -> object:
        with open_store(store_url) as own:
            return decide_name(own, tree_set, "Beta fuor", tips[i % 4], "accepted", who=f"c{i}")

    for _round in range(3):
        results = _run_at_once(8, work)
        landed = [r for r in results if not isinstance(r, Exception)]
        refused = [r for r in results if isinstance(r, Exception)]
        assert all(isinstance(r, ConflictError) for r in refused), refused
        assert landed, "at least one curator's decision lands"
        for conflict in refused:
            assert "decision in force is now" in conflict.message
    rows = _chain_is_linear(store, "Beta fuor")
    with store.reading() as session:
        events = session.scalars(
            select(LedgerEvent).where(LedgerEvent.action == "decide-name")
        ).all()
    # Every decision that landed has its event, and nothing else does.
    assert len(rows) - before == len(events)
    assert Counter(r.event_id for r in rows[before:]) == Counter(e.id for e in events)


def test_a_decision_on_a_stale_view_is_refused_with_the_current_one(store: Store) -> None:
    tree_set = seed_store(store, TREE, WRITTEN)
    reconcile_names(store, tree_set)
    seen = _chain_is_linear(store, "Beta fuor")[-1].id
    decide_name(store, tree_set, "Beta fuor", "Beta_four", "accepted", who="ana")
    from curation.names.decisions import apply_decisions

    with pytest.raises(ConflictError) as info, store.transaction() as session:
        apply_decisions(
            session,
            tree_set,
            [
                {
                    "written_name": "Beta fuor",
                    "status": "rejected",
                    "expected_decision_id": seen,
                }
            ],
            action="decide-name",
            who="ben",
        )
    (conflict,) = info.value.details["conflicts"]
    assert conflict["current"]["decided_by"] == "ana"
    assert conflict["current"]["tip_label"] == "Beta_four"
    assert "accepted by ana" in info.value.message
    rows = _chain_is_linear(store, "Beta fuor")
    assert rows[-1].decided_by == "ana"  # ben's decision was not recorded


def test_two_reconciliations_at_once_leave_one_first_decision_per_name(
    store: Store, store_url: str, tmp_path: Path
) -> None:
    tree_set = seed_store(store, TREE, WRITTEN)

    def work(_i: int) -> object:
        with open_store(store_url) as own:
            return reconcile_names(own, tree_set)

    results = _run_at_once(4, work)
    assert not [r for r in results if isinstance(r, Exception)], results
    for name in WRITTEN:
        rows = _chain_is_linear(store, name)
        assert len(rows) == 1, (name, len(rows))
