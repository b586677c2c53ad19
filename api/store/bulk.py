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

import functools
from collections.abc import Callable, Sequence
from typing import Any

from sqlalchemy import JSON, Table, bindparam, insert, update
from sqlalchemy.engine import Connection, Dialect

from beamaudit.api.store.base import UTCDateTime

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
    sql = _insert_sql(conn.dialect, table, tuple(names))
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
    sql = _update_sql(conn.dialect, table, tuple(names), key)
    conn.exec_driver_sql(sql, _tuples(conn, table, rows, [*names, key]))


@functools.lru_cache(maxsize=256)
def _insert_sql(dialect: Dialect, table: Table, names: tuple[str, ...]) -> str:
    """The ``INSERT`` of ``names`` into ``table`` with ``?`` placeholders, made once."""
    quote = dialect.identifier_preparer.quote
    return (
        f"INSERT INTO {dialect.identifier_preparer.format_table(table)} "
        f"({', '.join(quote(n) for n in names)}) VALUES ({', '.join('?' for _ in names)})"
    )


@functools.lru_cache(maxsize=256)
def _update_sql(dialect: Dialect, table: Table, names: tuple[str, ...], key: str) -> str:
    """The ``UPDATE`` of ``names`` of the ``table`` row whose ``key`` is given, made once."""
    quote = dialect.identifier_preparer.quote
    return (
        f"UPDATE {dialect.identifier_preparer.format_table(table)} SET "
        f"{', '.join(f'{quote(n)} = ?' for n in names)} WHERE {quote(key)} = ?"
    )


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
    if not _columns_suffice(table, tuple(names), defaults_needed):
        return False
    keys = rows[0].keys()
    if len(keys) != len(names) or any(n not in keys for n in names):
        return False
    return all(row.keys() == keys for row in rows)  # dict views compare as sets, in C


def _tuples(
    conn: Connection, table: Table, rows: Sequence[dict[str, Any]], names: list[str]
) -> list[tuple[Any, ...]]:
    columns: list[list[Any]] = []
    for name, (process, convert) in zip(
        names, _processors(conn.dialect, table, tuple(names)), strict=True
    ):
        values = [row[name] for row in rows]
        if process is not None:
            values = convert(values, process)
        columns.append(values)
    return list(zip(*columns, strict=True))


@functools.lru_cache(maxsize=256)
def _columns_suffice(table: Table, names: tuple[str, ...], defaults_needed: bool) -> bool:
    """Whether ``names`` are columns of ``table`` and no column left out needs SQLAlchemy to
    fill it in (on insert its default, on update its onupdate value). Kept per table and set
    of names: a single-row insert would otherwise walk every column each time."""
    if any(n not in table.c for n in names):
        return False
    given = set(names)
    for column in table.columns:
        if column.name in given or column.primary_key:
            continue
        if (column.default if defaults_needed else column.onupdate) is not None:
            return False
    return True


@functools.lru_cache(maxsize=256)
def _processors(
    dialect: Dialect, table: Table, names: tuple[str, ...]
) -> tuple[tuple[_Processor, Callable[[list[Any], Callable[[Any], Any]], list[Any]]], ...]:
    """Each column's bind processor (the one SQLAlchemy would use) and how a batch's values go
    through it; made once per dialect, table and columns (a row's hundred-odd columns each
    asked their type for it cost more than a single-row insert itself)."""
    out = []
    for name in names:
        kind = table.c[name].type
        process = kind.dialect_impl(dialect).bind_processor(dialect)
        if isinstance(kind, JSON):
            out.append((process, _processed_documents))
        elif isinstance(kind, UTCDateTime):
            out.append((process, _processed_by_value))
        else:
            out.append((process, _processed))
    return tuple(out)


def _processed(values: list[Any], process: Callable[[Any], Any]) -> list[Any]:
    """Each value through ``process`` (numbers, timestamps, booleans: cheap, one call each)."""
    return list(map(process, values))


def _processed_by_value(values: list[Any], process: Callable[[Any], Any]) -> list[Any]:
    """Timestamps through ``process``, each distinct one once (a batch shares its storing
    time and its studies' times; equal timestamps are the same instant, stored alike)."""
    done: dict[Any, Any] = {}
    out: list[Any] = []
    for value in values:
        if value not in done:
            done[value] = process(value)
        out.append(done[value])
    return out


def _processed_documents(values: list[Any], process: Callable[[Any], Any]) -> list[Any]:
    """JSON values through ``process``, each distinct document serialised once.

    Rows of a batch repeat their documents: one recipe object per room, provenance maps and
    note lists with the same texts. A value is looked up by its identity, and a flat dict or
    list of texts also by its content (texts compare and serialise alike; numbers would not:
    ``1 == 1.0 == True``), so equal documents get the very text they would have got.
    """
    by_id: dict[int, Any] = {}
    by_content: dict[tuple[Any, ...], Any] = {}
    out: list[Any] = []
    for value in values:
        key = id(value)
        if key in by_id:
            out.append(by_id[key])
            continue
        content = _text_content(value)
        if content is None:
            done = process(value)
        elif content in by_content:
            done = by_content[content]
        else:
            done = by_content[content] = process(value)
        by_id[key] = done
        out.append(done)
    return out


def _text_content(value: Any) -> tuple[Any, ...] | None:
    """A hashable stand-in for a dict of texts or a list of texts; ``None`` for anything else.

    ``str.join`` checks that every item is a text (subclasses included, which serialise as
    texts too) at C speed: it raises ``TypeError`` on anything else.
    """
    try:
        if type(value) is dict:
            "".join(value)
            "".join(value.values())
            return ("dict", *value.items())
        if type(value) is list:
            "".join(value)
            return ("list", *value)
    except TypeError:
        return None
    return None
