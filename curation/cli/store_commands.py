"""Commands that create, upgrade and show the store."""

from __future__ import annotations

from curation.cli.app import StoreOption, app, console
from curation.cli.output import print_frame, print_store_summary
from curation.store import create_store, open_store, upgrade_store
from curation.store.summary import list_sources, list_traits, list_tree_sets, summarise_store


@app.command("create-store")
def create_store_command(store: StoreOption = None) -> None:
    """Create a new, empty store (does nothing if it exists and is current).

    Example: tipledger create-store --store lab.db
    """
    with create_store(store) as opened:
        console.print(f"Store ready: {opened.display_url()}")


@app.command("upgrade-store")
def upgrade_store_command(store: StoreOption = None) -> None:
    """Upgrade an older store's schema to this version of tipledger.

    Example: tipledger upgrade-store --store lab.db
    """
    before, after = upgrade_store(store)
    if before == after:
        console.print(f"The store is already at schema version {after}.")
    else:
        console.print(f"Upgraded the store from schema version {before} to {after}.")


@app.command("show-store")
def show_store_command(store: StoreOption = None) -> None:
    """Show what the store holds: sources, tree sets, traits and counts of
    measurements, decisions, findings and ledger events, and what is not
    settled: written names without a decision, measurements not yet
    flagged, bundles older than the events they depend on.

    Example: tipledger show-store --store lab.db
    """
    with open_store(store) as opened:
        summary = summarise_store(opened)
        print_frame("Sources", list_sources(opened))
        print_frame("Tree sets", list_tree_sets(opened))
        print_frame("Traits", list_traits(opened))
    print_store_summary(summary)
