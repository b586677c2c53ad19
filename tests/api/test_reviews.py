"""The store's events table for reviews (``beamaudit.api.runs.reviews``) against a plain
computation.

``review_events`` reads a period's events column by column, the sparse dose columns and the header
text in queries of their own; here the same table is built the straightforward way (every stored
event as an ORM object, the rules of the events table applied one event at a time) on constructed
events that exercise each rule, and the two must agree cell for cell. Events are invented.
"""

from __future__ import annotations

import math
import random
from dataclasses import replace
from datetime import UTC, date, datetime, timedelta
from typing import Any

import numpy as np
import pandas as pd
import pytest
from sqlalchemy import insert, select

from beamaudit.api.review import Period, ReviewParameters, review
from beamaudit.api.runs.reviews import (
    events_frame,
    execute_review,
    review_events,
)
from beamaudit.api.store import models as m
from beamaudit.api.store.review_rows import ensure_catalogue, level_sets_from_store

START, END = date(2026, 3, 1), date(2026, 4, 1)


@pytest.fixture(autouse=True)
def _driver_for_any_store(monkeypatch) -> None:
    # a store of fewer than _ARROW_MIN_EVENTS events is read as plain rows; these tests hold the
    # driver's read on small stores too
    import beamaudit.api.runs.reviews as reviews

    monkeypatch.setattr(reviews, "_ARROW_MIN_EVENTS", 0)


MODALITIES = ("DX", "CR", "CT", "RF", "XA", "MG", None)
EXAMS = ("chest_pa", "abdomen_ap", "ct_head", "no_such_exam_type", None)


def _fill(sessions: Any, n: int = 400, seed: int = 7) -> None:
    """Events in and around March 2026 with every case the events table distinguishes."""
    rng = random.Random(seed)
    with sessions.begin() as s:
        _fill_places(s, n)
        ids = list(range(1, n + 1))
        rng.shuffle(ids)  # inserted out of id order
        s.execute(insert(m.ExposureEventRow), [_random_event(rng, i, n) for i in ids])


def _fill_places(s: Any, n: int) -> None:
    """Two sites, three rooms (one name in two sites), two devices, n/3 studies, n objects."""
    s.execute(insert(m.Site), [{"id": 1, "name": "Site A (invented)"}, {"id": 2, "name": "Site B"}])
    s.execute(
        insert(m.Room),
        [
            {"id": 3, "site_id": 1, "name": "ROOM 3"},
            {"id": 5, "site_id": 1, "name": "ROOM 5"},
            {"id": 8, "site_id": 2, "name": "ROOM 3"},  # the same name in two sites
        ],
    )
    s.execute(
        insert(m.Device),
        [
            {"id": 2, "room_id": 3, "manufacturer": "Acme", "model_name": "X1"},
            {"id": 4, "room_id": 5, "station_name": "STATION4"},
        ],
    )
    s.execute(
        insert(m.Study),
        [{"id": i, "study_instance_uid": f"2.25.{i}"} for i in range(1, n // 3 + 1)],
    )
    s.execute(
        insert(m.SourceObjectRow),
        [
            {"id": i, "sop_instance_uid": f"2.25.9{i}", "sop_class_uid": "1.2.3",
             "kind": "image_header", "received_via": "test"}
            for i in range(1, n + 1)
        ],
    )  # fmt: skip


def _random_event(rng: random.Random, i: int, n: int) -> dict[str, Any]:
    """Event ``i`` of ``n``: each column present, missing or varied at random."""
    start = datetime(2026, 2, 26, tzinfo=UTC)
    when = (
        start
        + timedelta(seconds=rng.randrange(0, 40 * 86400))
        + timedelta(microseconds=rng.randrange(0, 10**6))
    )

    def maybe(value: float, p: float = 0.7) -> float | None:
        return value if rng.random() < p else None

    return {
        "id": i,
        "event_key": f"k{i}",
        "source_object_id": i,
        "study_id": rng.choice([None, *range(1, n // 3 + 1)]),
        "room_id": rng.choice([None, 3, 5, 8]),
        "device_id": rng.choice([None, 2, 4]),
        "source_kind": rng.choice(["image_header", "image_header", "dose_report"]),
        "event_index": 0,
        "exam_type": rng.choice(EXAMS),
        "superseded": rng.random() < 0.1,
        "modality": rng.choice(MODALITIES),
        "acquisition_key": rng.choice([None, None, "a1", "a2", "a3"]),
        "event_datetime": when if rng.random() < 0.9 else None,
        "study_datetime": when - timedelta(minutes=5),
        "event_type": rng.choice([None, "fluoroscopy", "stationary"]),
        "irradiation_duration_s": maybe(rng.uniform(0, 600), 0.5),
        "study_description": rng.choice([None, "CHEST", "Abdomen"]),
        "series_description": rng.choice([None, "PA"]),
        "protocol_name": rng.choice([None, "P1"]),
        "body_part": rng.choice([None, "CHEST", "HEAD"]),
        "view_position": rng.choice([None, "PA", "AP"]),
        "patient_weight_kg": maybe(rng.uniform(20, 140)),
        "dap_gy_cm2": maybe(rng.lognormvariate(-1, 0.5)),
        "recon_dap_gy_cm2": maybe(rng.lognormvariate(-1, 0.5)),
        "recon_esak_mgy": maybe(rng.lognormvariate(0, 0.5)),
        "reference_point_air_kerma_mgy": maybe(rng.uniform(0, 50), 0.2),
        "ctdivol_mgy": maybe(rng.uniform(1, 60), 0.2),
        "dlp_mgy_cm": maybe(rng.uniform(10, 900), 0.2),
        "organ_dose_mgy": maybe(rng.uniform(0.5, 3), 0.1),
        "deviation_index": maybe(rng.uniform(-5, 5), 0.5),
        "size_dw_mean_cm": maybe(rng.uniform(12, 45), 0.4),
        "water_equivalent_diameter_mm": maybe(rng.uniform(120, 450), 0.4),
        "recon_mgd_mgy": maybe(rng.uniform(0.5, 3), 0.1),
        # a few carry a clinical indication (a rule's), one an empty text, one not ASCII
        "clinical_indication": rng.choice(
            [None] * 6 + ["acute_stroke", "trauma", "", "Schädel–Hirn"]
        ),
        "provenance": {},
        "notes": [],
    }


def _plain_table(session: Any, start: date = START, end: date = END) -> pd.DataFrame:
    """The events table by the contract, one stored event at a time."""
    events = session.scalars(select(m.ExposureEventRow)).all()
    first_slice: dict[str, int] = {}
    for e in events:
        if e.acquisition_key is not None and e.source_kind == "image_header":
            first_slice[e.acquisition_key] = min(e.id, first_slice.get(e.acquisition_key, e.id))
    rooms = {r.id: r for r in session.scalars(select(m.Room))}
    sites = {s.id: s.name for s in session.scalars(select(m.Site))}
    devices = {d.id: d for d in session.scalars(select(m.Device))}
    studies = {s.id: s.study_instance_uid for s in session.scalars(select(m.Study))}
    t0 = datetime(start.year, start.month, start.day, tzinfo=UTC)
    t1 = datetime(end.year, end.month, end.day, tzinfo=UTC)
    out = []
    for e in sorted(events, key=lambda e: e.id):
        when = e.event_datetime or e.study_datetime
        if e.superseded or when is None or not t0 <= when < t1:
            continue
        if (
            e.acquisition_key is not None
            and e.source_kind == "image_header"
            and first_slice[e.acquisition_key] != e.id
        ):
            continue
        room = rooms.get(e.room_id)  # type: ignore[arg-type]
        device = devices.get(e.device_id)  # type: ignore[arg-type]
        name = (
            " ".join(x for x in (device.manufacturer, device.model_name, device.serial_number) if x)
            or device.station_name
            or f"device {device.id}"
            if device
            else "(unknown device)"
        )
        unmapped = e.exam_type is None

        def number(v: float | None) -> float:
            return math.nan if v is None else float(v)

        out.append(
            {
                "event_id": e.id,
                "study_uid": studies[e.study_id] if e.study_id is not None else f"(event {e.id})",
                "event_datetime": pd.Timestamp(when),
                "site": sites[room.site_id] if room else "(no site)",
                "room": room.name if room else "(no room)",
                "device": name,
                "modality": e.modality,
                "exam_type": e.exam_type,
                "study_description": e.study_description if unmapped else None,
                "series_description": e.series_description if unmapped else None,
                "protocol_name": e.protocol_name if unmapped else None,
                "body_part": e.body_part if unmapped else None,
                "view_position": e.view_position if unmapped else None,
                "patient_weight_kg": number(e.patient_weight_kg),
                "dap_gy_cm2": number(e.dap_gy_cm2),
                "recon_dap_gy_cm2": number(e.recon_dap_gy_cm2),
                "esak_mgy": number(e.recon_esak_mgy),
                "reference_point_air_kerma_mgy": number(e.reference_point_air_kerma_mgy),
                "ctdivol_mgy": number(e.ctdivol_mgy),
                "dlp_mgy_cm": number(e.dlp_mgy_cm),
                "mgd_mgy": number(e.organ_dose_mgy),
                "deviation_index": number(e.deviation_index),
                "fluoro_time_s": number(e.irradiation_duration_s)
                if e.event_type == "fluoroscopy"
                else math.nan,
                # CT size bands: Dw from the images, else the scanner's (review/ct_size.py)
                "ct_dw_cm": (
                    number(e.size_dw_mean_cm)
                    if e.size_dw_mean_cm is not None
                    else number(e.water_equivalent_diameter_mm) / 10.0
                )
                if e.modality == "CT"
                else math.nan,
                "recon_mgd_mgy": number(e.recon_mgd_mgy),
                "clinical_indication": e.clinical_indication,
            }
        )
    return pd.DataFrame(out)


def _same(a: object, b: object) -> bool:
    if pd.isna(a) and pd.isna(b):  # type: ignore[call-overload]  # None or NaN: both missing
        return True
    return a == b


def test_events_table_equals_the_plain_computation(store) -> None:
    _fill(store.session_factory)
    with store.session_factory() as session:
        fast = events_frame(session, start=START, end=END)
        plain = _plain_table(session)
    assert len(plain) > 100  # the construction leaves enough events in the period
    assert list(fast["event_id"]) == list(plain["event_id"])
    for column in plain.columns:
        got, want = fast[column].tolist(), plain[column].tolist()
        if column == "event_datetime":  # milliseconds, as the store's epoch seconds round them
            assert all(abs((g - w).total_seconds()) < 1e-3 for g, w in zip(got, want, strict=True))
            continue
        bad = [(i, g, w) for i, (g, w) in enumerate(zip(got, want, strict=True)) if not _same(g, w)]
        assert not bad, (column, bad[:3])


def test_review_on_the_store_equals_the_review_of_the_plain_table(store) -> None:
    _fill(store.session_factory, seed=11)
    params = ReviewParameters(
        period=Period(START, END),
        changepoint_lookback_months=0,
        group_by=("site", "room", "device"),
        ct_size_band_edges_cm=(15.0, 25.0, 35.0),  # CT groups by size too, through the store
    )
    with store.session_factory.begin() as session:
        result, _ = execute_review(session, params)
        catalogue, rules = ensure_catalogue(session)
        levels = [s for _, s in level_sets_from_store(session)]
        plain = _plain_table(session)
    expected = review(plain, levels=levels, params=params, catalogue=catalogue, rules=rules)
    assert result.n_events == expected.n_events
    pd.testing.assert_frame_equal(result.groups_df, expected.groups_df)
    pd.testing.assert_frame_equal(result.monthly_df, expected.monthly_df)
    assert [f.to_json_dict() for f in result.flags] == [f.to_json_dict() for f in expected.flags]
    assert result.flags  # the constructed events raise flags of several kinds
    assert len({f.kind for f in result.flags}) >= 3


def test_review_events_of_an_empty_period(store) -> None:
    with store.session_factory() as session:
        frame = review_events(session, start=START, end=END)
    assert len(frame) == 0
    assert "event_id" in frame.columns and "fluoro_time_s" in frame.columns
    assert frame["dap_gy_cm2"].dtype == np.float64


def test_the_arrow_copy_and_plain_reads_give_the_same_table(store, monkeypatch) -> None:
    # the columns come through an ADBC driver (its own connection to the store); on PostgreSQL
    # the binary COPY through the session's connection is the next way, and plain rows the last:
    # each must give the very same table
    import beamaudit.api.runs.reviews as reviews

    _fill(store.session_factory, seed=5)
    taken: list[bool] = []
    arrow = reviews._dense_by_arrow

    def spy(*args: Any) -> Any:
        out = arrow(*args)
        taken.append(out is not None)
        return out

    def read() -> pd.DataFrame:
        with store.session_factory() as session:
            return review_events(session, start=START, end=END)

    monkeypatch.setattr(reviews, "_dense_by_arrow", spy)
    through_arrow = read()
    assert taken == [True]
    monkeypatch.setattr(reviews, "_dense_by_arrow", lambda *args: None)
    if store.backend == "postgresql":
        copied = reviews._dense_by_copy
        taken.clear()
        monkeypatch.setattr(reviews, "_dense_by_copy", lambda *a: taken.append(True) or copied(*a))
        pd.testing.assert_frame_equal(read(), through_arrow)
        assert taken == [True]
        monkeypatch.setattr(reviews, "_dense_by_copy", lambda *args: None)
    pd.testing.assert_frame_equal(read(), through_arrow)


def test_a_small_store_is_read_without_the_driver(store, monkeypatch) -> None:
    # below _ARROW_MIN_EVENTS stored events the rows are read through the session (no process
    # started for the driver), and the table is the driver's
    import beamaudit.api.runs.reviews as reviews

    _fill(store.session_factory, n=90, seed=6)
    with store.session_factory() as session:
        through_arrow = review_events(session, start=START, end=END)
    monkeypatch.setattr(reviews, "_ARROW_MIN_EVENTS", 10**9)
    readers: list[str] = []
    for name in ("_sqlite_arrow_reader", "session_snapshot"):
        monkeypatch.setattr(reviews, name, lambda *args, name=name: readers.append(name))
    with store.session_factory() as session:
        pd.testing.assert_frame_equal(review_events(session, start=START, end=END), through_arrow)
    assert readers == []


def test_an_empty_period_through_the_driver_is_the_plain_empty_table(store, monkeypatch) -> None:
    # a period without events (the change-point history of a new store): the driver's columns
    # come without a type; the table must still be the plain way's, without a second read
    import beamaudit.api.runs.reviews as reviews

    _fill(store.session_factory, n=60, seed=4)
    arrow = reviews._dense_by_arrow
    taken: list[bool] = []
    monkeypatch.setattr(
        reviews, "_dense_by_arrow", lambda *a: (out := arrow(*a), taken.append(out is not None))[0]
    )
    with store.session_factory() as session:
        through_arrow = review_events(session, start=date(2030, 1, 1), end=date(2030, 2, 1))
    assert taken == [True]
    monkeypatch.setattr(reviews, "_dense_by_arrow", lambda *args: None)
    monkeypatch.setattr(reviews, "_dense_by_copy", lambda *args: None)
    with store.session_factory() as session:
        plain = review_events(session, start=date(2030, 1, 1), end=date(2030, 2, 1))
    assert len(plain) == 0
    pd.testing.assert_frame_equal(through_arrow, plain)


def test_a_store_the_driver_cannot_reach_is_read_through_the_session(store, monkeypatch) -> None:
    # the driver cannot read the store (PostgreSQL: a password given only to the store's engine
    # refuses its connection; SQLite: a file its process cannot open): the review reads through
    # the session's connection, with the same result
    import adbc_driver_postgresql.dbapi
    from adbc_driver_manager import AdbcStatusCode, OperationalError

    import beamaudit.api.runs.reviews as reviews

    _fill(store.session_factory, n=90, seed=9)
    with store.session_factory() as session:
        expected = review_events(session, start=START, end=END)

    def refuse(*args: Any, **kwargs: Any) -> Any:
        raise OperationalError("connection refused (test)", status_code=AdbcStatusCode.IO)

    monkeypatch.setattr(adbc_driver_postgresql.dbapi, "connect", refuse)
    monkeypatch.setattr(reviews, "_sqlite_file", lambda session: "/nonexistent/store.db")
    arrow = reviews._dense_by_arrow
    taken: list[bool] = []
    monkeypatch.setattr(
        reviews, "_dense_by_arrow", lambda *a: (out := arrow(*a), taken.append(out is not None))[0]
    )
    with store.session_factory() as session:
        pd.testing.assert_frame_equal(review_events(session, start=START, end=END), expected)
    assert taken == [False]


def test_events_the_session_has_not_committed_are_read_too(store) -> None:
    # the Arrow reader sees only committed events: with uncommitted ones in the session it
    # must leave the reading to the session's connection
    _fill(store.session_factory, n=60, seed=3)
    with store.session_factory.begin() as session:
        before = len(review_events(session, start=START, end=END))
        session.execute(  # ids given, as _fill gives them (PostgreSQL's sequences stay at 1)
            insert(m.SourceObjectRow),
            {"id": 9001, "sop_instance_uid": "2.25.777", "sop_class_uid": "1.2.3",
             "kind": "image_header", "received_via": "test"},
        )  # fmt: skip
        session.execute(
            insert(m.ExposureEventRow),
            {"id": 9001, "event_key": "2.25.777#0", "source_object_id": 9001, "event_index": 0,
             "source_kind": "image_header", "superseded": False, "modality": "DX",
             "event_datetime": datetime(2026, 3, 15, tzinfo=UTC), "dap_gy_cm2": 0.2},
        )  # fmt: skip
        after = review_events(session, start=START, end=END)
        session.rollback()
    assert len(after) == before + 1
    assert after["dap_gy_cm2"].iloc[-1] == 0.2


def test_levels_for_a_band_and_an_indication_are_kept_with_them(store) -> None:
    # a paediatric band's level stored without its band would apply to adults: the store keeps
    # the band and the indication, and reads them back as they were
    from beamaudit.api.review.levels import LevelEntry, ReferenceLevelSet
    from beamaudit.api.store.level_sets import add_level_sets
    from beamaudit.api.store.review_rows import level_sets_from_store

    entries = (
        LevelEntry("chest_pa", "dap_gy_cm2", 0.1, "Gy.cm2"),
        LevelEntry("chest_pa", "dap_gy_cm2", 0.02, "Gy.cm2", patient_group="weight_15_30kg"),
        LevelEntry("ct_head", "dlp_mgy_cm", 600.0, "mGy.cm", clinical_indication="acute_stroke"),
    )
    invented = ReferenceLevelSet(
        "Paed (invented)", "local", "1", date(2026, 1, 1), "tests", entries
    )
    with store.session_factory.begin() as session:
        add_level_sets(session, [invented])
    with store.session_factory() as session:
        ((_, back),) = level_sets_from_store(session)
    assert sorted(e.key for e in back.entries) == sorted(e.key for e in entries)
    assert back.get("chest_pa", "dap_gy_cm2", "weight_15_30kg").value == 0.02
    assert back.get("chest_pa", "dap_gy_cm2").value == 0.1


def _one_event(sessions: Any, event_id: int, when: datetime, **values: Any) -> None:
    """One stored event (a source object of its own), as a new site's first exams are."""
    with sessions.begin() as s:
        if s.get(m.Site, 1) is None:
            s.execute(insert(m.Site), {"id": 1, "name": "Site A (invented)"})
            s.execute(insert(m.Room), {"id": 3, "site_id": 1, "name": "ROOM 3"})
        s.execute(
            insert(m.SourceObjectRow),
            {"id": event_id, "sop_instance_uid": f"2.25.6{event_id}", "sop_class_uid": "1.2.3",
             "kind": "image_header", "received_via": "test"},
        )  # fmt: skip
        s.execute(
            insert(m.ExposureEventRow),
            {"id": event_id, "event_key": f"k{event_id}", "source_object_id": event_id,
             "event_index": 0, "source_kind": "image_header", "superseded": False,
             "room_id": 3, "modality": "DX", "exam_type": "chest_pa", "event_datetime": when,
             "patient_weight_kg": 70.0, "dap_gy_cm2": 0.1, "provenance": {}, "notes": [],
             **values},
        )  # fmt: skip


def test_a_month_of_one_event_is_reviewed(store) -> None:
    # a new site's first exam: one of the two read halves (even and odd ids) holds no event
    _one_event(store.session_factory, 1, datetime(2026, 3, 4, 10, tzinfo=UTC))
    params = ReviewParameters(period=Period(START, END))
    with store.session_factory.begin() as session:
        frame = review_events(session, start=START, end=END)
        result, _ = execute_review(session, params)
    assert list(frame["event_id"]) == [1]
    assert frame["dap_gy_cm2"].tolist() == [0.1]
    assert result.n_events == 1


def test_a_month_whose_history_holds_single_events_is_reviewed(store) -> None:
    # the change-point history reads earlier months the same way: months of one event each,
    # and months of none, before a month of one event
    _one_event(store.session_factory, 2, datetime(2025, 12, 20, tzinfo=UTC))
    _one_event(store.session_factory, 5, datetime(2026, 1, 9, tzinfo=UTC), dap_gy_cm2=None)
    _one_event(store.session_factory, 8, datetime(2026, 3, 2, tzinfo=UTC))
    with store.session_factory.begin() as session:
        history = review_events(session, start=date(2024, 3, 1), end=START)
        result, _ = execute_review(session, ReviewParameters(period=Period(START, END)))
    assert list(history["event_id"]) == [2, 5]
    assert math.isnan(history["dap_gy_cm2"].iloc[1])
    assert result.n_events == 1


_ONE_LIBRARY = """
import sys
from datetime import date
from pathlib import Path
from beamaudit.api.runs.reviews import review_events
from beamaudit.api.store import make_engine, make_session_factory
engine = make_engine(sys.argv[1])
with make_session_factory(engine)() as session:
    n = len(review_events(session, start=date(2026, 3, 1), end=date(2026, 4, 1)))
maps = Path("/proc/self/maps").read_text()
print(n, "adbc_driver_sqlite" in maps or "libadbc_driver_sqlite" in maps)
"""


def test_the_review_read_never_loads_a_second_sqlite_library(tmp_path) -> None:
    # POSIX locks belong to a process: a second copy of SQLite closing the file would drop the
    # locks of the process's own connections (and lose its later writes). The fast read runs the
    # driver in a process of its own, so the reading process never maps the driver's library.
    import subprocess
    import sys

    from beamaudit.api.store import make_engine, make_session_factory, upgrade

    url = f"sqlite:///{tmp_path / 'store.db'}"
    engine = make_engine(url)
    upgrade(engine)
    _fill(make_session_factory(engine), n=60, seed=2)
    engine.dispose()
    done = subprocess.run(
        [sys.executable, "-c", _ONE_LIBRARY, url], capture_output=True, text=True, timeout=120
    )
    assert done.returncode == 0, done.stderr
    n, loaded = done.stdout.split()
    assert int(n) > 0 and loaded == "False"


def test_the_distribution_page_names_studies_by_their_study_instance_uid(store) -> None:
    # the events carry the study's store id; the page links to /exams/<Study Instance UID>
    from beamaudit.api.web.page_data import distribution_events

    _fill(store.session_factory)
    with store.session_factory() as session:
        frame = distribution_events(session, start=START, end=END, window=(50.0, 90.0))
        uids = set(session.scalars(select(m.Study.study_instance_uid)))
    assert len(frame)
    assert all(u in uids or u.startswith("(event ") for u in frame["study_uid"])
    assert any(u in uids for u in frame["study_uid"])


# ------------------------------------------------------------- the same review on either backend
@pytest.fixture
def both_stores(tmp_path) -> Any:
    """A migrated SQLite store and a PostgreSQL one (a schema of its own), each empty."""
    import uuid

    from sqlalchemy import text
    from store_support import _postgres_url

    from beamaudit.api.store import make_engine, make_session_factory, upgrade

    base_url = _postgres_url()  # skips without PostgreSQL, fails so with CI=true
    assert base_url is not None
    schema = f"t_{uuid.uuid4().hex[:12]}"
    admin = make_engine(base_url)
    with admin.begin() as conn:
        conn.execute(text(f'CREATE SCHEMA "{schema}"'))
    lite = make_engine(f"sqlite:///{tmp_path / 'store.db'}")
    pg = make_engine(base_url, connect_args={"options": f"-csearch_path={schema}"})
    try:
        upgrade(lite)
        upgrade(pg)
        yield {"sqlite": make_session_factory(lite), "postgresql": make_session_factory(pg)}
    finally:
        lite.dispose()
        pg.dispose()
        with admin.begin() as conn:
            conn.execute(text(f'DROP SCHEMA "{schema}" CASCADE'))
        admin.dispose()


def _close(a: Any, b: Any, path: str = "") -> list[str]:
    """Where two JSON results differ: numbers beyond a relative 1e-9, anything else at all."""
    if isinstance(a, dict) and isinstance(b, dict):
        if a.keys() != b.keys():
            return [f"{path}: keys {sorted(a)} != {sorted(b)}"]
        return [d for k in a for d in _close(a[k], b[k], f"{path}.{k}")]
    if isinstance(a, list) and isinstance(b, list):
        if len(a) != len(b):
            return [f"{path}: {len(a)} items != {len(b)}"]
        return [
            d
            for i, (x, y) in enumerate(zip(a, b, strict=True))
            for d in _close(x, y, f"{path}[{i}]")
        ]
    if isinstance(a, float) and isinstance(b, float | int) and not isinstance(b, bool):
        return [] if math.isclose(a, b, rel_tol=1e-9, abs_tol=0.0) else [f"{path}: {a!r} != {b!r}"]
    return [] if a == b else [f"{path}: {a!r} != {b!r}"]


def _in_milliseconds(frame: pd.DataFrame) -> pd.DataFrame:
    from beamaudit.api.runs.reviews import instants

    seconds = frame["event_datetime"].map(lambda t: t.timestamp()).astype(float)
    return frame.assign(event_datetime=instants(seconds.to_numpy()))


@pytest.mark.postgres
def test_a_review_is_the_same_on_sqlite_and_postgresql_and_in_the_core(both_stores) -> None:
    # the same events stored in both backends (each read its own way: the ADBC driver in a
    # process of its own on SQLite, in process with the sparse columns apart on PostgreSQL),
    # reviewed with the change-point lookback on (February's events are the history): the results
    # agree to 1e-9 with each other and with the core on the plain table of each store
    from beamaudit.api.review.run import monthly_history

    params = ReviewParameters(period=Period(START, END), group_by=("site", "room", "device"))
    lookback = date(2024, 3, 1)
    results = {}
    for backend, sessions in both_stores.items():
        _fill(sessions, n=1200, seed=23)
        with sessions.begin() as session:
            result, _ = execute_review(session, params)
            catalogue, rules = ensure_catalogue(session)
            levels = [s for _, s in level_sets_from_store(session)]
            # times in milliseconds, as the store's read gives them (its epoch seconds rounded)
            plain, earlier = (
                _in_milliseconds(_plain_table(session, a, b))
                for a, b in ((START, END), (lookback, START))
            )
        history = monthly_history(
            earlier,
            params=replace(params, period=Period(lookback, START), levels_on=START),
            catalogue=catalogue,
        )
        assert len(history)  # February's events make a history
        core = review(
            plain, levels=levels, params=params, history_df=history, catalogue=catalogue,
            rules=rules,
        )  # fmt: skip
        body = result.to_json_dict()
        assert body["groups"] and body["monthly"] and body["flags"]
        assert not _close(body, core.to_json_dict()), (
            backend,
            _close(body, core.to_json_dict())[:5],
        )
        results[backend] = body
    differences = _close(results["sqlite"], results["postgresql"])
    assert not differences, differences[:5]


@pytest.mark.postgres
def test_the_core_quantiles_are_postgresql_percentile_cont() -> None:
    # The core's median, quartiles and upper percentile interpolate linearly between order
    # statistics at h = (n - 1) p (Hyndman & Fan 1996, definition 7); PostgreSQL's
    # percentile_cont interpolates between adjacent input items the same way (PostgreSQL
    # documentation, ordered-set aggregates; from memory), so SQL could compute them unchanged.
    from sqlalchemy import text
    from store_support import _postgres_url

    from beamaudit.api.review.stats import group_statistics
    from beamaudit.api.store import make_engine

    url = _postgres_url()
    assert url is not None
    rng = np.random.default_rng(5)
    sizes = [1, 2, 3, 4, 5, 7, 10, 19, 20, 33, 100, 401]
    codes = np.repeat(np.arange(len(sizes)), sizes)
    values = np.round(rng.lognormal(0.0, 0.8, len(codes)), 3)  # rounded: ties within groups
    ours = group_statistics(codes, values, len(sizes), upper_percentile=95.0)
    engine = make_engine(url)
    try:
        with engine.connect() as conn:
            rows = conn.execute(
                text(
                    "SELECT g, percentile_cont(ARRAY[0.25, 0.5, 0.75, 0.95]) "
                    "WITHIN GROUP (ORDER BY v) FROM unnest(CAST(:g AS int[]), "
                    "CAST(:v AS float8[])) AS t(g, v) GROUP BY g ORDER BY g"
                ),
                {"g": codes.tolist(), "v": values.tolist()},
            ).all()
    finally:
        engine.dispose()
    assert [g for g, _ in rows] == list(range(len(sizes)))
    for g, (q1, median, q3, upper) in rows:
        for theirs, mine in (
            (q1, ours.q1),
            (median, ours.median),
            (q3, ours.q3),
            (upper, ours.upper),
        ):
            assert math.isclose(theirs, mine[g], rel_tol=1e-9, abs_tol=0.0), (
                sizes[g],
                theirs,
                mine[g],
            )


def test_stored_times_read_back_to_the_whole_millisecond() -> None:
    # a time stored as epoch seconds reads back as written: 45.145 s, not 45.144999981 s (the
    # float seconds' nearest double times 1e9 ns), and a missing time stays missing
    import numpy as np

    from beamaudit.api.runs.reviews import instants

    times = instants(np.array([1773589485.145, np.nan]))
    assert times[0].isoformat() == "2026-03-15T15:44:45.145000+00:00"
    assert pd.isna(times[1])


# -- ids looked up through an array over their span ------------------------------------------------
@pytest.mark.parametrize("seed", range(6))
def test_ids_looked_up_over_their_span_as_pandas_looks_them_up(seed: int) -> None:
    """``_positions_among`` is ``Index.get_indexer`` and ``_sorted_distinct`` is
    ``pd.factorize(sort=True)``, with missing ids, ids no key has, fractions, and spans too wide
    for the array (then pandas itself answers)."""
    from beamaudit.api.runs import reviews

    rng = np.random.default_rng(seed)
    span = [40, 5_000, 2**25][seed % 3]
    keys = rng.choice(np.arange(-3, span), size=min(span, 30), replace=False).astype(np.int64)
    ids = rng.integers(-5, span + 5, size=2_000).astype(np.float64)
    ids[rng.random(2_000) < 0.1] = np.nan
    if seed >= 3:
        ids[:3] = [0.5, keys[0] + 0.25, -0.0]
    expected = pd.Index(keys.astype(np.float64)).get_indexer(ids)
    assert (reviews._positions_among(ids, keys) == expected).all()
    assert (reviews._positions_among(ids, keys[:0]) == -1).all()
    whole = ids[~np.isnan(ids)]
    codes, uniques = reviews._sorted_distinct(whole)
    want_codes, want_uniques = pd.factorize(whole, sort=True)
    assert (codes == want_codes).all() and (uniques == np.asarray(want_uniques)).all()
    assert reviews._sorted_distinct(whole[:0])[0].size == 0
