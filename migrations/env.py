"""Alembic environment of the tipledger store.

Run by :mod:`curation.store.engine` with a connection in
``config.attributes["connection"]``, or by the ``alembic`` command with
``-c migrations/alembic.ini`` and the store URL in ``$TIPLEDGER_STORE``.
"""

from alembic import context
from sqlalchemy import create_engine

from curation.store.engine import resolve_url
from curation.store.models import Base

config = context.config
target_metadata = Base.metadata


def _run(connection) -> None:  # type: ignore[no-untyped-def]
    context.configure(
        connection=connection,
        target_metadata=target_metadata,
        render_as_batch=connection.dialect.name == "sqlite",
        compare_type=True,
    )
    with context.begin_transaction():
        context.run_migrations()


connection = config.attributes.get("connection")
if connection is not None:
    _run(connection)
else:
    engine = create_engine(resolve_url(None))
    with engine.begin() as conn:
        _run(conn)
