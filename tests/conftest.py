"""Fixtures shared by every test: the store on each backend, settings, a pseudonym key.

The store fixture is parametrised by backend: SQLite always, PostgreSQL when
``BEAMAUDIT_TEST_POSTGRES_URL`` is set. Each PostgreSQL test gets a fresh
schema of its own, dropped afterwards. With ``CI=true`` a missing PostgreSQL
is a failure, not a skip.
"""

from __future__ import annotations

import sys
import uuid
from collections.abc import Iterator
from pathlib import Path

import pytest

# Tests run in importlib mode (test files may share base names across folders); their
# helper modules (peers.py, rdsr_builders.py, ...) are imported by name from their folder.
_TESTS = Path(__file__).parent
_FOLDERS = sorted(p for p in _TESTS.rglob("*") if p.is_dir() and p.name != "__pycache__")
for _folder in [_TESTS, *_FOLDERS]:
    if str(_folder) not in sys.path:
        sys.path.insert(0, str(_folder))

from store_support import StoreHandle, _postgres_url, in_ci  # noqa: E402,F401


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
