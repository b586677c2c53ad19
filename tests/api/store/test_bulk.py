"""The store's executemany helpers write exactly what SQLAlchemy Core writes, on each backend.

On SQLite ``insert_rows`` and ``update_rows`` bypass Core's per-row parameter handling; the
stored bytes must not change. Each check writes the same rows both ways into a table of the
store's own column types and compares what the database holds, read back raw (no result
processing), so a difference in how a timestamp, a JSON value or a boolean is stored shows.
"""

from __future__ import annotations

from datetime import UTC, datetime, timedelta, timezone

from sqlalchemy import (
    Boolean,
    Column,
    Float,
    Integer,
    MetaData,
    String,
    Table,
    bindparam,
    insert,
    select,
    update,
)

from beamaudit.api.store.base import JSONValue, UTCDateTime
from beamaudit.api.store.bulk import insert_rows, update_rows

_SHARED = {"filters": [{"material": "aluminium", "thickness_mm": 2.5}]}


def _table(name: str) -> Table:
    return Table(
        name,
        MetaData(),
        Column("id", Integer, primary_key=True),
        Column("label", String),
        Column("at", UTCDateTime()),
        Column("doc", JSONValue),
        Column("flag", Boolean),
        Column("x", Float),
    )


def _rows() -> list[dict]:
    return [
        {  # naive time (taken as UTC), JSON object, True
            "label": "a",
            "at": datetime(2026, 11, 3, 9, 30),
            "doc": {"k": [1, 2.5, None]},
            "flag": True,
            "x": 1.5,
        },
        {  # aware time in another zone, no microseconds; JSON None; False
            "label": "b",
            "at": datetime(2026, 11, 3, 9, 30, tzinfo=timezone(timedelta(hours=2))),
            "doc": None,
            "flag": False,
            "x": None,
        },
        {  # the same JSON object in two rows in a row (the helper reuses its serialisation)
            "label": "c",
            "at": datetime(2026, 11, 3, 9, 30, 0, 123456, tzinfo=UTC),
            "doc": _SHARED,
            "flag": None,
            "x": -0.0,
        },
        {"label": "d", "at": None, "doc": _SHARED, "flag": True, "x": 1e-300},
        # the instant of row "b" written in UTC (equal timestamps: serialised once), and the
        # same wall time naive (not equal to an aware one)
        {
            "label": "b-utc",
            "at": datetime(2026, 11, 3, 7, 30, tzinfo=UTC),
            "doc": None,
            "flag": None,
            "x": None,
        },
        {
            "label": "a-again",
            "at": datetime(2026, 11, 3, 9, 30),
            "doc": None,
            "flag": None,
            "x": None,
        },
        {"label": "é\tü", "at": None, "doc": ["text", "ü"], "flag": False, "x": 2.0},
        # equal documents that are different objects (serialised once by content), the same
        # keys in another order, numbers equal in Python but not in JSON, lists of texts
        *(
            {"label": f"doc{i}", "at": None, "doc": doc, "flag": None, "x": None}
            for i, doc in enumerate(
                [
                    {"kvp_kv": "(0018,0060) KVP", "sid_mm": "(0018,1110)"},
                    {"kvp_kv": "(0018,0060) KVP", "sid_mm": "(0018,1110)"},
                    {"sid_mm": "(0018,1110)", "kvp_kv": "(0018,0060) KVP"},
                    {"k": 1},
                    {"k": 1.0},
                    {"k": True},
                    [],
                    [],
                    ["a note"],
                    ["a note"],
                    [1, "1"],
                    {"k": "é\u0000"},
                ]
            )
        ),
    ]


def _raw(conn, table: Table) -> list[tuple]:
    columns = ", ".join(c.name for c in table.columns if c.name != "id")
    return conn.exec_driver_sql(f"SELECT {columns} FROM {table.name} ORDER BY id").all()


def test_insert_rows_stores_what_core_stores(store) -> None:
    ours, core = _table("bulk_ours"), _table("bulk_core")
    with store.engine.begin() as conn:
        ours.create(conn)
        core.create(conn)
        insert_rows(conn, ours, _rows())
        conn.execute(insert(core), _rows())
        assert _raw(conn, ours) == _raw(conn, core)
        assert len(_raw(conn, ours)) == len(_rows())
        # and they read back through the types as they went in
        back = conn.execute(select(ours.c.at, ours.c.doc).order_by(ours.c.id)).all()
        assert back[1].at == datetime(2026, 11, 3, 7, 30, tzinfo=UTC)
        assert back[2].doc == _SHARED and back[1].doc is None


def test_update_rows_stores_what_core_stores(store) -> None:
    ours, core = _table("bulk_upd_ours"), _table("bulk_upd_core")
    changes = [
        {"id": i + 1, "label": f"new {i}", "at": r["at"], "doc": r["doc"], "flag": not r["flag"]}
        for i, r in enumerate(reversed(_rows()))
    ]
    with store.engine.begin() as conn:
        for t in (ours, core):
            t.create(conn)
            conn.execute(insert(t), _rows())
        update_rows(conn, ours, changes)
        conn.execute(
            update(core)
            .where(core.c.id == bindparam("b_id"))
            .values({n: bindparam(f"b_{n}") for n in ("label", "at", "doc", "flag")}),
            [{f"b_{k}": v for k, v in row.items()} for row in changes],
        )
        assert _raw(conn, ours) == _raw(conn, core)


def test_rows_the_fast_path_cannot_take_go_through_core(store) -> None:
    """Columns left to their Python-side defaults: Core fills them in, as before."""
    from sqlalchemy import func

    t = Table(
        "bulk_defaults",
        MetaData(),
        Column("id", Integer, primary_key=True),
        Column("label", String),
        Column("n", Integer, default=7),
    )
    with store.engine.begin() as conn:
        t.create(conn)
        insert_rows(conn, t, [{"label": "a"}, {"label": "b"}])  # n from its default
        insert_rows(conn, t, [{"label": "c", "n": 1}, {"label": "d", "n": 2}])
        assert conn.execute(select(t.c.label, t.c.n).order_by(t.c.id)).all() == [
            ("a", 7),
            ("b", 7),
            ("c", 1),
            ("d", 2),
        ]
        insert_rows(conn, t, [])
        assert conn.scalar(select(func.count()).select_from(t)) == 4
