"""Engines and sessions for the store: SQLite (embedded default) or PostgreSQL.

SQLite runs in WAL mode with foreign keys on and a busy timeout, so the
listener, a scan and the API can write to one file without "database is
locked" reaching a user. The caller owns the transaction
(``with session_scope(factory) as session: ...``).
"""

from __future__ import annotations

from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path
from typing import Any

from sqlalchemy import create_engine, event, text
from sqlalchemy.engine import Engine, make_url
from sqlalchemy.exc import ArgumentError, DBAPIError, NoSuchModuleError, OperationalError
from sqlalchemy.orm import Session, sessionmaker

from beamaudit.api.errors import ApiError

__all__ = [
    "StoreError",
    "check_connection",
    "database_files",
    "make_engine",
    "make_session_factory",
    "session_scope",
]

SQLITE_BUSY_TIMEOUT_MS = 30_000
POOL_SIZE = 10
POOL_MAX_OVERFLOW = 50
POOL_TIMEOUT_S = 60


class StoreError(ApiError, RuntimeError):
    """The store cannot be reached or used; the message is one line for a user."""


def _sqlite_pragmas(dbapi_connection: Any, _record: Any) -> None:
    cursor = dbapi_connection.cursor()
    cursor.execute("PRAGMA journal_mode=WAL")
    cursor.execute("PRAGMA foreign_keys=ON")
    cursor.execute(f"PRAGMA busy_timeout={SQLITE_BUSY_TIMEOUT_MS}")
    cursor.execute("PRAGMA synchronous=NORMAL")
    cursor.close()


#: the files SQLite keeps beside a database file (https://sqlite.org/tempfiles.html)
SQLITE_SIDE_FILES = ("-wal", "-shm", "-journal")
#: beamaudit's own file beside a SQLite database: the processes storing objects take turns at
#: its lock (``flock(2)``; :class:`beamaudit.api.intake.pipeline.WriterTurn`)
WRITER_LOCK_SUFFIX = "-writer.lock"


def database_files(engine: Engine | None) -> list[Path]:
    """The files of a SQLite store (the database, SQLite's side files and the writers' lock
    file, whether they exist now or not); none for another database or one in memory. A scan
    must not open them: this process holds SQLite's POSIX locks on them, and closing any
    descriptor of a file drops every lock the process holds on it."""
    if engine is None or engine.url.get_backend_name() != "sqlite":
        return []
    database = engine.url.database
    if database in (None, "", ":memory:"):
        return []
    path = Path(database).resolve()
    sides = (*SQLITE_SIDE_FILES, WRITER_LOCK_SUFFIX)
    return [path, *(path.with_name(path.name + side) for side in sides)]


def make_engine(database_url: str, **kwargs: Any) -> Engine:
    """Create an engine for ``database_url``.

    Raises
    ------
    StoreError
        The URL is malformed or names a driver that is not installed.
    """
    try:
        url = make_url(database_url)
    except ArgumentError:
        raise StoreError(f"database URL {database_url!r} is not a valid URL") from None
    in_memory = url.get_backend_name() == "sqlite" and url.database in (None, "", ":memory:")
    if not in_memory:
        # the API serves many clients at once from its thread pool: enough connections that a
        # burst waits in the pool queue rather than failing (SQLite serialises writers anyway)
        kwargs.setdefault("pool_size", POOL_SIZE)
        kwargs.setdefault("max_overflow", POOL_MAX_OVERFLOW)
        kwargs.setdefault("pool_timeout", POOL_TIMEOUT_S)
    try:
        if url.get_backend_name() == "sqlite":
            connect_args = {
                "timeout": SQLITE_BUSY_TIMEOUT_MS / 1000,
                **kwargs.pop("connect_args", {}),
            }
            engine = create_engine(url, connect_args=connect_args, **kwargs)
            event.listen(engine, "connect", _sqlite_pragmas)
        else:
            kwargs.setdefault("pool_pre_ping", True)
            connect_args = {"connect_timeout": 10, **kwargs.pop("connect_args", {})}
            engine = create_engine(url, connect_args=connect_args, **kwargs)
    except (NoSuchModuleError, ArgumentError, ImportError) as exc:
        raise StoreError(f"database URL {url.render_as_string()!r} cannot be used: {exc}") from None
    return engine


def check_connection(engine: Engine) -> None:
    """Run ``SELECT 1``; a failure becomes a one-line :class:`StoreError`."""
    try:
        with engine.connect() as conn:
            conn.execute(text("SELECT 1"))
    except (OperationalError, DBAPIError) as exc:
        first = str(exc.orig if getattr(exc, "orig", None) else exc).strip().splitlines()
        detail = first[0] if first else type(exc).__name__
        raise StoreError(
            f"cannot reach the database {engine.url.render_as_string(hide_password=True)}: {detail}"
        ) from None


def make_session_factory(engine: Engine) -> sessionmaker[Session]:
    """A session factory bound to ``engine`` (objects stay usable after commit)."""
    return sessionmaker(bind=engine, expire_on_commit=False)


@contextmanager
def session_scope(factory: sessionmaker[Session]) -> Iterator[Session]:
    """One transaction: commit on success, roll back on any exception."""
    session = factory()
    try:
        yield session
        session.commit()
    except BaseException:
        session.rollback()
        raise
    finally:
        session.close()
