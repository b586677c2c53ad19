"""Many rows in one statement: the store's executemany, with a fast path on SQLite.

SQLAlchemy Core turns each row of an ``executemany`` into its parameters with generic
per-row machinery (key checks, defaults, one processor call through several layers per value),
which on SQLite costs more than the insert itself. On SQLite these helpers build the statement
once, convert every value with the very bind processor SQLAlchemy would use for its column
(``TypeEngine.dialect_impl(dialect).bind_processor(dialect)``: UTC timestamps, JSON, booleans
exactly as the ORM writes them) and hand the tuples to the driver's ``executemany``. Rows that
need anything more (a column default SQLAlchemy fills in) and other
databases go through Core unchanged; PostgreSQL keeps SQLAlchemy's multi-row ``VALUES``.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from typing import Any

from sqlalchemy import Table, bindparam, insert, update
from sqlalchemy.engine import Connection

__all__ = ["insert_rows", "update_rows"]

_Processor = Callable[[Any], Any] | None


def insert_rows(conn: Connection, table: Table, rows: Sequence[dict[str, Any]]) -> None:
    """``INSERT`` every row of ``rows`` into ``table``.

    ``rows`` are dicts of column name to value, all with the same keys (as Core's executemany
    requires).
    """
    if not rows:
        return
    names = list(rows[0])
    if not _fast(conn, table, rows, names, defaults_needed=True):
        conn.execute(insert(table), list(rows))
        return
    quote = conn.dialect.identifier_preparer.quote
    sql = (
        f"INSERT INTO {conn.dialect.identifier_preparer.format_table(table)} "
        f"({', '.join(quote(n) for n in names)}) VALUES ({', '.join('?' for _ in names)})"
    )
    conn.exec_driver_sql(sql, _tuples(conn, table, rows, names))


def update_rows(
    conn: Connection, table: Table, rows: Sequence[dict[str, Any]], *, key: str = "id"
) -> None:
    """``UPDATE table SET ... WHERE key = row[key]`` for every row (all rows the same keys)."""
    if not rows:
        return
    names = [n for n in rows[0] if n != key]
    if not _fast(conn, table, rows, [*names, key], defaults_needed=False):
        statement = (
            update(table)
            .where(table.c[key] == bindparam(f"b_{key}"))
            .values({n: bindparam(f"b_{n}") for n in names})
        )
        conn.execute(statement, [{f"b_{k}": v for k, v in row.items()} for row in rows])
        return
    quote = conn.dialect.identifier_preparer.quote
    sql = (
        f"UPDATE {conn.dialect.identifier_preparer.format_table(table)} SET "
        f"{', '.join(f'{quote(n)} = ?' for n in names)} WHERE {quote(key)} = ?"
    )
    conn.exec_driver_sql(sql, _tuples(conn, table, rows, [*names, key]))


def _fast(
    conn: Connection,
    table: Table,
    rows: Sequence[dict[str, Any]],
    names: list[str],
    *,
    defaults_needed: bool,
) -> bool:
    """Whether the driver may take these rows directly."""
    if conn.dialect.name != "sqlite" or conn.dialect.paramstyle != "qmark":
        return False
    if any(n not in table.c for n in names):
        return False
    # columns left out that SQLAlchemy would fill in (on insert its defaults, on update its
    # onupdate values): let it
    given = set(names)
    for column in table.columns:
        if column.name in given or column.primary_key:
            continue
        if (column.default if defaults_needed else column.onupdate) is not None:
            return False
    width = len(names)
    return all(len(row) == width and all(n in row for n in names) for row in rows)


def _tuples(
    conn: Connection, table: Table, rows: Sequence[dict[str, Any]], names: list[str]
) -> list[tuple[Any, ...]]:
    dialect = conn.dialect
    processors: list[_Processor] = [
        table.c[n].type.dialect_impl(dialect).bind_processor(dialect) for n in names
    ]
    columns: list[list[Any]] = []
    for name, process in zip(names, processors, strict=True):
        values = [row[name] for row in rows]
        if process is not None:
            values = _processed(values, process)
        columns.append(values)
    return list(zip(*columns, strict=True))


def _processed(values: list[Any], process: Callable[[Any], Any]) -> list[Any]:
    """Each value through ``process``; a value that is the very object before it is reused."""
    out: list[Any] = []
    last: Any = object()
    last_out: Any = None
    for value in values:
        if value is not last:
            last, last_out = value, process(value)
        out.append(last_out)
    return out
