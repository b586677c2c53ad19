"""Fixtures shared by every test: the store on each backend, settings, a pseudonym key, and the
demo's invented hospital built once per session.

The store fixture is parametrised by backend: SQLite always, PostgreSQL when
``BEAMAUDIT_TEST_POSTGRES_URL`` is set. Each PostgreSQL test gets a fresh
schema of its own, dropped afterwards. With ``CI=true`` a missing PostgreSQL
is a failure, not a skip.
"""

from __future__ import annotations

import contextlib
import io
import json
import sys
import uuid
from collections.abc import Iterator
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import pytest

# Tests run in importlib mode (test files may share base names across folders); their
# helper modules (peers.py, rdsr_builders.py, ...) are imported by name from their folder.
_TESTS = Path(__file__).parent
_FOLDERS = sorted(p for p in _TESTS.rglob("*") if p.is_dir() and p.name != "__pycache__")
for _folder in [_TESTS, *_FOLDERS]:
    if str(_folder) not in sys.path:
        sys.path.insert(0, str(_folder))

from store_support import StoreHandle, _postgres_url, in_ci  # noqa: E402,F401

#: Test modules whose tests start DICOM listeners (in process or as ``beamaudit listen``) and
#: send to them within time limits, or kill them: under ``pytest -n`` (``make test``) they run
#: one after another in one worker, never beside one another.
LISTENER_MODULES = frozenset(
    {
        "api/cli/test_scan_listen.py",
        "api/demo/test_cstore_failure.py",
        "api/test_ct_sizing_arrival.py",
        "api/test_spooling.py",
        "ingest/test_listener.py",
        "ingest/test_listener_limits.py",
        "ingest/test_sender.py",
        "reliability/test_bad_input.py",
        "reliability/test_concurrency.py",
        "reliability/test_crash_safety.py",
    }
)
#: Modules whose tests run in one worker under ``pytest -n``: the listener tests, and the tests
#: on the session's demo build (``demo_build``: built once in that worker).
XDIST_GROUPS = {
    "listener": LISTENER_MODULES,
    "demo": frozenset({"api/test_demo_run.py", "dashboards/test_browser.py"}),
}


def xdist_scope(nodeid: str) -> str:
    """The unit of work of a test under ``pytest -n`` (``make test``): its group in
    :data:`XDIST_GROUPS`, else its module, so that a module's fixtures (a built wheel, a
    generated scenario, a browser) are made once, as in a run without ``-n``, and no two
    processes make them in the same place at once."""
    module = nodeid.split("::", 1)[0].removeprefix("tests/")
    return next((g for g, modules in XDIST_GROUPS.items() if module in modules), module)


def pytest_xdist_make_scheduler(config: pytest.Config, log: Any) -> Any:
    """pytest-xdist's scheduling by scope, with :func:`xdist_scope` as the scope (its own
    ``--dist loadgroup`` marks are not read under pytest 9: it renames the tests through an
    attribute pytest 9 no longer uses)."""
    from xdist.scheduler import LoadScopeScheduling

    class ByGroup(LoadScopeScheduling):  # type: ignore[misc]
        def _split_scope(self, nodeid: str) -> str:
            return xdist_scope(nodeid)

    return ByGroup(config, log)


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


@dataclass(frozen=True)
class DemoBuild:
    """One ``beamaudit demo --no-serve --json`` run: its folder, exit code and JSON report."""

    folder: Path
    code: int
    report: dict[str, Any]


#: the arguments of the suite's one demo build (a fixed end month: the same files every day)
DEMO_ARGS = ["--no-serve", "--months", "4", "--end-month", "2026-10", "--seed", "0", "--json"]


@pytest.fixture(scope="session")
def demo_build(tmp_path_factory: pytest.TempPathFactory) -> DemoBuild:
    """The invented hospital built once per test session (the longest step of the suite): the
    tests that check its report and those that serve its database share it. Their modules
    are in the ``demo`` group of :data:`XDIST_GROUPS`, so that under ``pytest -n`` they share
    one build too. The tests that use it must not change what others read in it."""
    from beamaudit.api.cli import main

    folder = tmp_path_factory.mktemp("demo")
    out = io.StringIO()
    with contextlib.redirect_stdout(out):
        code = main(["demo", "--output", str(folder), *DEMO_ARGS])
    return DemoBuild(folder, code, json.loads(out.getvalue()))
