"""The store: schema from migrations only, version checks, the ledger."""

from __future__ import annotations

from pathlib import Path

import pytest
from alembic.autogenerate import compare_metadata
from alembic.runtime.migration import MigrationContext
from sqlalchemy import select, text

from curation.errors import SchemaVersionError, StoreError
from curation.store import Store, create_store, open_store, record_event, upgrade_store
from curation.store.models import Base, LedgerEvent


def test_models_and_migrations_agree(store: Store) -> None:
    # Alembic's autogenerate comparison is the outside judge here: a store
    # built by the migrations must show no difference to the ORM models.
    with store.engine.connect() as connection:
        context = MigrationContext.configure(connection, opts={"compare_type": True})
        differences = compare_metadata(context, Base.metadata)
    assert differences == []


def test_sqlite_store_uses_wal_and_foreign_keys(tmp_path: Path) -> None:
    with create_store(tmp_path / "a.db") as opened, opened.engine.connect() as connection:
        assert connection.execute(text("PRAGMA journal_mode")).scalar() == "wal"
        assert connection.execute(text("PRAGMA foreign_keys")).scalar() == 1


def test_create_store_twice_is_harmless(tmp_path: Path) -> None:
    create_store(tmp_path / "a.db").close()
    with create_store(tmp_path / "a.db") as again, again.reading() as session:
        assert session.scalars(select(LedgerEvent)).all() == []


def test_missing_store_is_refused_and_not_created(tmp_path: Path) -> None:
    missing = tmp_path / "missing.db"
    with pytest.raises(StoreError, match="no store at") as info:
        open_store(missing)
    assert "create-store" in str(info.value)
    with pytest.raises(StoreError):
        upgrade_store(missing)
    assert not missing.exists()


def test_store_newer_than_code_is_refused(store: Store) -> None:
    with store.engine.begin() as connection:
        connection.execute(text("UPDATE alembic_version SET version_num = 'f00dfeed9999'"))
    with pytest.raises(SchemaVersionError, match="newer") as info:
        open_store(store.url)
    assert "f00dfeed9999" in str(info.value)
    with pytest.raises(SchemaVersionError, match="newer"):
        upgrade_store(store.url)


def test_foreign_database_is_not_taken_over(tmp_path: Path) -> None:
    import sqlite3

    path = tmp_path / "other.db"
    with sqlite3.connect(path) as connection:
        connection.execute("CREATE TABLE expenses (amount REAL)")
    with pytest.raises(StoreError, match="not a tipledger store"):
        open_store(path)
    with pytest.raises(StoreError, match="expenses"):
        create_store(path)


def test_transaction_rolls_back_everything_on_error(store: Store) -> None:
    with pytest.raises(RuntimeError), store.transaction() as session:
        record_event(session, "import-trees", summary="half done")
        raise RuntimeError("interrupted")
    with store.reading() as session:
        assert session.scalars(select(LedgerEvent)).all() == []


def test_ledger_records_who_and_when(store: Store, monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setenv("SOURCE_DATE_EPOCH", "1700000000")
    with store.transaction() as session:
        record_event(session, "import-trees", subject="a.nex", parameters={"burn_in": 10})
    with store.reading() as session:
        (event,) = session.scalars(select(LedgerEvent)).all()
    assert event.who == "test-curator"
    assert event.parameters == {"burn_in": 10}
    # 1700000000 s after the epoch is 2023-11-14T22:13:20Z (checked with
    # `date -u -d @1700000000`, GNU coreutils).
    assert event.at.replace(tzinfo=None).isoformat() == "2023-11-14T22:13:20"


def test_json_columns_hold_no_nan_on_any_backend(store: Store) -> None:
    # PostgreSQL's JSON type refuses NaN (RFC 8259 has no NaN); the ledger
    # stores it as null on every backend, and NumPy scalars as numbers.
    import math

    import numpy as np

    from curation.findings import Finding, Severity
    from curation.store.ledger import record_event, record_findings
    from curation.store.models import StoredFinding

    with store.transaction() as session:
        event = record_event(session, "check-trees", parameters={"x": math.nan, "n": np.int64(3)})
        finding = Finding(
            code="test.nan",
            severity=Severity.info,
            subject="s",
            message="m",
            details={"z": float("inf"), "ids": (1, 2)},
        )
        record_findings(session, event, [finding])
    with store.reading() as session:
        stored = session.scalars(select(StoredFinding)).one()
        assert stored.details == {"z": None, "ids": [1, 2]}
        assert session.get(type(event), event.id).parameters == {"x": None, "n": 3}


def test_upgrade_from_schema_0001_respells_the_ledger(store_url: str) -> None:
    # A store made by the first schema, holding events spelled the old way
    # (underscores, one action for every trait import), then upgraded.
    from alembic import command
    from sqlalchemy import create_engine, text

    from curation.store.engine import _alembic_config

    if store_url.startswith("sqlite"):
        path = Path(store_url.removeprefix("sqlite:///"))
        path.unlink()
        for suffix in ("-wal", "-shm"):
            Path(f"{path}{suffix}").unlink(missing_ok=True)
    else:
        engine = create_engine(store_url)
        with engine.begin() as connection:
            names = connection.execute(
                text("SELECT tablename FROM pg_tables WHERE schemaname = current_schema()")
            ).scalars()
            for name in list(names):
                connection.execute(text(f'DROP TABLE "{name}" CASCADE'))
        engine.dispose()
    engine = create_engine(store_url)
    with engine.begin() as connection:
        config = _alembic_config(store_url)
        config.attributes["connection"] = connection
        command.upgrade(config, "0001")
        stamp = "2026-12-01 10:00:00+00:00"
        for number, action in enumerate(
            ["import_tree", "import_trait", "import_trait", "check_trees", "make_ultrametric"],
            start=1,
        ):
            connection.execute(
                text(
                    "INSERT INTO ledger_events (at, who, action, subject, summary, parameters)"
                    " VALUES (:at, :who, :action, '', '', '{}')"
                ),
                {"at": stamp, "who": f"ana {number}", "action": action},
            )
        connection.execute(
            text(
                "INSERT INTO sources (id, sha256, size_bytes, kind, format, file_name, "
                "imported_at, label, citation, licence, notes, options, event_id) VALUES "
                "(1, :sha, 1, 'trait', 'dwca', 'o.zip', :at, '', '', '', '', '{}', 3)"
            ),
            {"sha": "b" * 64, "at": stamp},
        )
        connection.execute(
            text(
                "INSERT INTO tree_sets (id, name, repair, event_id, tree_count) VALUES "
                "(1, 'derived', 'make_ultrametric', 5, 0)"
            )
        )
    engine.dispose()
    with pytest.raises(SchemaVersionError, match="upgrade-store"):
        open_store(store_url)
    assert upgrade_store(store_url)[0] == "0001"
    with open_store(store_url) as opened, opened.reading() as session:
        events = session.scalars(select(LedgerEvent).order_by(LedgerEvent.id)).all()
        repair = session.scalar(text("SELECT repair FROM tree_sets WHERE id = 1"))
    assert [e.action for e in events] == [
        "import-trees",
        "import-traits",
        "import-darwin-core",
        "check-trees",
        "make-ultrametric",
        "upgrade-store",
    ]
    assert "respelled 6 action and repair names" in events[-1].summary
    assert repair == "make-ultrametric"
