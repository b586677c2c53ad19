"""Fixtures shared by every test: the store on each backend, settings, a pseudonym key.

The store fixture is parametrised by backend: SQLite always, PostgreSQL when
``BEAMAUDIT_TEST_POSTGRES_URL`` is set. Each PostgreSQL test gets a fresh
schema of its own, dropped afterwards. With ``CI=true`` a missing PostgreSQL
is a failure, not a skip.
"""

from __future__ import annotations

import os
import sys
import uuid
from collections.abc import Iterator
from dataclasses import dataclass
from pathlib import Path

import pytest

sys.path.insert(0, str(Path(__file__).parent))

POSTGRES_ENV = "BEAMAUDIT_TEST_POSTGRES_URL"


def in_ci() -> bool:
    return os.environ.get("CI") == "true"


@dataclass
class StoreHandle:
    """What a store test needs: the URL, an engine and a session factory, migrated to head."""

    backend: str
    url: str
    engine: object
    session_factory: object
    connect_args: dict[str, object]


def _postgres_url() -> str | None:
    url = os.environ.get(POSTGRES_ENV)
    if not url:
        reason = f"{POSTGRES_ENV} is not set (PostgreSQL store tests need it)"
        if in_ci():
            pytest.fail(f"CI=true but {reason}")
        pytest.skip(reason)
    return url


@pytest.fixture(params=["sqlite", pytest.param("postgresql", marks=pytest.mark.postgres)])
def store(request: pytest.FixtureRequest, tmp_path: Path) -> Iterator[StoreHandle]:
    """A migrated, empty store on each backend."""
    from sqlalchemy import text

    from beamaudit.api.store import make_engine, make_session_factory, upgrade

    if request.param == "sqlite":
        url = f"sqlite:///{tmp_path / 'store.db'}"
        engine = make_engine(url)
        upgrade(engine)
        yield StoreHandle("sqlite", url, engine, make_session_factory(engine), {})
        engine.dispose()
        return
    base_url = _postgres_url()
    assert base_url is not None
    schema = f"t_{uuid.uuid4().hex[:12]}"
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


@pytest.fixture
def settings_env(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> Path:
    """Point the settings at a fresh SQLite file and key in ``tmp_path``; returns the DB path."""
    db = tmp_path / "beamaudit.db"
    monkeypatch.setenv("BEAMAUDIT_DATABASE_URL", f"sqlite:///{db}")
    monkeypatch.setenv("BEAMAUDIT_SECRET_KEY_PATH", str(tmp_path / "secret.key"))
    monkeypatch.delenv("BEAMAUDIT_CONFIG", raising=False)
    return db
