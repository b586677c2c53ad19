"""Columns packed by PostgreSQL into one value each: how a review reads a month from there.

A statement of packed columns returns one row. Each of its columns holds one selected column of
every row the statement selects, aggregated by the server into one value:

* a number column as its values' big-endian IEEE doubles one after another,
  ``string_agg(float8send(coalesce(x::float8, 'NaN')), ''::bytea)`` (NULL as NaN);
* a text column as two: the lengths in bytes, ``string_agg(int4send(octet_length(t)), ...)``,
  and the texts one after another, ``string_agg(t, '')`` (NULL as '').

All the aggregates of one statement see its rows in the same order (one aggregate node hands
each row to every aggregate in turn, and none has an ORDER BY of its own: PostgreSQL's manual,
*Aggregate Expressions*), so the i-th value of every column belongs to the same row.

Why: the rows of a month (a million events, thirteen columns) as rows cost the server about
0.8 s to write and the ADBC driver about 1.0 s of CPU to parse, value by value. Packed, the
server writes one row of a few large values (its part of the same work, about 0.4 s a half
when two connections share the rows), and the client reads each column with one
``numpy.frombuffer``. Measured on the review benchmark's month (``benchmarks/bench_review.py``;
DEVELOPERS.md, issue #24).

A packed value is one ``bytea`` or ``text`` of PostgreSQL: at most 1 GB, so at most about
130 million rows a statement (eight bytes a value); a review reads a month in
:data:`PACKED_PARTS` statements.
"""

from __future__ import annotations

import re
from collections.abc import Callable
from typing import Any

import numpy as np
from sqlalchemy import Float, Integer, LargeBinary, String, cast, func, literal_column, select
from sqlalchemy.orm import Session

__all__ = [
    "PACKED_PARTS",
    "SnapshotReads",
    "packed_number",
    "packed_text",
    "session_snapshot",
    "unpacked_numbers",
    "unpacked_texts",
]

#: the statements a month's events are read in (events of id ``j`` modulo this, ``j`` = 0, 1,
#: ...), each on a connection of its own: the server works on each in a process of its own
PACKED_PARTS = 2

_NAN: Any = literal_column("'NaN'::float8")
_NO_BYTES: Any = literal_column("''::bytea")


def _of(aggregate: Any, where: Any) -> Any:
    return aggregate if where is None else aggregate.filter(where)


def packed_number(column: Any, where: Any = None) -> Any:
    """The SQL of ``column``'s values as big-endian doubles in one ``bytea``, NULL as NaN; of
    the rows that meet ``where`` when given (``FILTER``: every aggregate with the same filter
    sees the same rows in the same order)."""
    value = func.coalesce(cast(column, Float), _NAN)
    return _of(func.string_agg(func.float8send(value), _NO_BYTES, type_=LargeBinary), where)


def packed_text(column: Any, where: Any = None) -> tuple[Any, Any]:
    """The SQL of ``column``'s texts (NULL as ''), of the rows that meet ``where`` when given:
    their lengths in bytes as big-endian int32 in one ``bytea``, and the texts one after
    another in one ``text``."""
    text = func.coalesce(column, "")
    lengths = func.string_agg(
        func.int4send(cast(func.octet_length(text), Integer)), _NO_BYTES, type_=LargeBinary
    )
    return _of(lengths, where), _of(
        func.string_agg(text, literal_column("''"), type_=String), where
    )


def _bytes(value: Any) -> Any:
    """The bytes of one packed value as the ADBC driver gives it (an Arrow scalar, or a
    Python ``bytes``); an empty buffer for NULL (a statement that selected no row)."""
    if value is None:
        return b""
    as_buffer = getattr(value, "as_buffer", None)
    if as_buffer is None:  # bytes
        return value
    buffer = as_buffer()
    return b"" if buffer is None else buffer


def unpacked_numbers(value: Any) -> np.ndarray:
    """The doubles of a :func:`packed_number` value, in this machine's byte order."""
    return np.frombuffer(_bytes(value), dtype=">f8").astype(np.float64)


def unpacked_texts(lengths: Any, texts: Any) -> Any:
    """The texts of a :func:`packed_text` pair, as an Arrow large-string array (no Python object
    per text); None when the lengths do not add up to the texts' bytes (the client's encoding is
    not the server's)."""
    import pyarrow

    counts = np.frombuffer(_bytes(lengths), dtype=">i4").astype(np.int64)
    data = _bytes(texts)
    offsets = np.zeros(len(counts) + 1, dtype=np.int64)
    np.cumsum(counts, out=offsets[1:])
    size = data.size if isinstance(data, pyarrow.Buffer) else len(data)
    if offsets[-1] != size or (counts < 0).any():
        return None
    return pyarrow.LargeStringArray.from_buffers(
        len(counts), pyarrow.py_buffer(offsets), pyarrow.py_buffer(data)
    )


#: a snapshot's name as ``pg_export_snapshot()`` gives it (hexadecimal parts and dashes)
_SNAPSHOT_NAME = re.compile(r"[0-9A-Fa-f]+(-[0-9A-Fa-f]+)+")


class SnapshotReads:
    """Statements read through the ADBC PostgreSQL driver in a session's snapshot
    (:func:`session_snapshot`), each on a connection of its own.

    Each connection has the session's URL (as a libpq URI) and ``search_path``, takes the
    snapshot (``SET TRANSACTION SNAPSHOT`` in a read-only repeatable-read transaction) and runs
    its statement in one server process without parallel workers (the statements themselves
    run in parallel; workers would only pass the rows among processes). The values are written
    into the statements (the period's bounds and constant texts, none from a user); the
    connections wait and read in threads of their own (the driver leaves the GIL meanwhile).
    The snapshot lasts while the session's transaction does: read before it ends.
    """

    def __init__(self, session: Session, snapshot: str) -> None:
        url = session.connection().engine.url
        self._uri = url.set(drivername="postgresql").render_as_string(hide_password=False)
        self._search_path = session.execute(select(func.current_setting("search_path"))).scalar()
        self._dialect = session.get_bind().dialect
        self._snapshot = snapshot

    def _one(self, statement: Any) -> Any:
        import adbc_driver_postgresql.dbapi as adbc

        sql = str(statement.compile(dialect=self._dialect, compile_kwargs={"literal_binds": True}))
        with adbc.connect(self._uri, autocommit=True) as arrow, arrow.cursor() as cursor:
            cursor.execute("SELECT set_config('search_path', $1, false)", (self._search_path,))
            cursor.fetchall()
            cursor.execute("SET max_parallel_workers_per_gather = 0")
            cursor.execute("BEGIN ISOLATION LEVEL REPEATABLE READ READ ONLY")
            cursor.execute(f"SET TRANSACTION SNAPSHOT '{self._snapshot}'")  # a name (checked)
            try:
                cursor.execute(sql)
                return cursor.fetch_arrow_table()
            finally:
                cursor.execute("ROLLBACK")

    def read(self, statements: list[Any]) -> list[Any] | None:
        """The Arrow tables of ``statements``, read at once (each :meth:`start` ed); None when
        the driver could not read one (another way reads them)."""
        tables = [result() for result in [self.start(s) for s in statements]]
        return None if any(t is None for t in tables) else tables

    def start(self, statement: Any) -> Callable[[], Any]:
        """Start reading ``statement`` in a thread of its own; returns the function that waits
        for its Arrow table (None when the driver could not read it)."""
        from concurrent.futures import ThreadPoolExecutor

        from adbc_driver_manager import Error as DriverError

        pool = ThreadPoolExecutor(1)
        future = pool.submit(self._one, statement)
        pool.shutdown(wait=False)

        def result() -> Any:
            try:
                return future.result()
            except DriverError:
                return None

        return result


def session_snapshot(session: Session) -> SnapshotReads | None:
    """Reads in the session's own snapshot (:class:`SnapshotReads`), so that every statement
    reads exactly the rows the session sees: the session's transaction exports its snapshot
    (``pg_export_snapshot()``). None (the rows are then read through the session) when the
    ADBC driver is missing, when the session's transaction has written (its rows are in no other
    transaction's snapshot), or when the server cannot export a snapshot (a standby in
    recovery)."""
    try:
        import adbc_driver_manager  # noqa: F401
        import adbc_driver_postgresql.dbapi  # noqa: F401
    except ImportError:
        return None
    state = session.execute(select(func.txid_current_if_assigned(), func.pg_is_in_recovery())).one()
    if state[0] is not None or state[1]:
        return None
    snapshot = str(session.execute(select(func.pg_export_snapshot())).scalar())
    if not _SNAPSHOT_NAME.fullmatch(snapshot):  # such as 00000003-0000001B-1
        return None
    return SnapshotReads(session, snapshot)
