"""Helpers of the reliability tests: beamaudit commands as real processes, stores they share.

A :class:`SharedStore` is a database the test process and ``beamaudit`` subprocesses all reach
by URL: a SQLite file, or a PostgreSQL schema of its own (``?options=-csearch_path=...``).
"""

from __future__ import annotations

import os
import signal
import sqlite3
import subprocess
import sys
import time
import uuid
from collections.abc import Iterator, Sequence
from contextlib import contextmanager
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from peers import require_peer
from sqlalchemy import func, select, text
from sqlalchemy.engine import Engine
from sqlalchemy.orm import Session, sessionmaker

from beamaudit.api.store import make_engine, make_session_factory, upgrade
from beamaudit.api.store import models as m

__all__ = [
    "SharedStore",
    "beamaudit_process",
    "counts",
    "every_value",
    "shared_store",
    "spool_of",
    "start_beamaudit",
    "wait_spool_drained",
]

POSTGRES_ENV = "BEAMAUDIT_TEST_POSTGRES_URL"


@dataclass
class SharedStore:
    backend: str
    url: str  # for the subprocesses (BEAMAUDIT_DATABASE_URL)
    engine: Engine
    sessions: sessionmaker[Session]
    key_path: Path

    def env(self, **extra: str) -> dict[str, str]:
        env = {k: v for k, v in os.environ.items() if not k.startswith("BEAMAUDIT_")}
        env.update(
            BEAMAUDIT_DATABASE_URL=self.url,
            BEAMAUDIT_SECRET_KEY_PATH=str(self.key_path),
            PYTHONUNBUFFERED="1",
            **extra,
        )
        return env


@contextmanager
def shared_store(backend: str, tmp_path: Path) -> Iterator[SharedStore]:
    """A migrated, empty store on ``backend`` that subprocesses can open by URL."""
    key_path = tmp_path / "pseudonym.key"
    if backend == "sqlite":
        url = f"sqlite:///{tmp_path / 'shared.db'}"
        engine = make_engine(url)
        upgrade(engine)
        try:
            yield SharedStore(backend, url, engine, make_session_factory(engine), key_path)
        finally:
            engine.dispose()
        return
    base = os.environ.get(POSTGRES_ENV, "")
    require_peer("PostgreSQL", bool(base), f"{POSTGRES_ENV} is not set")
    schema = f"t_rel_{uuid.uuid4().hex[:10]}"
    admin = make_engine(base)
    with admin.begin() as conn:
        conn.execute(text(f'CREATE SCHEMA "{schema}"'))
    separator = "&" if "?" in base else "?"
    url = f"{base}{separator}options=-csearch_path%3D{schema}"
    engine = make_engine(url)
    try:
        upgrade(engine)
        yield SharedStore(backend, url, engine, make_session_factory(engine), key_path)
    finally:
        engine.dispose()
        with admin.begin() as conn:
            conn.execute(text(f'DROP SCHEMA "{schema}" CASCADE'))
        admin.dispose()


def counts(store: SharedStore) -> dict[str, Any]:
    """Rows of the tables that must never lose or double an instance."""
    with store.sessions() as session:
        uids = session.scalars(select(m.SourceObjectRow.sop_instance_uid)).all()
        events = session.scalar(select(func.count()).select_from(m.ExposureEventRow))
        orphans = session.scalar(
            select(func.count())
            .select_from(m.SourceObjectRow)
            .where(~m.SourceObjectRow.id.in_(select(m.ExposureEventRow.source_object_id)))
        )
        errors = session.scalar(select(func.count()).select_from(m.IngestError))
    return {
        "uids": list(uids),
        "objects": len(uids),
        "distinct": len(set(uids)),
        "events": events,
        "objects_without_events": orphans,
        "errors": errors,
    }


def every_value(store: SharedStore) -> str:
    """Every value of every table as text, one a line (to search for what must not be stored)."""
    from sqlalchemy import String, cast

    from beamaudit.api.store import Base

    parts: list[str] = []
    with store.sessions() as session:
        for table in Base.metadata.sorted_tables:
            for row in session.execute(select(*(cast(c, String) for c in table.columns))):
                parts.extend(str(v) for v in row if v is not None)
    return "\n".join(parts)


def start_beamaudit(
    args: Sequence[str], store: SharedStore, log: Path, **env: str
) -> subprocess.Popen[bytes]:
    """``python -m beamaudit ARGS`` in its own process group, output to ``log``."""
    with log.open("ab") as out:
        return subprocess.Popen(
            [sys.executable, "-m", "beamaudit", *args],
            env=store.env(**env),
            stdout=out,
            stderr=subprocess.STDOUT,
            start_new_session=True,
        )


@contextmanager
def beamaudit_process(
    args: Sequence[str], store: SharedStore, log: Path, **env: str
) -> Iterator[subprocess.Popen[bytes]]:
    """As :func:`start_beamaudit`; the process is killed (by its id) when the block ends."""
    process = start_beamaudit(args, store, log, **env)
    try:
        yield process
    finally:
        if process.poll() is None:
            os.kill(process.pid, signal.SIGKILL)
        process.wait(timeout=30)


def spool_of(store: SharedStore, port: int) -> Path:
    """The spool file of ``beamaudit listen --port PORT`` on ``store`` (settings by default)."""
    from beamaudit.api.cli.listen import listen_spool_dir
    from beamaudit.api.intake.spooling import spool_path
    from beamaudit.api.settings import Settings

    settings = Settings(database_url=store.url, secret_key_path=store.key_path)
    return spool_path(listen_spool_dir(settings), store.url, port)


def wait_spool_drained(store: SharedStore, port: int, timeout_s: float = 180.0) -> None:
    """Wait until the listener on ``port`` has stored every object it acknowledged (its spool is
    empty): it answers once an object is spooled and stores it after."""
    path = spool_of(store, port)
    deadline = time.monotonic() + timeout_s
    left = -1
    while time.monotonic() < deadline:
        if path.exists():
            conn = sqlite3.connect(f"file:{path}?mode=ro", uri=True, timeout=30)
            try:
                left = conn.execute("SELECT count(*) FROM received").fetchone()[0]
            except sqlite3.OperationalError:  # the table is not there yet
                left = -1
            finally:
                conn.close()
            if left == 0:
                return
        time.sleep(0.1)
    raise AssertionError(f"{left} objects still spooled in {path} after {timeout_s:g} s")
