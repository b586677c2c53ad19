"""Reviews against reference levels, on the store: the bridge to :mod:`beamaudit.api.review`.

* :func:`events_frame` reads the events of a period from the store into the
  review core's input table (contract in :mod:`beamaudit.api.review.events`):
  superseded image-header events (their study's dose report carries them) are
  left out, and the images of one CT acquisition count once (the first image by
  id stands for its acquisition: CTDIvol in CT headers is per acquisition and
  is never summed over slices). Each quantity's column is read from the stored
  column :data:`~beamaudit.api.review.quantities.QUANTITIES` names (``esak_mgy``
  from beamaudit's reconstructed ``recon_esak_mgy``, ``mgd_mgy`` from the
  device's ``organ_dose_mgy``); ``recon_dap_gy_cm2`` is the reconstructed DAP.
* :func:`run_review` stores a :class:`~beamaudit.api.store.models.ReviewRun`
  with its parameters, the reference-level set versions used and the software
  version, runs the core, stores the result (JSON) and its flags, and returns
  the run's id. History for change-points is the monthly medians of the
  ``changepoint_lookback_months`` before the period, computed from the same
  stored events by the same core, so a re-run gives the same result.
* Catalogue and mapping rules live in the store; an empty store is seeded
  with the shipped catalogue and rules on first use (and says so in the audit log).
"""

from __future__ import annotations

import gc
import json
import logging
from collections.abc import Callable
from dataclasses import dataclass, replace
from datetime import UTC, date, datetime
from functools import partial
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
from sqlalchemy import (
    Column,
    Float,
    String,
    bindparam,
    case,
    cast,
    func,
    literal_column,
    or_,
    select,
)
from sqlalchemy.dialects.postgresql import ARRAY
from sqlalchemy.orm import Session, sessionmaker
from sqlalchemy.sql import util as sql_util
from sqlalchemy.sql import visitors

from beamaudit import __version__
from beamaudit.api.review import (
    ExamCatalogue,
    Period,
    ReviewParameters,
    ReviewResult,
    review,
)
from beamaudit.api.review.quantities import QUANTITIES
from beamaudit.api.runs.findings import store_flags
from beamaudit.api.runs.packed_columns import (
    PACKED_PARTS,
    packed_number,
    packed_text,
    session_snapshot,
    unpacked_numbers,
    unpacked_texts,
)
from beamaudit.api.runs.record import (
    NoEventsError,
    UnknownNameError,
    scope_of,
    scope_words,
    this_process,
)
from beamaudit.api.store import models as m
from beamaudit.api.store.auth import record_change
from beamaudit.api.store.base import utcnow
from beamaudit.api.store.engine import SQLITE_BUSY_TIMEOUT_MS
from beamaudit.api.store.review_rows import (
    ensure_catalogue,
    level_sets_from_store,
    room_and_device_names,
)
from beamaudit.api.store.skin_doses import add_skin_dose_flags

__all__ = [
    "events_frame",
    "exam_type_events",
    "period_conditions",
    "review_events",
    "run_review",
]


log = logging.getLogger(__name__)

_E = m.ExposureEventRow
#: Columns every event has (or mostly has), read for every event of the period.
_DENSE_SELECT: tuple[Any, ...] = (
    _E.id.label("event_id"),
    _E.study_id,
    _E.room_id,
    _E.device_id,
    _E.modality,
    _E.exam_type,
    _E.patient_weight_kg,
    _E.patient_age_years,
    _E.dap_gy_cm2,
    _E.recon_dap_gy_cm2,
    getattr(_E, QUANTITIES["esak_mgy"].column).label("esak_mgy"),
    _E.deviation_index,
)
#: Columns only some kinds of event carry: read for the events that have at least one of them.
_SPARSE_COLUMNS: tuple[tuple[str, Any], ...] = (
    *(
        (q, getattr(_E, QUANTITIES[q].column))
        for q in ("reference_point_air_kerma_mgy", "ctdivol_mgy", "dlp_mgy_cm", "mgd_mgy")
    ),
    ("fluoro_time_s", case((_E.event_type == "fluoroscopy", _E.irradiation_duration_s))),
    # mammography's groups are set by the compressed thickness (review/mammography.py)
    ("breast_thickness_mm", case((_E.modality == "MG", _E.body_part_thickness_mm))),
    # CT size bands (review/ct_size.py): Dw from the images, else the scanner's reported Dw
    (
        "ct_dw_cm",
        case(
            (
                _E.modality == "CT",
                func.coalesce(_E.size_dw_mean_cm, _E.water_equivalent_diameter_mm / 10.0),
            )
        ),
    ),
    # mammography: the reconstructed D_G beside the device's AGD (a room's ratio is watched)
    ("recon_mgd_mgy", _E.recon_mgd_mgy),
)
#: The stored columns the sparse columns' values come from: an event with none of them has no
#: sparse value (the others they are made of, ``event_type`` and ``modality``, only choose).
_SPARSE_SOURCES: tuple[Any, ...] = (
    *(getattr(_E, QUANTITIES[q].column) for q in ("reference_point_air_kerma_mgy", "ctdivol_mgy",
                                                  "dlp_mgy_cm", "mgd_mgy")),
    _E.irradiation_duration_s,
    _E.body_part_thickness_mm,
    _E.size_dw_mean_cm,
    _E.water_equivalent_diameter_mm,
    _E.recon_mgd_mgy,
)  # fmt: skip
#: Header text: read only for the events still without an exam type (to map them).
_TEXT_COLUMNS: tuple[tuple[str, Any], ...] = tuple(
    (c.key, c)
    for c in (
        _E.study_description,
        _E.series_description,
        _E.protocol_name,
        _E.body_part,
        _E.view_position,
    )
)
_FLOAT_NAMES = (
    "patient_weight_kg",
    "patient_age_years",
    "dap_gy_cm2",
    "recon_dap_gy_cm2",
    "esak_mgy",
    "deviation_index",
)


def instants(epoch_s: Any) -> pd.Series:
    """Times in UTC from seconds since 1970 (the stores' read), to the whole millisecond: the
    seconds made integer milliseconds first, so that a stored time reads back as it was written
    (``...45.145``, not ``...45.144999981``, which a conversion of float seconds gives)."""
    milliseconds = (pd.Series(epoch_s, dtype="float64") * 1000.0).round().astype("Int64")
    return pd.to_datetime(milliseconds, unit="ms", utc=True)


def _as_utc(value: date) -> datetime:
    return datetime(value.year, value.month, value.day, tzinfo=UTC)


def _fetch(session: Session, stmt: Any, values: dict[str, Any]) -> np.ndarray:
    """Run ``stmt`` on the raw DBAPI cursor; the rows as a 2-D object array (one column each).

    One month of a large registry is a million rows: no SQLAlchemy row objects and no per-row
    type processing, and the garbage collector paused while the row tuples are built (they hold
    only numbers and strings, so there are no cycles to find; scanning a growing list of a million
    tuples would cost more than reading them).
    """
    conn = session.connection()
    compiled = stmt.compile(dialect=conn.dialect, compile_kwargs={"render_postcompile": True})
    values = {**compiled.params, **values}  # literals of the statement, then the caller's values
    args: Any = (
        tuple(values[k] for k in compiled.positiontup or ()) if compiled.positional else values
    )
    dbapi_connection = conn.connection.dbapi_connection
    assert dbapi_connection is not None  # a checked-out connection has its DBAPI connection
    cursor = dbapi_connection.cursor()
    paused = gc.isenabled()
    gc.disable()
    try:
        cursor.execute(str(compiled), args)
        width = len(cursor.description)
        rows = cursor.fetchall()
        table = np.array(rows, dtype=object) if rows else np.empty((0, width), dtype=object)
        del rows
    finally:
        if paused:
            gc.enable()
        cursor.close()
    return table.reshape(-1, width)


def _period_conditions(
    session: Session, *, start: date, end: date
) -> tuple[list[Any], Any, dict[str, Any]]:
    """The WHERE conditions of the events in ``[start, end)``, their time in seconds since the
    epoch, and the values of the conditions' parameters."""
    E = m.ExposureEventRow
    when = func.coalesce(E.event_datetime, E.study_datetime)
    sqlite = session.get_bind().dialect.name == "sqlite"
    epoch = (
        (func.julianday(when) - 2440587.5) * 86400.0
        if sqlite
        # date_part is double precision (extract is numeric: Decimal objects, and slower for
        # the server to write); the review rounds the seconds to milliseconds either way
        else func.date_part("epoch", when, type_=Float)
    )
    first_slices = (
        select(func.min(E.id))
        .where(E.acquisition_key.is_not(None), E.source_kind == "image_header")
        .group_by(E.acquisition_key)
    )
    conditions = [
        E.superseded.is_(False),
        when >= bindparam("t0"),
        when < bindparam("t1"),
        E.acquisition_key.is_(None) | (E.source_kind != "image_header") | E.id.in_(first_slices),
    ]
    t0, t1 = _as_utc(start), _as_utc(end)
    if sqlite:  # stored as UTC wall time text
        values: dict[str, Any] = {
            "t0": t0.strftime("%Y-%m-%d %H:%M:%S.%f"),
            "t1": t1.strftime("%Y-%m-%d %H:%M:%S.%f"),
        }
    else:
        values = {"t0": t0, "t1": t1}
    return conditions, epoch, values


def period_conditions(
    session: Session, *, start: date, end: date
) -> tuple[list[Any], Any, dict[str, Any]]:
    """The WHERE conditions of the events a review of ``[start, end)`` reads (superseded events
    and repeated CT slices left out), their time as seconds since the epoch, and the values of
    the conditions' parameters for the DBAPI cursor (pass typed datetimes to a session)."""
    return _period_conditions(session, start=start, end=end)


#: Ids per ``IN`` list (SQLite's default limit on parameters is 32766 since 3.32).
_IDS_PER_QUERY = 5000


def _positions(event_ids: np.ndarray, ids: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Positions of ``ids`` in the sorted ``event_ids``, for those of ``ids`` found there."""
    ids = ids.astype(np.int64)
    if len(event_ids) == 0:
        return np.zeros(0, dtype=np.int64), np.zeros(len(ids), dtype=bool)
    at = np.minimum(np.searchsorted(event_ids, ids), len(event_ids) - 1)
    found = event_ids[at] == ids
    return at[found], found


def _names_column(ids: np.ndarray, names: dict[int, str], missing: str) -> pd.Categorical:
    """Names of the rows' ids (``missing`` for no id or an unknown one), as a categorical."""
    keys = np.array(list(names), dtype=np.int64)
    position = _positions_among(ids, keys)
    labels = np.array([*names.values(), missing], dtype=object)
    categories, label_code = np.unique(labels, return_inverse=True)
    codes = label_code.reshape(-1)[np.where(position < 0, len(keys), position)]
    return pd.Categorical.from_codes(codes, categories=categories)


#: the widest span of ids (highest less lowest) looked up through an array over the span rather
#: than by hashing: an array of this many entries costs less than hashing a month's ids
_SPAN_FOR_ARRAY = 1 << 24


def _positions_among(ids: np.ndarray, keys: np.ndarray) -> np.ndarray:
    """The position in ``keys`` (distinct integers) of each of ``ids`` (numbers, NaN for none),
    -1 for none or one not among them: ``pd.Index(keys).get_indexer(ids)``, looked up in an
    array over the keys' span when it is small (ids of rooms and devices)."""
    if not len(keys) or int(keys.max()) - int(keys.min()) >= _SPAN_FOR_ARRAY:
        return pd.Index(keys.astype(np.float64)).get_indexer(ids)
    low = int(keys.min())
    lookup = np.full(int(keys.max()) - low + 1, -1, dtype=np.int64)
    lookup[keys - low] = np.arange(len(keys))
    inside = (ids >= low) & (ids <= low + len(lookup) - 1)  # (NaN is neither)
    at = np.zeros(len(ids), dtype=np.int64)
    at[inside] = ids[inside].astype(np.int64) - low
    position = np.where(inside, lookup[at], -1)
    whole = np.zeros(len(ids), dtype=bool)  # ids are whole numbers: another is no key
    whole[inside] = ids[inside] == np.floor(ids[inside])
    return np.where(whole, position, -1)


def _sorted_distinct(ids: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """``pd.factorize(ids, sort=True)`` of whole numbers: each one's rank among the distinct
    ones, and those sorted; through an array over their span when it is small (a month's
    study ids), which costs a fifth of hashing a million of them."""
    if not len(ids):
        return np.zeros(0, dtype=np.int64), np.zeros(0, dtype=np.float64)
    low, high = float(ids.min()), float(ids.max())
    if high - low >= _SPAN_FOR_ARRAY or not (ids == np.floor(ids)).all():
        codes, uniques = pd.factorize(ids, sort=True)
        return codes.astype(np.int64), np.asarray(uniques, dtype=np.float64)
    offsets = ids.astype(np.int64) - int(low)
    present = np.zeros(int(high - low) + 1, dtype=bool)
    present[offsets] = True
    rank = np.cumsum(present, dtype=np.int64) - 1
    return rank[offsets], (np.flatnonzero(present) + int(low)).astype(np.float64)


def _study_column(
    session: Session,
    study_ids: np.ndarray,
    event_ids: np.ndarray,
    rows: Callable[[], tuple[np.ndarray, np.ndarray] | None] | None = None,
) -> pd.Categorical:
    """The study's Study Instance UID, or ``(event N)`` for an event without a study, as a
    categorical (the events carry the study's id: each distinct study is looked up once, or in
    what ``rows`` gives when given: the ids and UIDs of the studies read beside the events)."""
    has = ~np.isnan(study_ids)
    codes = np.empty(len(study_ids), dtype=np.int64)
    # the distinct ids sorted, each event's rank among them
    known, uniques = _sorted_distinct(study_ids[has])
    codes[has] = known
    codes[~has] = len(uniques) + np.arange(int((~has).sum()))
    labels = np.concatenate(
        [
            _study_uids(session, uniques.astype(np.int64), rows),
            np.array([f"(event {i})" for i in event_ids[~has]], dtype=object),
        ]
    )
    return pd.Categorical.from_codes(codes, categories=pd.Index(labels, dtype=object))


def _study_uids(
    session: Session,
    ids: np.ndarray,
    read: Callable[[], tuple[np.ndarray, np.ndarray] | None] | None = None,
) -> np.ndarray:
    """The Study Instance UIDs of the studies ``ids`` (sorted), from what ``read`` gives (ids
    and UIDs, or None) when given, else in one query over their range."""
    if not len(ids):
        return np.array([], dtype=object)
    found_rows = None if read is None else read()
    stmt = select(m.Study.id, m.Study.study_instance_uid).where(
        m.Study.id.between(bindparam("first"), bindparam("last"))
    )
    bounds = {"first": int(ids[0]), "last": int(ids[-1])}
    if found_rows is None:
        found_rows = _study_rows_packed(session, stmt, bounds, len(ids))
    if found_rows is None:
        # the rows through the DBAPI cursor: half a million ORM rows cost seconds, these tenths
        rows = _fetch(session, stmt, bounds)
        found_rows = rows[:, 0].astype(np.int64), rows[:, 1]
    found_ids, found_uids = found_rows
    order = np.argsort(found_ids, kind="stable")
    at, found = _positions(found_ids[order], ids)
    out = np.empty(len(ids), dtype=object)
    out[found] = found_uids[order[at]]
    for k in np.flatnonzero(~found):  # a study deleted since its events were read
        out[k] = f"(study {ids[k]})"
    return out


def _packed_studies(stmt: Any) -> Any:
    """``stmt`` (a select of studies) selecting their ids and UIDs, packed."""
    return stmt.with_only_columns(
        packed_number(m.Study.id), *packed_text(m.Study.study_instance_uid)
    )


def _study_rows_packed(
    session: Session, stmt: Any, values: dict[str, Any], n: int
) -> tuple[np.ndarray, np.ndarray] | None:
    """The studies' ids and UIDs of ``stmt`` (a select of ``Study.id`` and the UID) on
    PostgreSQL, packed by the server into one row (:mod:`.packed_columns`: no row per study
    for the server to write and the driver to parse); None on another backend and for fewer
    than ``_ARROW_MIN_EVENTS`` studies."""
    if n < _ARROW_MIN_EVENTS or session.get_bind().dialect.name != "postgresql":
        return None
    ids, lengths, texts = session.execute(_packed_studies(stmt), values).one()
    return _ids_and_texts(ids, lengths, (texts or "").encode())


def _text_categorical(values: np.ndarray) -> pd.Categorical:
    return pd.Categorical(pd.Series(values, dtype=object))


def _dense_by_rows(
    session: Session, conditions: list[Any], epoch: Any, values: dict[str, Any]
) -> dict[str, Any]:
    """The dense columns from the rows of a plain query (any backend)."""
    rows = _fetch(
        session, select(*_DENSE_SELECT, epoch.label("epoch_s")).where(*conditions), values
    )
    names = [c.key for c in _DENSE_SELECT]
    out: dict[str, Any] = {"event_id": rows[:, 0].astype(np.int64)}
    for offset, name in enumerate(names[1:], start=1):
        if name in ("modality", "exam_type"):
            out[name] = _text_categorical(rows[:, offset])
        else:
            out[name] = rows[:, offset].astype(np.float64)
    out["epoch_s"] = rows[:, len(names)].astype(np.float64)
    return out


_COPY_SIGNATURE = b"PGCOPY\n\xff\r\n\x00"


def _dense_by_copy(
    session: Session, conditions: list[Any], epoch: Any, values: dict[str, Any]
) -> dict[str, Any] | None:
    """The dense columns by one binary ``COPY`` (PostgreSQL), parsed as a NumPy record array:
    the way through the session's own connection when the ADBC driver cannot connect.

    Every column goes as ``float8`` (ids are far below 2**53, so exactly), NULL as NaN, and the
    two text columns as positions in the lists of the period's distinct values, so that every
    row has the same width and the whole result is one ``frombuffer``: no Python object per
    value. None when a row is not as expected (a text value that was not in the lists because it
    was committed in between): then the rows are read the plain way.
    """
    lists = _dense_lists(session, conditions, values)
    nan: Any = literal_column("'NaN'::float8")

    def number(column: Any) -> Any:
        return func.coalesce(cast(column, Float), nan)

    def position(column: Any, name: str) -> Any:  # 1-based; NaN for NULL, -1 if not listed
        found = func.array_position(bindparam(f"{name}_list", type_=ARRAY(String)), column)
        return func.coalesce(cast(found, Float), case((column.is_(None), nan), else_=-1.0))

    selected = [position(c, c.key) if c.key in lists else number(c) for c in _DENSE_SELECT] + [
        number(epoch)
    ]
    stmt = select(*selected).where(*conditions)
    conn = session.connection()
    compiled = stmt.compile(dialect=conn.dialect, compile_kwargs={"render_postcompile": True})
    params = {**compiled.params, **values, **{f"{k}_list": v for k, v in lists.items()}}
    dbapi_connection = conn.connection.dbapi_connection
    assert dbapi_connection is not None
    buffer = bytearray()
    query = f"COPY ({compiled}) TO STDOUT (FORMAT BINARY)"
    cursor: Any = dbapi_connection.cursor()  # psycopg's, which can COPY
    with cursor, cursor.copy(query, params) as copy:
        for block in copy:
            buffer += block
    width = len(selected)
    # binary COPY: signature, flags (int32), header extension length (int32) and extension;
    # per row the field count (int16), then per field its length (int32) and value; trailer -1
    if buffer[:11] != _COPY_SIGNATURE:
        return None
    start = 19 + int.from_bytes(buffer[15:19], "big")
    fields = [("n", ">i2")]
    for j in range(width):
        fields += [(f"length{j}", ">i4"), (f"value{j}", ">f8")]
    row = np.dtype(fields)
    body = memoryview(buffer)[start : len(buffer) - 2]
    if len(body) % row.itemsize:
        return None
    table = np.frombuffer(body, dtype=row)
    if not (table["n"] == width).all() or not all(
        (table[f"length{j}"] == 8).all() for j in range(width)
    ):
        return None
    return _dense_from_columns([table[f"value{j}"].astype(np.float64) for j in range(width)], lists)


def _dense_lists(session: Session, conditions: list[Any], values: dict[str, Any]) -> dict[str, Any]:
    """The period's distinct modalities and exam types, sorted: text columns travel as their
    1-based positions in these lists."""
    E = m.ExposureEventRow
    pairs = _fetch(session, select(E.modality, E.exam_type).where(*conditions).distinct(), values)
    return {
        "modality": sorted({p for p in pairs[:, 0] if p is not None}),
        "exam_type": sorted({p for p in pairs[:, 1] if p is not None}),
    }


def _dense_from_columns(column: list[np.ndarray], lists: dict[str, Any]) -> dict[str, Any] | None:
    """The dense columns from the all-number form (ids and values as floats, NaN for NULL, text
    as 1-based positions in ``lists``, -1 for a text not listed); None when a text was not
    listed (it was committed after the lists were read)."""
    width = len(column)
    out: dict[str, Any] = {"event_id": column[0].astype(np.int64)}
    for j, c in enumerate(_DENSE_SELECT[1:], start=1):
        if c.key in lists:
            codes = column[j]
            if (codes == -1).any():
                return None
            categories = pd.Index(lists[c.key], dtype=object)
            out[c.key] = pd.Categorical.from_codes(
                np.where(np.isnan(codes), -1, codes - 1).astype(np.int64), categories=categories
            )
        else:
            out[c.key] = column[j]
    out["epoch_s"] = column[width - 1]
    return out


#: -DBL_MAX, the stand-in for NULL in the all-REAL reads from SQLite (SQLite has no NaN: it
#: stores a NaN as NULL); no stored quantity, id or time comes near it
_SQLITE_NULL = -1.7976931348623157e308


def _sqlite_file(session: Session) -> str | None:
    """The path of the session's SQLite database file, or None (another backend, in memory)."""
    url = session.connection().engine.url
    if url.get_backend_name() != "sqlite" or url.query:
        return None
    database = url.database or ""
    if database in ("", ":memory:") or database.startswith("file:"):
        return None
    return database


def _dense_by_arrow(
    session: Session, conditions: list[Any], epoch: Any, values: dict[str, Any]
) -> dict[str, Any] | None:
    """The dense and the sparse columns in one read through an ADBC driver, as Arrow arrays.

    The DBAPI drivers make a Python object of every value they return (twelve million for a
    month of a million events); the ADBC drivers (Apache Arrow's database connectivity) write the
    values into Arrow arrays in C, which NumPy and pandas take as they are. Every number is read
    as a double and the texts as texts ('' for NULL), so that every column has one type
    whatever its first rows hold. The sparse columns and the clinical indications come in the
    same read (a second pass over the table costs more than carrying them); on PostgreSQL the
    result also carries ``indication`` (ids, texts) and ``studies`` (what gives the period's
    studies' ids and UIDs), which :func:`review_events` takes instead of reading them itself.

    * SQLite (a database file): the ADBC SQLite driver in a short-lived process of its own
      (:mod:`beamaudit.api.store.sqlite_arrow`: the driver has its own copy of the SQLite library,
      which must never open the file inside a process that uses Python's ``sqlite3`` on it), in two
      threads (events of even and of odd id), numbers with ``_SQLITE_NULL`` for NULL (SQLite has
      no NaN); the rows come back as an Arrow IPC stream. Used only when the driver sees the
      events the session sees (the session holds no uncommitted events of its own and none were
      committed in between: count and highest id equal).
    * PostgreSQL: the ADBC PostgreSQL driver, each column packed by the server into one value
      (:func:`_packed_read`: a few large values instead of a million rows to write and parse),
      in two statements at once, each on a connection of its own, in the session's own snapshot.

    None (the rows are read another way) when the store is not a plain file, the driver is
    missing or the server refuses its connection, or when the reader cannot see what the session
    sees; and for a store of fewer than ``_ARROW_MIN_EVENTS`` events.
    """
    E = m.ExposureEventRow
    backend = session.get_bind().dialect.name
    if backend == "postgresql":
        return _packed_read(session, conditions, epoch, values)
    census = select(func.count(), func.max(E.id))
    expected = tuple(session.execute(census).one())
    if (expected[0] or 0) < _ARROW_MIN_EVENTS:
        return None  # a small store: reading its rows costs less than starting the driver
    source = _sqlite_arrow_reader(session) if backend == "sqlite" else None
    if source is None:
        return None

    census_sql = str(census.compile(dialect=session.get_bind().dialect))
    return _one_read(source, census_sql, expected, conditions, epoch, values)


def _one_read(
    source: _ArrowSource,
    census_sql: str,
    expected: tuple[Any, ...],
    conditions: list[Any],
    epoch: Any,
    values: dict[str, Any],
) -> dict[str, Any] | None:
    """The period's dense and sparse columns and its indications in one read (SQLite), numbers
    with ``source.null`` for NULL; the indications as :func:`_indications_apart` gives them."""
    E = m.ExposureEventRow

    def number(column: Any) -> Any:
        as_float = cast(column, Float)
        if source.null is None:
            return as_float
        return func.coalesce(as_float, literal_column(repr(source.null)))

    dense = [func.coalesce(c, "") if c.key in _ARROW_TEXTS else number(c) for c in _DENSE_SELECT]
    names = [c.key for c in _DENSE_SELECT] + ["epoch_s"] + [n for n, _ in _SPARSE_COLUMNS]
    sparse = [number(c) for _, c in _SPARSE_COLUMNS]
    # the indications too ('=' before each, '' for none): no scan of their own
    indication = func.coalesce(literal_column("'='", String).concat(E.clinical_indication), "")
    out = _arrow_columns(
        source,
        census_sql,
        expected,
        select(*dense, number(epoch), *sparse, indication).where(*conditions),
        values,
        [*names, "clinical_indication"],
    )
    return None if out is None else _indications_apart(out)


def _packed_read(
    session: Session, conditions: list[Any], epoch: Any, values: dict[str, Any]
) -> dict[str, Any] | None:
    """The period's columns from PostgreSQL, each packed by the server into one value
    (:mod:`.packed_columns`), in ``PACKED_PARTS`` statements (the events of id ``j`` modulo
    that) read at once in the session's snapshot: the dense columns, and in the same pass the
    sparse columns and the indications of the events that have one. The same columns as
    :func:`_arrow_table_columns` gives, with ``indication`` (a pair of arrays: ids, texts);
    None when they cannot be read so (then the session reads them), and for a store whose
    highest event id is below ``_ARROW_MIN_EVENTS`` (reading its rows costs less than the
    driver's connections)."""
    E = m.ExposureEventRow
    if (session.execute(select(func.max(E.id))).scalar() or 0) < _ARROW_MIN_EVENTS:
        return None
    names = [c.key for c in _DENSE_SELECT] + ["epoch_s"]
    reads = session_snapshot(session)
    if reads is None:
        return None
    parts = reads.read(
        [_packed_part(conditions, epoch, j).params(**values) for j in range(PACKED_PARTS)]
    )
    if parts is None:
        return None
    rows = [[table.column(j)[0] for j in range(table.num_columns)] for table in parts]
    # the UIDs of the studies in the parts' range of study ids, read while the parts are unpacked
    bounds = [b.as_py() for row in rows for b in row[-2:] if b.is_valid]
    Study = m.Study
    studies = (
        reads.start(
            _packed_studies(
                select(Study.id).where(Study.id.between(int(min(bounds)), int(max(bounds))))
            )
        )
        if bounds
        else None
    )
    unpacked = [_unpacked_part(row[:-2], names) for row in rows]
    if any(u is None for u in unpacked):
        return None
    out = _arrow_table_columns(None, [u[0] for u in unpacked], names)
    if out is None:
        return None
    few = [np.concatenate(c) for c in zip(*(u[1] for u in unpacked), strict=True)]
    at, found = _positions(out["event_id"], few[0])
    for (name, _), values_of in zip(_SPARSE_COLUMNS, few[1:], strict=True):
        column = np.full(len(out["event_id"]), np.nan)
        column[at] = values_of[found]
        out[name] = column
    out["indication"] = tuple(
        np.concatenate(c) for c in zip(*(u[2] for u in unpacked), strict=True)
    )
    out["studies"] = None if studies is None else partial(_unpacked_studies, studies)
    return out


def _unpacked_studies(read: Callable[[], Any]) -> tuple[np.ndarray, np.ndarray] | None:
    """The studies' ids and UIDs of a packed read of studies, when it has come (None when the
    driver could not read them)."""
    table = read()
    return None if table is None else _ids_and_texts(*(table.column(j)[0] for j in range(3)))


def _ids_and_texts(ids: Any, lengths: Any, texts: Any) -> tuple[np.ndarray, np.ndarray] | None:
    """Packed ids and texts (:func:`packed_number`, :func:`packed_text`) as arrays of integers
    and of Python texts; None when the texts do not unpack."""
    labels = unpacked_texts(lengths, texts)
    if labels is None:
        return None
    return (
        unpacked_numbers(ids).astype(np.int64),
        labels.to_numpy(zero_copy_only=False).astype(object),
    )


def _sparse_stored_columns() -> list[Any]:
    """The stored columns the sparse columns are made of (their values and conditions)."""
    found: dict[str, Any] = {}
    for _, expression in _SPARSE_COLUMNS:
        for element in visitors.iterate(expression.__clause_element__()):
            if isinstance(element, Column) and element.table is m.ExposureEventRow.__table__:
                found.setdefault(element.key, element)
    return list(found.values())


def _packed_part(conditions: list[Any], epoch: Any, part: int) -> Any:
    """The statement of part ``part`` of :func:`_packed_read`: the events of that id modulo
    ``PACKED_PARTS``, each column packed; the sparse columns and the indications of the events
    that have one. The rows are selected with their columns and marks in a subquery the planner
    keeps apart (``OFFSET 0``), so that each mark is evaluated once a row, not once for each
    aggregate it filters."""
    E = m.ExposureEventRow
    sparse = [c.__clause_element__() for _, c in _SPARSE_COLUMNS]
    dense_keys = {c.key for c in _DENSE_SELECT}
    rows = (
        select(
            *_DENSE_SELECT,
            epoch.label("epoch_s"),
            *(c for c in _sparse_stored_columns() if c.key not in dense_keys),
            or_(*(c.is_not(None) for c in _SPARSE_SOURCES)).label("has_sparse"),
            E.clinical_indication,
        )
        .where(*conditions, func.mod(E.id, PACKED_PARTS) == part)
        .offset(0)
        .subquery()
    )
    columns: list[Any] = []
    for c in _DENSE_SELECT:
        column = rows.c[c.key]
        columns += list(packed_text(column)) if c.key in _ARROW_TEXTS else [packed_number(column)]
    columns.append(packed_number(rows.c.epoch_s))
    # the sparse columns made of the subquery's columns, for its rows that may have one
    on_rows = sql_util.ClauseAdapter(rows)
    having = rows.c.has_sparse
    columns += [packed_number(c, having) for c in (rows.c.event_id, *map(on_rows.traverse, sparse))]
    marked = rows.c.clinical_indication.is_not(None)
    columns += [
        packed_number(rows.c.event_id, marked),
        *packed_text(rows.c.clinical_indication, marked),
        func.min(rows.c.study_id),  # the range of the studies to look up
        func.max(rows.c.study_id),
    ]
    return select(*columns)


def _unpacked_part(row: list[Any], names: list[str]) -> Any:
    """One part of :func:`_packed_read`: the dense columns ``names`` as an Arrow table, the
    sparse columns' (ids, values...) and the indications' (ids, texts); None when a text
    column does not unpack."""
    import pyarrow

    dense, j = [], 0
    for name in names:
        if name in _ARROW_TEXTS:
            dense.append(unpacked_texts(row[j], row[j + 1]))
            j += 2
        else:
            dense.append(pyarrow.array(unpacked_numbers(row[j])))
            j += 1
    n_sparse = 1 + len(_SPARSE_COLUMNS)
    sparse = [unpacked_numbers(v) for v in row[j : j + n_sparse]]
    indications = _ids_and_texts(*row[j + n_sparse :])
    if indications is None or any(c is None for c in dense):
        return None
    return pyarrow.table(dense, names=names), sparse, indications


def _arrow_columns(
    source: _ArrowSource,
    census_sql: str,
    expected: tuple[Any, ...],
    stmt: Any,
    values: dict[str, Any],
    names: list[str],
) -> dict[str, Any] | None:
    """The columns ``names`` of ``stmt`` read by ``source``, in id order (the first column):
    texts as categoricals, numbers as float arrays (NaN for NULL), ``event_id`` as integers;
    None when the driver cannot read them or gives a column of another type."""
    statements = source.statements(stmt, values)
    if statements is None:
        return None
    pieces = source.read(census_sql, expected, statements)
    if pieces is None:
        return None
    return _arrow_table_columns(source.null, pieces, names)


def _arrow_table_columns(
    null: float | None, pieces: list[Any], names: list[str]
) -> dict[str, Any] | None:
    """The columns ``names`` of the Arrow tables ``pieces`` (parts of one read), in id order (the
    first column): texts as categoricals, numbers as float arrays (NaN for NULL), ``event_id`` as
    integers; None when a column is of another type."""
    import pyarrow

    # one chunk per column (the drivers hand rows over in batches), in id order; a part without
    # rows has columns without a type ('permissive' takes the other parts' types)
    table = pyarrow.concat_tables(pieces, promote_options="permissive").combine_chunks()
    ids = table.column(0).to_numpy(zero_copy_only=False)
    order = None  # the rows in id order (sorted runs, or a parallel scan's rows): as NumPy
    if len(ids) > 1 and not (np.diff(ids) > 0).all():  # arrays (a take of Arrow's texts costs)
        order = np.argsort(ids, kind="stable")
    out: dict[str, Any] = {}
    for j, name in enumerate(names):
        column = table.column(j)
        if len(column) == 0:  # no rows: SQLite's driver gives such columns no type
            out[name] = (
                pd.Categorical([], categories=pd.Index([], dtype=object))
                if name in _ARROW_TEXTS
                else np.zeros(0, dtype=np.float64)
            )
            continue
        if name in _ARROW_TEXTS:
            out[name] = _arrow_categorical(column, order)
            continue
        if not pyarrow.types.is_float64(column.type):  # double by the query: else not understood
            return None
        numbers = column.to_numpy(zero_copy_only=False)  # Arrow's nulls as NaN
        if order is not None:
            numbers = numbers[order]  # (a new array: its stand-ins for NULL replaced in place)
            if null is not None:
                numbers[numbers == null] = np.nan
        elif null is not None:
            numbers = np.where(numbers == null, np.nan, numbers)
        out[name] = numbers
    out["event_id"] = out["event_id"].astype(np.int64)
    return out


#: The columns read as texts through an ADBC driver ('' for NULL)
_ARROW_TEXTS = ("modality", "exam_type", "clinical_indication")


def _indications_apart(out: dict[str, Any]) -> dict[str, Any]:
    """The clinical indications read as a column of every event ('=' before each text, ''
    for none) as the ids and texts of the events that have one, as they are read apart."""
    marked = out.pop("clinical_indication")
    labels = np.array([c[1:] for c in marked.categories] + [None], dtype=object)
    codes = np.asarray(marked.codes, dtype=np.int64)
    has = codes >= 0
    out["indication"] = out["event_id"][has], labels[codes[has]]
    return out


#: Stored events below which a review reads plain rows rather than through an ADBC driver:
#: starting the driver (on SQLite a process of its own with pyarrow, about 0.3-0.5 s of CPU)
#: costs more than reading the rows of a store this small (the demo's 7,000 events: 0.05 s).
_ARROW_MIN_EVENTS = 50_000


@dataclass(frozen=True)
class _ArrowSource:
    """How an ADBC driver reads the session's store."""

    #: the statements (SQL with every value written in) that read the period, given the select
    #: and its values; None when they cannot be written so
    statements: Callable[[Any, dict[str, Any]], list[str] | None]
    #: reads the statements (census checked against the expected one in the same snapshot as
    #: every statement): their Arrow tables, or None (census differs, the driver cannot read the
    #: store)
    read: Callable[[str, tuple[Any, ...], list[str]], list[Any] | None]
    #: the number standing for NULL in number columns; None: Arrow's own null
    null: float | None


def _sqlite_literal(value: Any) -> str | None:
    """``value`` as a SQLite literal (texts quoted, numbers as they are); None for other types."""
    if isinstance(value, str):
        return "'" + value.replace("'", "''") + "'"
    if isinstance(value, int | float) and not isinstance(value, bool):
        return repr(value)
    return None


def _sqlite_arrow_reader(session: Session) -> _ArrowSource | None:
    """The ADBC SQLite driver on the session's database file, in a process of its own; None when
    that cannot be done (the store is not a plain file).

    Two statements, read in two threads of that process: the events of even and of odd id (each
    pass tests every row, but decodes only its half, whatever ids the period holds). Numbers come
    with ``_SQLITE_NULL`` for NULL (SQLite has no NaN). The values are written into the statements
    (the period's bounds and constant texts, none from a user).
    """
    path = _sqlite_file(session)
    if path is None:
        return None
    uri = Path(path).resolve().as_uri()
    dialect = session.get_bind().dialect

    def statements(stmt: Any, values: dict[str, Any]) -> list[str] | None:
        out = []
        for parity in (0, 1):
            half = stmt.where(m.ExposureEventRow.id % 2 == parity)
            compiled = half.compile(dialect=dialect, compile_kwargs={"render_postcompile": True})
            params = {**compiled.params, **values}
            literals = [_sqlite_literal(params[k]) for k in compiled.positiontup or ()]
            pieces = str(compiled).split("?")
            if len(pieces) != len(literals) + 1:
                return None  # a '?' that is not a parameter
            sql = pieces[0]
            for literal, piece in zip(literals, pieces[1:], strict=True):
                if literal is None:
                    return None  # a value of another type
                sql += literal + piece
            out.append(sql)
        return out

    def read(census: str, expected: tuple[Any, ...], sqls: list[str]) -> list[Any] | None:
        request = {
            "uri": uri,
            "busy_timeout_ms": SQLITE_BUSY_TIMEOUT_MS,
            "census": census,
            "expected": list(expected),
            "statements": sqls,
        }
        table = _read_in_a_process(request)
        return None if table is None else [table]

    return _ArrowSource(statements, read, _SQLITE_NULL)


def _read_in_a_process(request: dict[str, Any]) -> Any:
    """Run :mod:`beamaudit.api.store.sqlite_arrow` on ``request``; its Arrow table, or None (the
    driver is missing or could not read the file, or the census differed: the reason is logged)."""
    import subprocess
    import sys
    import tempfile

    import pyarrow
    import pyarrow.ipc

    command = [sys.executable, "-m", "beamaudit.api.store.sqlite_arrow"]
    with (
        tempfile.TemporaryFile() as errors,
        subprocess.Popen(
            command, stdin=subprocess.PIPE, stdout=subprocess.PIPE, stderr=errors
        ) as child,
    ):
        assert child.stdin is not None and child.stdout is not None
        try:
            child.stdin.write(json.dumps(request).encode())
            child.stdin.close()
            table = pyarrow.ipc.open_stream(child.stdout).read_all()
        except (OSError, pyarrow.ArrowInvalid):  # it ended without an answer
            table = None
        status = child.wait()
        if status != 0 or table is None:
            errors.seek(0)
            reason = errors.read().decode(errors="replace").strip()
            log.info("the review read the other way: the Arrow reader ended with status %s%s",
                     status, f" ({reason.splitlines()[-1]})" if reason else "")  # fmt: skip
            return None
    return table


def _arrow_categorical(column: Any, rows: np.ndarray | None = None) -> pd.Categorical:
    """A text column read as Arrow ('' standing for NULL) as a categorical of its texts, its
    ``rows`` in that order when given."""
    encoded = column.combine_chunks().dictionary_encode()
    categories = np.asarray(encoded.dictionary.to_pylist(), dtype=object)
    codes = encoded.indices.to_numpy(zero_copy_only=False).astype(np.int64)
    if rows is not None:
        codes = codes[rows]
    # categories sorted, '' (NULL) out, as pandas factorises the texts themselves
    order = np.argsort(categories, kind="stable")
    kept = order[categories[order] != ""]
    recode = np.full(len(categories) + 1, -1, dtype=np.int64)  # the last: a null index
    recode[kept] = np.arange(len(kept))
    codes = recode[np.where(codes < 0, len(categories), codes)]
    return pd.Categorical.from_codes(codes, categories=pd.Index(categories[kept], dtype=object))


def review_events(session: Session, *, start: date, end: date) -> pd.DataFrame:
    """The review core's events table for events in ``[start, end)`` (UTC dates), sorted by
    ``event_id``, with the key columns (``site``, ``room``, ``device``, ``modality``,
    ``exam_type``) and ``study_uid`` as categoricals.

    Done in SQL where it is cheaper than in Python: the time comes as seconds since the epoch,
    fluoroscopy time only for fluoroscopy events, and the repeated slices of a CT acquisition
    (image headers sharing an acquisition key) are left out. Only the columns that (nearly) every
    event has are read for every event; the dose columns only some kinds of event carry (K_a,r,
    CT indices, glandular dose, fluoroscopy time) are read for the events that have one, and
    header text for the events still without an exam type.
    """
    E = m.ExposureEventRow
    conditions, epoch, values = _period_conditions(session, start=start, end=end)
    dense = _dense_by_arrow(session, conditions, epoch, values)
    if dense is None and session.get_bind().dialect.name == "postgresql":
        dense = _dense_by_copy(session, conditions, epoch, values)
    if dense is None:
        dense = _dense_by_rows(session, conditions, epoch, values)
    # read beside the columns on PostgreSQL: the indications' rows, and the studies' (coming)
    indications, studies = dense.pop("indication", None), dense.pop("studies", None)
    event_ids = dense["event_id"]
    if len(event_ids) > 1 and not (np.diff(event_ids) > 0).all():
        order = np.argsort(event_ids, kind="stable")
        dense = {k: v[order] for k, v in dense.items()}
        event_ids = dense["event_id"]
    n = len(event_ids)
    rooms, devices = room_and_device_names(session)
    room_ids = dense["room_id"]
    columns: dict[str, Any] = {
        "event_id": event_ids,
        "study_uid": None,  # last: the studies' read beside it goes on meanwhile
        "event_datetime": instants(dense["epoch_s"]),
        "site": _names_column(room_ids, {k: v[1] for k, v in rooms.items()}, "(no site)"),
        "room": _names_column(room_ids, {k: v[0] for k, v in rooms.items()}, "(no room)"),
        "device": _names_column(dense["device_id"], devices, "(unknown device)"),
        "modality": dense["modality"],
        "exam_type": dense["exam_type"],
        **{name: dense[name] for name in _FLOAT_NAMES},
    }
    if all(name in dense for name, _ in _SPARSE_COLUMNS):  # read with the dense columns
        columns.update((name, dense[name]) for name, _ in _SPARSE_COLUMNS)
    else:
        sparse = _fetch(
            session,
            select(E.id, *(c.label(name) for name, c in _SPARSE_COLUMNS)).where(
                *conditions, or_(*(c.is_not(None) for _, c in _SPARSE_COLUMNS))
            ),
            values,
        )
        # (a later query may see events committed since the first: only those it read are kept)
        at, found = _positions(event_ids, sparse[:, 0])
        for offset, (name, _) in enumerate(_SPARSE_COLUMNS):
            column = np.full(n, np.nan)
            column[at] = sparse[found, 1 + offset].astype(np.float64)
            columns[name] = column
    study_ids = dense["study_id"]
    del dense
    # the clinical indication: few events carry one (a rule set it), read for those only
    indication = np.full(n, None, dtype=object)
    if indications is None:
        marked = _fetch(
            session,
            select(E.id, E.clinical_indication).where(
                *conditions, E.clinical_indication.is_not(None)
            ),
            values,
        )
        indications = marked[:, 0], marked[:, 1]
    at, found = _positions(event_ids, indications[0])
    indication[at] = indications[1][found]
    columns["clinical_indication"] = indication
    text_columns = {name: np.full(n, None, dtype=object) for name, _ in _TEXT_COLUMNS}
    unmapped = event_ids[pd.isna(columns["exam_type"])]
    for first in range(0, len(unmapped), _IDS_PER_QUERY):  # by id: exactly the events read
        chunk = [int(i) for i in unmapped[first : first + _IDS_PER_QUERY]]
        text = _fetch(
            session, select(E.id, *(c for _, c in _TEXT_COLUMNS)).where(E.id.in_(chunk)), {}
        )
        at, found = _positions(event_ids, text[:, 0])
        for offset, column in enumerate(text_columns.values()):
            column[at] = text[found, 1 + offset]
    columns.update(text_columns)
    columns["study_uid"] = _study_column(session, study_ids, event_ids, studies)
    # the columns as they are, not copied into one block per type (a frame the review
    # reads, never writes: copying twenty columns of a million rows cost a tenth of the read)
    return pd.DataFrame(columns, copy=False)


def events_frame(session: Session, *, start: date, end: date) -> pd.DataFrame:
    """The review core's events table for events in ``[start, end)`` (UTC dates), in plain
    columns (text as objects, ``None`` where missing); :func:`review_events` is the same table
    with categorical keys, as the review reads it."""
    frame = review_events(session, start=start, end=end)
    for c in ("study_uid", "site", "room", "device", "modality", "exam_type"):
        values = frame[c].astype(object)
        frame[c] = values.where(values.notna(), None)
    return frame


#: the columns of :func:`exam_type_events`, by name
_EXAM_TYPE_COLUMNS: tuple[tuple[str, Any], ...] = (
    ("event_id", _E.id),
    ("study_id", _E.study_id),
    ("room_id", _E.room_id),
    ("exam_type", _E.exam_type),
    ("patient_weight_kg", _E.patient_weight_kg),
    ("kvp_kv", _E.kvp_kv),
    ("exposure_mas", _E.exposure_mas),
    ("dap_gy_cm2", _E.dap_gy_cm2),
    ("recon_dap_gy_cm2", _E.recon_dap_gy_cm2),
    ("esak_mgy", getattr(_E, QUANTITIES["esak_mgy"].column)),
    *_SPARSE_COLUMNS[:4],
)


def exam_type_events(session: Session, *, start: date, end: date, exam_type: str) -> pd.DataFrame:
    """The events of one exam type in ``[start, end)`` (UTC dates), as the review reads them
    (the same events: not superseded, one slice per CT acquisition), with the technique; read
    by a plain query, for a page that shows one examination. ``study_uid`` is the study's id as
    text, as in :func:`review_events`; ``room`` the room's name."""
    conditions, epoch, values = _period_conditions(session, start=start, end=end)
    stmt = select(*(c.label(n) for n, c in _EXAM_TYPE_COLUMNS), epoch.label("epoch_s")).where(
        *conditions, _E.exam_type == bindparam("exam_type")
    )
    rows = _fetch(session, stmt, {**values, "exam_type": exam_type})
    names = [n for n, _ in _EXAM_TYPE_COLUMNS]
    frame = pd.DataFrame(rows, columns=[*names, "epoch_s"])
    rooms, _ = room_and_device_names(session)
    for name in names[4:]:
        frame[name] = pd.to_numeric(frame[name], errors="coerce").astype(float)
    frame["event_datetime"] = instants(pd.to_numeric(frame["epoch_s"]))
    frame["room"] = [
        rooms[int(r)][0] if r is not None and int(r) in rooms else "(no room)"
        for r in frame["room_id"]
    ]
    frame["study_uid"] = [
        str(int(s)) if s is not None and not pd.isna(s) else f"(event {int(e)})"
        for s, e in zip(frame["study_id"], frame["event_id"], strict=True)
    ]
    frame["event_id"] = frame["event_id"].astype(np.int64)
    return frame.drop(columns=["study_id", "room_id", "epoch_s"]).sort_values("event_id")


def _lookback_start(period: Period, months: int) -> date:
    y, mo = period.start.year, period.start.month - months
    while mo <= 0:
        mo += 12
        y -= 1
    return date(y, mo, 1)


def _period_and_lookback(
    session: Session, params: ReviewParameters
) -> tuple[pd.DataFrame, pd.DataFrame | None]:
    """The events of the period and those of the change-point lookback before it (None without
    a lookback), read together: one pass over the events table rather than two."""
    months = params.changepoint_lookback_months
    if months <= 0:
        return review_events(session, start=params.period.start, end=params.period.end), None
    both = review_events(
        session, start=_lookback_start(params.period, months), end=params.period.end
    )
    earlier = (both["event_datetime"] < pd.Timestamp(_as_utc(params.period.start))).to_numpy()
    if not earlier.any():
        return both, None
    return both.loc[~earlier].reset_index(drop=True), both.loc[earlier].reset_index(drop=True)


def _history(
    events: pd.DataFrame | None, params: ReviewParameters, catalogue: ExamCatalogue
) -> pd.DataFrame | None:
    """The monthly medians of the lookback's ``events`` (the change-point history), or None."""
    if events is None or events.empty:
        return None
    start = _lookback_start(params.period, params.changepoint_lookback_months)
    earlier = replace(
        params, period=Period(start, params.period.start), levels_on=params.period.start
    )
    from beamaudit.api.review.run import monthly_history

    # the monthly medians alone: the earlier months' group tables, site values and flags are
    # not used (levels play no part in a monthly median)
    return monthly_history(events, params=earlier, catalogue=catalogue)


def execute_review(
    session: Session, params: ReviewParameters
) -> tuple[ReviewResult, list[dict[str, Any]]]:
    """Run the review core on the store's events; returns the result and the level sets used."""
    catalogue, rules = ensure_catalogue(session)
    pairs = level_sets_from_store(session)
    levels = [s for _, s in pairs]
    events, before = _period_and_lookback(session, params)
    history = _history(before, params, catalogue)
    result = review(
        events, levels=levels, params=params, history_df=history, catalogue=catalogue, rules=rules
    )
    used = [
        {"id": row.id, "name": row.name, "version": row.version, "kind": row.kind,
         "effective_from": row.effective_from.isoformat()}
        for row, _ in pairs
    ]  # fmt: skip
    return result, used


def _study_uids_in_flags(session: Session, flags: list[dict[str, Any]]) -> None:
    """Name the study of a flag on one exposure (the pages link to it) by its Study Instance UID."""
    concerns = [f.get("concerns") or {} for f in flags]
    event_ids = {
        int(c["event_id"]) for c in concerns if c.get("event_id") and not c.get("study_uid")
    }
    if not event_ids:
        return
    study_of = dict(
        session.execute(
            select(m.ExposureEventRow.id, m.Study.study_instance_uid)
            .join(m.Study, m.Study.id == m.ExposureEventRow.study_id)
            .where(m.ExposureEventRow.id.in_(event_ids))
        ).all()
    )
    for c in concerns:
        if c.get("event_id") and not c.get("study_uid") and study_of.get(int(c["event_id"])):
            c["study_uid"] = study_of[int(c["event_id"])]


def _check_scope(session: Session, params: ReviewParameters) -> dict[str, Any]:
    """The scope's names checked against the store (:class:`UnknownNameError` for one it does
    not know); the events' conditions the scope adds (on the room, device and exam type ids)."""
    rooms, devices = room_and_device_names(session)
    catalogue, _ = ensure_catalogue(session)
    known = {
        "sites": ("site", {site for _, site in rooms.values()}),
        "rooms": ("room", {name for name, _ in rooms.values()}),
        "devices": ("device", set(devices.values())),
        "exam_types": ("exam type", {t.exam_type for t in catalogue.types}),
    }
    for key, (what, names) in known.items():
        for name in getattr(params, key) or ():
            if name not in names:
                raise UnknownNameError(what, name, sorted(names))
    E = m.ExposureEventRow
    conditions: dict[str, Any] = {}
    if params.sites:
        conditions["sites"] = E.room_id.in_([i for i, (_, s) in rooms.items() if s in params.sites])
    if params.rooms:
        conditions["rooms"] = E.room_id.in_([i for i, (r, _) in rooms.items() if r in params.rooms])
    if params.devices:
        conditions["devices"] = E.device_id.in_(
            [i for i, d in devices.items() if d in params.devices]
        )
    if params.exam_types:
        conditions["exam_types"] = E.exam_type.in_(list(params.exam_types))
    return conditions


def _has_events(session: Session, params: ReviewParameters, scope: dict[str, Any]) -> bool:
    """Whether the period holds at least one event in the scope."""
    conditions, _, _ = _period_conditions(session, start=params.period.start, end=params.period.end)
    stmt = select(m.ExposureEventRow.id).where(*conditions, *scope.values()).limit(1)
    bounds = {"t0": _as_utc(params.period.start), "t1": _as_utc(params.period.end)}  # typed
    return session.execute(stmt, bounds).first() is not None


def run_review(
    sessions: sessionmaker[Session],
    params: ReviewParameters,
    *,
    kind: str = "monthly",
    actor: str = "cli",
) -> int:
    """Run and store a review; returns the :class:`ReviewRun` id (status ``done`` or ``failed``).

    The run keeps its scope (the filters of ``params``) and the process running it; its flags are
    stored as occurrences of their findings (:func:`beamaudit.api.runs.findings.store_flags`).

    Raises
    ------
    UnknownNameError
        The scope names a room, site, device or exam type the store does not know.
    NoEventsError
        The period holds no event in the scope. Neither stores anything.
    """
    from beamaudit.api.review import ReviewError

    with sessions.begin() as session:
        scope = _check_scope(session, params)
        parameters = params.to_json_dict()
        if not _has_events(session, params, scope):
            where = scope_words(scope_of(parameters))
            raise NoEventsError(f"no events in {params.period.label} ({where}): no review stored")
        run = m.ReviewRun(
            kind=kind,
            period=params.period.label,
            period_start=params.period.start,
            period_end=params.period.end,
            scope=scope_of(parameters),
            whole_site=not scope_of(parameters),
            parameters=parameters,
            software_version=__version__,
            status="running",
            runner=this_process(),
        )
        session.add(run)
        session.flush()
        run_id = run.id
        record_change(session, actor=actor, action="start", entity="review_run", entity_id=run_id,
                      after={"kind": kind, "period": run.period, "scope": run.scope})  # fmt: skip
    try:
        with sessions.begin() as session:
            result, used = execute_review(session, params)
            body = result.to_json_dict()
            _study_uids_in_flags(session, body["flags"])
            add_skin_dose_flags(session, body["flags"], parameters)
            done = session.get(m.ReviewRun, run_id)
            assert done is not None
            done.level_sets = used
            done.result = body
            done.status = "done"
            done.finished_at = utcnow()
            counts = store_flags(session, done, body["flags"])
            record_change(
                session, actor=actor, action="finish", entity="review_run", entity_id=run_id,
                after={"status": "done", "n_events": body["n_events"],
                       "findings": counts.as_dict()},
            )  # fmt: skip
    except Exception as exc:  # recorded on the run, never left 'running'; only ReviewError is ours
        with sessions.begin() as session:
            failed = session.get(m.ReviewRun, run_id)
            assert failed is not None
            failed.status = "failed"
            failed.error = (
                str(exc) if isinstance(exc, ReviewError) else f"{type(exc).__name__}: {exc}"
            )
            failed.finished_at = utcnow()
            record_change(
                session, actor=actor, action="fail", entity="review_run", entity_id=run_id,
                after={"status": "failed", "error": failed.error},
            )  # fmt: skip
        if not isinstance(exc, ReviewError):
            raise
    return run_id
