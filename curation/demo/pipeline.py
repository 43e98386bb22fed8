"""The demo: build a store from the invented sample scenario and run every
stage that exists, end to end."""

from __future__ import annotations

from pathlib import Path

from curation.store import create_store
from curation.store.summary import StoreSummary, summarise_store

__all__ = ["run_demo"]


def run_demo(folder: str | Path = "demo-output") -> StoreSummary:
    """Create (or reuse) the store ``folder/tipledger.db`` and run the stages.

    Stages so far: the store. Importers and later stages add their step
    here as they land.

    Returns:
        The counts of what the demo store holds.
    """
    target = Path(folder)
    target.mkdir(parents=True, exist_ok=True)
    with create_store(target / "tipledger.db") as store:
        return summarise_store(store)
