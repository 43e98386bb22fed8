"""one spelling of ledger actions; one supersession per decision

Ledger actions are the names of the commands that made them, with hyphens
(``import-trees``, ``check-trees``, ``make-ultrametric``); older stores
spelled some with underscores (``import_tree``, ``check_trees``,
``make_bundle``, the repairs). Repairs on tree sets and trees take the same
spelling. When any row is respelled, one ``upgrade-store`` event says so.

A decision supersedes at most one decision, and a written name has at most
one first decision per tree set: two curators can no longer both
supersede the decision in force.

Revision ID: 0002
Revises: 0001
Create Date: 2026-12-04 04:00:00
"""

from collections.abc import Sequence
from datetime import UTC, datetime

import sqlalchemy as sa
from alembic import op

revision: str = "0002"
down_revision: str | None = "0001"
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None

RESPELLED = {
    "import_tree": "import-trees",
    "import_synonym": "import-synonyms",
    "check_trees": "check-trees",
    "make_bundle": "make-bundle",
    "prune_trees": "prune-trees",
    "resolve_polytomies": "resolve-polytomies",
    "collapse_short_branches": "collapse-short-branches",
    "make_ultrametric": "make-ultrametric",
    "lengthen_zero_tips": "lengthen-zero-tips",
    "sort_children": "sort-children",
}


def _respell(connection: sa.Connection) -> int:
    events = sa.table("ledger_events", sa.column("action", sa.String), sa.column("id", sa.Integer))
    count = 0
    for old, new in RESPELLED.items():
        count += connection.execute(
            sa.update(events).where(events.c.action == old).values(action=new)
        ).rowcount
    # Imports of traits were one action for tables and Darwin Core archives.
    sources = sa.table(
        "sources",
        sa.column("event_id", sa.Integer),
        sa.column("format", sa.String),
        sa.column("kind", sa.String),
    )
    dwca = sa.select(sources.c.event_id).where(
        sources.c.kind == "trait", sources.c.format == "dwca"
    )
    count += connection.execute(
        sa.update(events)
        .where(events.c.action == "import_trait", events.c.id.in_(dwca))
        .values(action="import-darwin-core")
    ).rowcount
    count += connection.execute(
        sa.update(events).where(events.c.action == "import_trait").values(action="import-traits")
    ).rowcount
    for name in ("tree_sets", "trees"):
        table = sa.table(name, sa.column("repair", sa.String))
        for old, new in RESPELLED.items():
            count += connection.execute(
                sa.update(table).where(table.c.repair == old).values(repair=new)
            ).rowcount
    return count


def upgrade() -> None:
    connection = op.get_bind()
    respelled = _respell(connection)
    if respelled:
        events = sa.table(
            "ledger_events",
            sa.column("at", sa.DateTime(timezone=True)),
            sa.column("who", sa.String),
            sa.column("action", sa.String),
            sa.column("subject", sa.Text),
            sa.column("summary", sa.Text),
            sa.column("parameters", sa.JSON),
        )
        connection.execute(
            sa.insert(events).values(
                at=datetime.now(UTC),
                who="tipledger upgrade-store",
                action="upgrade-store",
                subject="schema 0002",
                summary=(
                    f"respelled {respelled} action and repair names with hyphens "
                    "(the names of the commands)"
                ),
                parameters={"revision": "0002", "respelled": RESPELLED, "rows": respelled},
            )
        )
    with op.batch_alter_table("name_decisions", schema=None) as batch_op:
        batch_op.create_index("uq_name_decisions_supersedes_id", ["supersedes_id"], unique=True)
        batch_op.create_index(
            "uq_name_decisions_first",
            ["tree_set_id", "written_name"],
            unique=True,
            sqlite_where=sa.text("supersedes_id IS NULL"),
            postgresql_where=sa.text("supersedes_id IS NULL"),
        )


def downgrade() -> None:
    with op.batch_alter_table("name_decisions", schema=None) as batch_op:
        batch_op.drop_index("uq_name_decisions_first")
        batch_op.drop_index("uq_name_decisions_supersedes_id")
