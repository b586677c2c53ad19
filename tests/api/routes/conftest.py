"""Fixtures of the REST API tests: the app on each backend, with a token per role.

Migrating a store takes seconds on PostgreSQL, so these tests share one migrated store per backend
for the whole session (``shared_store``, built like the suite's ``store`` fixture: SQLite always,
PostgreSQL in a schema of its own, a failure when ``CI=true`` and it is missing) and empty every
table before each test.
"""

from __future__ import annotations

import os
import uuid
from collections.abc import Iterator
from typing import Any

import pytest
from api_support import Api, StoreHandle, make_api
from peers import require_peer
from sqlalchemy import delete, text

from beamaudit.api.store import Base, make_engine, make_session_factory, upgrade

POSTGRES_ENV = "BEAMAUDIT_TEST_POSTGRES_URL"
SMALL_UPLOAD_BYTES = 4096


def _postgres_url() -> str:
    url = os.environ.get(POSTGRES_ENV, "")
    require_peer(
        "PostgreSQL", bool(url), f"{POSTGRES_ENV} is not set (PostgreSQL store tests need it)"
    )
    return url


@pytest.fixture(
    scope="session", params=["sqlite", pytest.param("postgresql", marks=pytest.mark.postgres)]
)
def shared_store(
    request: pytest.FixtureRequest, tmp_path_factory: pytest.TempPathFactory
) -> Iterator[StoreHandle]:
    """One migrated store per backend for the whole session."""
    if request.param == "sqlite":
        url = f"sqlite:///{tmp_path_factory.mktemp('api') / 'store.db'}"
        engine = make_engine(url)
        upgrade(engine)
        yield StoreHandle("sqlite", url, engine, make_session_factory(engine), {})
        engine.dispose()
        return
    base_url = _postgres_url()
    schema = f"t_api_{uuid.uuid4().hex[:10]}"
    admin = make_engine(base_url)
    with admin.begin() as conn:
        conn.execute(text(f'CREATE SCHEMA "{schema}"'))
    options = {"options": f"-csearch_path={schema}"}
    engine = make_engine(base_url, connect_args={"connect_timeout": 10, **options})
    try:
        upgrade(engine)
        yield StoreHandle("postgresql", base_url, engine, make_session_factory(engine), options)
    finally:
        engine.dispose()
        with admin.begin() as conn:
            conn.execute(text(f'DROP SCHEMA "{schema}" CASCADE'))
        admin.dispose()


def empty_store(store: StoreHandle) -> None:
    """Delete every row of every table (children first); the schema stays migrated."""
    with store.session_factory.begin() as session:
        for table in reversed(Base.metadata.sorted_tables):
            session.execute(delete(table))


@pytest.fixture
def api(shared_store: StoreHandle, tmp_path: Any) -> Iterator[Api]:
    """The app on an emptied store of each backend, with one token per role."""
    empty_store(shared_store)
    yield from make_api(shared_store, tmp_path)


@pytest.fixture
def small_upload_api(shared_store: StoreHandle, tmp_path: Any) -> Iterator[Api]:
    """As ``api``, with uploads limited to :data:`SMALL_UPLOAD_BYTES`."""
    empty_store(shared_store)
    yield from make_api(shared_store, tmp_path, api={"max_upload_bytes": SMALL_UPLOAD_BYTES})
