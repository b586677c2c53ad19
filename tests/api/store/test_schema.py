"""The migrations build the schema the models describe, identically on both backends."""

from __future__ import annotations

import pytest
from sqlalchemy import inspect, text

from beamaudit.api.store import current_revision, head_revision
from beamaudit.api.store.base import Base
from beamaudit.api.store.engine import make_engine
from beamaudit.api.store.migrate import upgrade


def _schema(engine) -> dict[str, set[str]]:
    insp = inspect(engine)
    return {
        name: {col["name"] for col in insp.get_columns(name)}
        for name in insp.get_table_names()
        if name != "alembic_version"
    }


def test_migration_reaches_head(store) -> None:
    assert current_revision(store.engine) == head_revision()


def test_migrated_tables_match_the_models(store) -> None:
    expected = {t.name: {c.name for c in t.columns} for t in Base.metadata.sorted_tables}
    assert _schema(store.engine) == expected


@pytest.mark.postgres
def test_sqlite_and_postgresql_yield_the_same_tables_and_columns(tmp_path) -> None:
    from store_support import _postgres_url

    sqlite_engine = make_engine(f"sqlite:///{tmp_path / 'a.db'}")
    upgrade(sqlite_engine)
    pg_url = _postgres_url()
    import uuid

    schema = f"t_{uuid.uuid4().hex[:12]}"
    admin = make_engine(pg_url)
    with admin.begin() as conn:
        conn.execute(text(f'CREATE SCHEMA "{schema}"'))
    pg = make_engine(pg_url, connect_args={"options": f"-csearch_path={schema}"})
    try:
        upgrade(pg)
        assert _schema(sqlite_engine) == _schema(pg)
    finally:
        pg.dispose()
        with admin.begin() as conn:
            conn.execute(text(f'DROP SCHEMA "{schema}" CASCADE'))
        admin.dispose()
        sqlite_engine.dispose()


def test_sqlite_runs_in_wal_mode_with_foreign_keys(tmp_path) -> None:
    engine = make_engine(f"sqlite:///{tmp_path / 'w.db'}")
    with engine.connect() as conn:
        assert conn.execute(text("PRAGMA journal_mode")).scalar() == "wal"
        assert conn.execute(text("PRAGMA foreign_keys")).scalar() == 1
    engine.dispose()


@pytest.mark.parametrize("table", ["exposure_events", "source_objects"])
def test_idempotence_keys_are_unique(store, table) -> None:
    insp = inspect(store.engine)
    uniques = {tuple(u["column_names"]) for u in insp.get_unique_constraints(table)}
    uniques |= {tuple(i["column_names"]) for i in insp.get_indexes(table) if i.get("unique")}
    key = (
        ("source_object_id", "event_index") if table == "exposure_events" else ("sop_instance_uid",)
    )
    assert key in uniques
