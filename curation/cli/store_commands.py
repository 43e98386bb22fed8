"""Commands that create, upgrade and show the store."""

from __future__ import annotations

from curation.cli.app import StoreOption, app, console
from curation.store import create_store, upgrade_store


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
