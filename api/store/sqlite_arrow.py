"""A review's events read from a SQLite file by the ADBC SQLite driver, in a process of its own.

Run as ``python -m beamaudit.api.store.sqlite_arrow`` by :mod:`beamaudit.api.runs.reviews`. The
request comes as one JSON object on standard input::

    {"uri": "file:///path/store.db", "busy_timeout_ms": 30000,
     "census": "SELECT count(*), max(id) FROM exposure_events", "expected": [1000, 1000],
     "statements": ["SELECT ... WHERE ... AND id % 2 = 0", "SELECT ... AND id % 2 = 1"]}

Each statement is read in a thread of its own through a connection of its own, the census and the
statement in one transaction (one snapshot of the file). The answer is the statements' rows as one
Arrow IPC stream on standard output, written as the batches come (the parent reads while this
process still reads the file); exit status 0. Exit status 3: a connection's census was not
``expected`` (events were committed in between); 1: the file could not be read (the reason on
standard error). With any status but 0 the parent discards what it received.

Why a process of its own: the driver carries its own copy of the SQLite library, and POSIX advisory
locks belong to a process, not to a library or a connection. When one copy closes the file, the
locks the other copy holds on it are gone too, and with them what keeps the write-ahead log in
place: the next process to close the database deletes the log under the other copy's connections,
whose later reads are stale and whose writes are lost. A process that writes or serves the store
therefore opens the file only through Python's ``sqlite3``; this process opens it only through the
driver, and its exit releases its own locks only.

Only the driver's low-level interface is used (its DB-API layer imports pandas, which would
triple this process's start-up).
"""

from __future__ import annotations

import json
import queue
import sys
import threading
from collections.abc import Iterator
from contextlib import contextmanager
from typing import Any

__all__ = ["CENSUS_DIFFERS", "main"]

#: the exit status when a connection's census differs from the expected one
CENSUS_DIFFERS = 3
_FAILED = 1


@contextmanager
def _rows(connection: Any, sql: str) -> Iterator[Any]:
    """The rows of ``sql`` as a ``pyarrow.RecordBatchReader`` (valid inside the block)."""
    import adbc_driver_manager as manager
    import pyarrow

    statement = manager.AdbcStatement(connection)
    try:
        statement.set_sql_query(sql)
        stream, _ = statement.execute_query()
        yield pyarrow.RecordBatchReader._import_from_c(stream.address)
    finally:
        statement.close()


def _execute(connection: Any, sql: str) -> None:
    import adbc_driver_manager as manager

    statement = manager.AdbcStatement(connection)
    try:
        statement.set_sql_query(sql)
        statement.execute_update()
    finally:
        statement.close()


def _read(database: Any, request: dict[str, Any], sql: str, out: queue.Queue[Any]) -> None:
    """Put ``sql``'s schema, then its batches, then None on ``out``; or an exit status (the census
    differs, the driver failed). One connection, one transaction."""
    import adbc_driver_manager as manager

    try:
        connection = manager.AdbcConnection(database)
        try:
            # waits out a writer's lock as the store's own connections do
            _execute(connection, f"PRAGMA busy_timeout = {int(request['busy_timeout_ms'])}")
            connection.set_options(**{"adbc.connection.autocommit": "false"})  # one transaction
            with _rows(connection, request["census"]) as census:
                seen = [column[0].as_py() for column in census.read_all().columns]
            if seen != list(request["expected"]):
                out.put(CENSUS_DIFFERS)
                return
            with _rows(connection, sql) as reader:
                out.put(reader.schema)
                for batch in reader:
                    if batch.num_rows:
                        out.put(batch)
            out.put(None)
        finally:
            connection.close()
    except (manager.Error, RuntimeError) as exc:
        print(f"cannot read {request['uri']}: {exc}", file=sys.stderr)
        out.put(_FAILED)


def main() -> int:
    """Read the request on standard input, answer on standard output; the exit status."""
    import adbc_driver_manager as manager
    import adbc_driver_sqlite
    import pyarrow.ipc

    request = json.load(sys.stdin)
    statements = list(request["statements"])
    try:
        database = adbc_driver_sqlite.connect(request["uri"])
    except manager.Error as exc:
        print(f"cannot open {request['uri']}: {exc}", file=sys.stderr)
        return _FAILED
    out: queue.Queue[Any] = queue.Queue(maxsize=64)
    # one thread per statement: the driver leaves the GIL while it reads
    threads = [
        threading.Thread(target=_read, args=(database, request, sql, out), daemon=True)
        for sql in statements
    ]
    for thread in threads:
        thread.start()
    status, schemas, writer, typed = 0, [], None, None
    running = len(threads)
    while running:
        item = out.get()
        if item is None or isinstance(item, int):
            running -= 1
            status = status or (item or 0)
        elif isinstance(item, pyarrow.Schema):
            schemas.append(item)
        elif status == 0:
            if writer is None:  # the first rows fix the types (a part without rows has none)
                typed = item.schema
                writer = pyarrow.ipc.new_stream(sys.stdout.buffer, typed)
            if not item.schema.equals(typed):
                print(f"columns of two types: {item.schema} and {typed}", file=sys.stderr)
                status = _FAILED
                continue
            writer.write_batch(item)
    for thread in threads:
        thread.join()
    database.close()
    if status:
        return status
    if writer is None:  # no rows at all: the columns as the driver typed them
        writer = pyarrow.ipc.new_stream(sys.stdout.buffer, schemas[0])
    writer.close()
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
