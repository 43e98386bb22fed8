"""Shared fixtures: real stores on SQLite files and, when
``TIPLEDGER_TEST_POSTGRES_URL`` is set, on the PostgreSQL server.

Every test that takes ``store`` runs once per backend. PostgreSQL stores
live in a fresh schema per test, dropped afterwards; SQLite stores are real
files copied from a template migrated once per session.
"""

from __future__ import annotations

import os
import shutil
import uuid
from collections.abc import Iterator
from pathlib import Path

import pytest
from sqlalchemy import create_engine, text

from curation.store import Store, create_store, open_store

POSTGRES_ENV = "TIPLEDGER_TEST_POSTGRES_URL"
BACKENDS = ["sqlite"] + (["postgres"] if os.environ.get(POSTGRES_ENV) else [])


def pytest_report_header(config: pytest.Config) -> str:
    if os.environ.get(POSTGRES_ENV):
        return f"tipledger store backends: sqlite, postgres ({POSTGRES_ENV} is set)"
    return f"tipledger store backends: sqlite only ({POSTGRES_ENV} is not set)"


@pytest.fixture(autouse=True)
def _isolated_environment(monkeypatch: pytest.MonkeyPatch, tmp_path: Path) -> None:
    # No test may pick up a developer's own store or user name by accident.
    monkeypatch.delenv("TIPLEDGER_STORE", raising=False)
    monkeypatch.setenv("TIPLEDGER_USER", "test-curator")
    monkeypatch.delenv("SOURCE_DATE_EPOCH", raising=False)


@pytest.fixture(scope="session")
def _sqlite_template(tmp_path_factory: pytest.TempPathFactory) -> Path:
    path = tmp_path_factory.mktemp("template") / "template.db"
    create_store(path).close()
    return path


def _postgres_schema_url(base: str, schema: str) -> str:
    separator = "&" if "?" in base else "?"
    return f"{base}{separator}options=-csearch_path%3D{schema}"


@pytest.fixture
def postgres_url() -> Iterator[str]:
    """A URL to a fresh, empty PostgreSQL schema (skipped when no server URL
    is configured, which the report header states)."""
    base = os.environ.get(POSTGRES_ENV)
    if not base:
        pytest.skip(f"{POSTGRES_ENV} is not set: no PostgreSQL server configured")
    schema = f"t_{uuid.uuid4().hex[:12]}"
    admin = create_engine(base)
    with admin.begin() as connection:
        connection.execute(text(f'CREATE SCHEMA "{schema}"'))
    try:
        yield _postgres_schema_url(base, schema)
    finally:
        with admin.begin() as connection:
            connection.execute(text(f'DROP SCHEMA "{schema}" CASCADE'))
        admin.dispose()


@pytest.fixture(params=BACKENDS)
def store_url(request: pytest.FixtureRequest, tmp_path: Path, _sqlite_template: Path) -> str:
    """The URL of a new, empty, migrated store on each backend."""
    if request.param == "sqlite":
        path = tmp_path / "store.db"
        shutil.copyfile(_sqlite_template, path)
        return f"sqlite:///{path}"
    url = request.getfixturevalue("postgres_url")
    create_store(url).close()
    return url


@pytest.fixture
def store(store_url: str) -> Iterator[Store]:
    """An open, empty store on each backend."""
    opened = open_store(store_url)
    yield opened
    opened.close()
