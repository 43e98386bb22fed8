"""Opening, creating and upgrading stores.

A store is any SQLAlchemy URL. The default is a SQLite file
``tipledger.db`` in the working folder; a plain path is taken as a SQLite
file too. The environment variable ``TIPLEDGER_STORE`` or the ``--store``
option of every command choose another, for instance a PostgreSQL
database shared by a lab (``postgresql+psycopg://user@host/db``).

The schema belongs to the Alembic migrations in ``migrations/``: a new
store is created by running them, an older store is upgraded only by an
explicit :func:`upgrade_store`, and a store newer than this code is refused.
"""

from __future__ import annotations

import importlib.util
import os
from collections.abc import Iterator
from contextlib import contextmanager
from dataclasses import dataclass
from pathlib import Path

from alembic import command
from alembic.config import Config
from alembic.runtime.migration import MigrationContext
from alembic.script import ScriptDirectory
from sqlalchemy import Engine, create_engine, event, inspect
from sqlalchemy.engine import make_url
from sqlalchemy.exc import ArgumentError, OperationalError
from sqlalchemy.orm import Session, sessionmaker

from curation.errors import SchemaVersionError, StoreError

__all__ = [
    "DEFAULT_STORE",
    "STORE_ENV",
    "Store",
    "resolve_url",
    "create_store",
    "open_store",
    "upgrade_store",
    "migrations_folder",
]

DEFAULT_STORE = "tipledger.db"
STORE_ENV = "TIPLEDGER_STORE"


def resolve_url(store: str | os.PathLike[str] | None = None) -> str:
    """Return the SQLAlchemy URL for ``store``.

    ``None`` means ``$TIPLEDGER_STORE`` or else ``tipledger.db`` in the
    working folder. A value without ``://`` is a path to a SQLite file.

    Raises:
        StoreError: the value is not a usable URL.
    """
    value = str(store) if store is not None else os.environ.get(STORE_ENV) or DEFAULT_STORE
    if "://" not in value:
        return f"sqlite:///{Path(value).expanduser().resolve()}"
    try:
        make_url(value)
    except ArgumentError as exc:
        raise StoreError(
            f"the store URL {value!r} cannot be read: {exc}",
            hint="give a SQLite file path or a SQLAlchemy URL with --store or "
            f"${STORE_ENV}, e.g. postgresql+psycopg://user@127.0.0.1/tipledger",
        ) from None
    return value


def migrations_folder() -> Path:
    """Return the folder of the Alembic migrations.

    In a checkout it is ``migrations/`` beside the package; an installed
    wheel carries it as the package ``curation.migrations``.
    """
    spec = importlib.util.find_spec("curation.migrations")
    if spec is not None and spec.submodule_search_locations:
        return Path(next(iter(spec.submodule_search_locations)))
    return Path(__file__).resolve().parents[2] / "migrations"


def _alembic_config(url: str) -> Config:
    config = Config()
    config.set_main_option("script_location", str(migrations_folder()))
    config.set_main_option("sqlalchemy.url", url.replace("%", "%%"))
    return config


def _head_revision() -> str:
    script = ScriptDirectory.from_config(_alembic_config("sqlite://"))
    head = script.get_current_head()
    assert head is not None, "the migrations folder holds no revision"
    return head


def _known_revisions() -> set[str]:
    script = ScriptDirectory.from_config(_alembic_config("sqlite://"))
    return {rev.revision for rev in script.walk_revisions()}


def _make_engine(url: str) -> Engine:
    if url.startswith("sqlite"):
        engine = create_engine(url, connect_args={"timeout": 30})

        @event.listens_for(engine, "connect")
        def _sqlite_pragmas(dbapi_connection, _record) -> None:  # type: ignore[no-untyped-def]
            # WAL lets readers work beside a writer; foreign keys are off in
            # SQLite unless asked for on every connection.
            cursor = dbapi_connection.cursor()
            cursor.execute("PRAGMA foreign_keys=ON")
            cursor.execute("PRAGMA busy_timeout=30000")
            if ":memory:" not in url and url != "sqlite://":
                cursor.execute("PRAGMA journal_mode=WAL")
            cursor.close()

        return engine
    return create_engine(url, pool_pre_ping=True)


@dataclass
class Store:
    """An open store: its URL, engine and sessions.

    Use :meth:`transaction` for work that must be stored all or nothing.
    """

    url: str
    engine: Engine

    def __post_init__(self) -> None:
        self._sessions = sessionmaker(self.engine, expire_on_commit=False)

    @contextmanager
    def transaction(self) -> Iterator[Session]:
        """Yield a session whose work is committed on success and rolled back
        entirely on any exception."""
        with self._sessions() as session, session.begin():
            yield session

    @contextmanager
    def reading(self) -> Iterator[Session]:
        """Yield a session for reading; nothing it does is committed."""
        # Closing without commit discards the transaction but, unlike
        # rollback(), leaves loaded objects readable after the block.
        with self._sessions() as session:
            yield session

    def display_url(self) -> str:
        """Return the URL with any password hidden, for messages and logs."""
        return make_url(self.url).render_as_string(hide_password=True)

    def close(self) -> None:
        """Release the store's connections."""
        self.engine.dispose()

    def __enter__(self) -> Store:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()


def _current_revision(engine: Engine) -> str | None:
    try:
        with engine.connect() as connection:
            return MigrationContext.configure(connection).get_current_revision()
    except OperationalError as exc:
        raise StoreError(
            f"cannot connect to the store: {exc.orig}",
            hint=f"check the --store option or ${STORE_ENV}, and that the server runs",
        ) from None


def create_store(store: str | os.PathLike[str] | None = None) -> Store:
    """Create a new store with the current schema and return it open.

    Creating a store that already has the current schema does nothing.

    Raises:
        StoreError: the store holds tables but no tipledger schema, or
            cannot be reached.
        SchemaVersionError: the store exists with an older or newer schema.
    """
    url = resolve_url(store)
    engine = _make_engine(url)
    revision = _current_revision(engine)
    if revision is None:
        tables = set(inspect(engine).get_table_names())
        if tables:
            engine.dispose()
            raise StoreError(
                f"the store {url!r} already holds tables that are not a "
                f"tipledger store ({', '.join(sorted(tables)[:5])})",
                hint="choose an empty database or a new file with --store",
            )
        with engine.begin() as connection:
            config = _alembic_config(url)
            config.attributes["connection"] = connection
            command.upgrade(config, "head")
    engine.dispose()
    return open_store(url)


def _require_existing_file(url: str) -> None:
    # Connecting to a missing SQLite file would silently create an empty one.
    if url.startswith("sqlite:///") and not Path(url.removeprefix("sqlite:///")).exists():
        raise StoreError(
            f"there is no store at {url.removeprefix('sqlite:///')!r}",
            hint="create one with `tipledger create-store`, or point --store "
            f"(or ${STORE_ENV}) at an existing one",
        )


def open_store(store: str | os.PathLike[str] | None = None) -> Store:
    """Open an existing store whose schema matches this version of tipledger.

    Raises:
        StoreError: there is no store at that place.
        SchemaVersionError: the schema is older (upgrade it with
            ``tipledger upgrade-store``) or newer than this code.
    """
    url = resolve_url(store)
    _require_existing_file(url)
    engine = _make_engine(url)
    revision = _current_revision(engine)
    head = _head_revision()
    if revision is None:
        engine.dispose()
        raise StoreError(
            f"{url!r} is not a tipledger store (it has no schema version)",
            hint="create one with `tipledger create-store`",
        )
    if revision != head:
        engine.dispose()
        if revision not in _known_revisions():
            raise SchemaVersionError(
                f"the store's schema version {revision!r} is newer than this "
                f"tipledger knows (its newest is {head!r})",
                hint="upgrade tipledger to a version that knows this schema",
            )
        raise SchemaVersionError(
            f"the store's schema version {revision!r} is older than this tipledger's ({head!r})",
            hint="back up the store, then run `tipledger upgrade-store`",
        )
    return Store(url, engine)


def upgrade_store(store: str | os.PathLike[str] | None = None) -> tuple[str, str]:
    """Upgrade a store's schema to this version of tipledger.

    Returns:
        The schema versions before and after.

    Raises:
        SchemaVersionError: the store is newer than this code.
        StoreError: there is no store at that place.
    """
    url = resolve_url(store)
    _require_existing_file(url)
    engine = _make_engine(url)
    before = _current_revision(engine)
    if before is None:
        engine.dispose()
        raise StoreError(
            f"{url!r} is not a tipledger store", hint="create one with `tipledger create-store`"
        )
    if before not in _known_revisions():
        engine.dispose()
        raise SchemaVersionError(
            f"the store's schema version {before!r} is newer than this tipledger knows",
            hint="upgrade tipledger instead",
        )
    with engine.begin() as connection:
        config = _alembic_config(url)
        config.attributes["connection"] = connection
        command.upgrade(config, "head")
    engine.dispose()
    return before, _head_revision()
