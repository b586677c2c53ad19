"""The bridge: parsed DICOM objects (``beamaudit.ingest``) become rows of the store.

One call of :meth:`Pipeline.store` takes the :class:`~beamaudit.ingest.events.ParseResult`
of one DICOM object and, in one transaction, stores its source object, study,
device, room, events and accumulations. Reconstruction by the beam and dose
model (``beamaudit.model``) runs afterwards over many events at once
(:mod:`beamaudit.api.intake.reconstruct`), so ingest stays fast.

Idempotence and double counting
-------------------------------
* The SOP Instance UID is the unit of idempotence: an object already stored is
  a *duplicate* and changes nothing. If its content hash differs from the stored
  one, the second object is recorded as an ingest error (same UID, different
  content) and the first is kept. A race between two ingest nodes on the same
  UID, or on a row two objects share (study, device, room, site), ends the same
  way: the unique constraint decides, the loser rolls back and tries again in a
  fresh transaction, which sees the winner's rows.
* An event is identified by its object and its index in it, so an event is
  never stored twice. Its ``event_key`` (the Irradiation Event UID, else
  ``<SOP Instance UID>#<index>``) is *not* unique: the images of one CT
  acquisition share it, and so do an image header and the dose-report event of
  the same irradiation. Reviews count an acquisition once (by
  ``acquisition_key``) and leave superseded header events out.
* A study whose exposures are described by a dose report takes its events from
  the report: an image-header event with the Irradiation Event UID of a report
  event (in any study), and every image-header event of a study whose modality
  family the study's report covers (projection x-ray for TID 10001, CT for
  TID 10011), is marked ``superseded`` and left out of reviews, whichever of the
  two arrived first. The rule is ``beamaudit.ingest.linking``'s, the only one.

Text that reaches the store
---------------------------
Control characters in what a device wrote (a NUL inside a Station Name, stray escape bytes)
are replaced by U+FFFD before anything is queried or stored: PostgreSQL refuses NUL in text and
JSON, and a stored value should never hide a character nobody can see.
"""

from __future__ import annotations

import contextlib
import dataclasses
import fcntl
import hashlib
import json
import logging
import operator
import os
import re
import threading
import time
from collections.abc import Iterable
from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING, Any, Literal, cast

from sqlalchemy import Table, or_, select, update
from sqlalchemy.exc import IntegrityError
from sqlalchemy.orm import Session, sessionmaker

from beamaudit.api.intake.skin import skin_geometry_of, studies_with_geometry, update_skin_doses
from beamaudit.api.store import models as m
from beamaudit.api.store.base import utcnow
from beamaudit.api.store.bulk import insert_rows, update_rows
from beamaudit.api.store.engine import (
    SQLITE_BUSY_TIMEOUT_MS,
    WRITER_LOCK_SUFFIX,
    database_files,
)
from beamaudit.ingest.errors import IngestError
from beamaudit.ingest.events import AccumulatedDose, ExposureEvent, FilterLayer, ParseResult
from beamaudit.ingest.linking import link_header_events_to_reports, report_covers

__all__ = [
    "CT_MODALITIES",
    "Pipeline",
    "StoreOutcome",
    "content_hash",
    "prepare",
    "printable",
    "report_covers",
    "result_fingerprint",
]

if TYPE_CHECKING:
    from beamaudit.api.intake.postprocess import Completion

log = logging.getLogger(__name__)

CT_MODALITIES = frozenset({"CT"})

#: ExposureEvent fields stored as columns of the same name
_EVENT_COLUMNS = tuple(
    name
    for name in m.ExposureEventRow.__table__.columns.keys()  # noqa: SIM118
    if name in ExposureEvent.__dataclass_fields__
    and name not in {"event_key", "source_kind", "event_index", "filters", "provenance", "notes"}
)

_event_column_values = operator.attrgetter(*_EVENT_COLUMNS)

_RECEPTOR_FIELDS = ("collimator_edges_px", "imager_pixel_spacing_mm", "detector_dimensions_mm")

StoreStatus = Literal["stored", "duplicate", "conflict"]

#: fresh transactions tried for one object whose insert lost a race to another ingest node
_RACE_ATTEMPTS = 5


@dataclass(slots=True)
class StoreOutcome:
    """What storing one object did."""

    status: StoreStatus
    sop_instance_uid: str
    events: int = 0
    event_ids: list[int] = field(default_factory=list)
    reason: str | None = None


def content_hash(data: bytes) -> str:
    """SHA-256 of some bytes (hex)."""
    return hashlib.sha256(data).hexdigest()


def result_fingerprint(result: ParseResult) -> str:
    """A fingerprint of what an object says about its exposures.

    Two copies of one object that arrive by different paths (a file, a C-STORE
    with another transfer syntax) have different bytes but the same
    fingerprint; an object that reuses a SOP Instance UID for other exposures
    has a different one. It is the SHA-256 of the JSON of every event's
    fields but ``provenance`` and ``notes`` (datetimes in ISO form, filters as
    dicts, as :meth:`ExposureEvent.as_dict` gives them), keys sorted, followed
    by the accumulations' reprs; built without copying the events. A field
    added to :class:`ExposureEvent` after the first stored objects
    (not in ``_FINGERPRINT_ALWAYS``) is left out while it is None, so adding
    a field never turns a re-sent object into a conflict.
    """
    return content_hash(_fingerprint_text(result).encode("utf-8"))


def _fingerprint_text(result: ParseResult) -> str:
    """The JSON text that :func:`result_fingerprint` hashes.

    The JSON of sorted keys: each event's fields are laid out in sorted order already, so
    ``json`` need not sort them, unless a field holds something other than its declared type
    (then everything is sorted as :func:`json.dumps` sorts it; the text is the same).
    """
    payload: list[dict[str, Any]] = []
    laid_out = True
    for event in result.events:
        fields, plain = _event_payload(event)
        payload.append(fields)
        laid_out = laid_out and plain
    payload.append({"accumulated": [repr(a) for a in result.accumulated]})
    return json.dumps(payload, sort_keys=not laid_out, default=str)


_FINGERPRINT_SKIP = frozenset({"provenance", "notes"})
_EVENT_FIELDS = tuple(f.name for f in dataclasses.fields(ExposureEvent))
_PAYLOAD_FIELDS = tuple(sorted(f for f in _EVENT_FIELDS if f not in _FINGERPRINT_SKIP))
#: the event fields every fingerprint holds, null or not: those of the first stored objects
#: (beamaudit 0.1.0 as first released); a field added since is written only when it has a value,
#: so an object stored by an older version and sent again keeps its fingerprint
_FINGERPRINT_ALWAYS = frozenset(
    [
        "accession_number",
        "acquisition_device_type",
        "acquisition_key",
        "acquisition_plane",
        "anode_material",
        "body_part",
        "body_part_thickness_mm",
        "collimator_edges_px",
        "ct_phantom_diameter_cm",
        "ct_pitch_factor",
        "ct_scan_length_mm",
        "ct_total_collimation_mm",
        "ctdivol_mgy",
        "dap_gy_cm2",
        "detector_dimensions_mm",
        "deviation_index",
        "device_observer_uid",
        "device_serial_number",
        "dlp_mgy_cm",
        "entrance_dose_derivation",
        "entrance_dose_mgy",
        "event_datetime",
        "event_index",
        "event_key",
        "event_type",
        "exposure_index",
        "exposure_mas",
        "exposure_time_ms",
        "field_area_cm2",
        "field_height_mm",
        "field_plane",
        "field_width_mm",
        "filter_type",
        "filters",
        "fluoro_mode",
        "focal_spot_mm",
        "grid",
        "hvl_mm_al",
        "imager_pixel_spacing_mm",
        "institution_name",
        "irradiation_duration_s",
        "irradiation_event_uid",
        "kvp_kv",
        "magnification_factor",
        "manufacturer",
        "modality",
        "modality_family",
        "model_name",
        "number_of_pulses",
        "organ_dose_mgy",
        "patient_age_years",
        "patient_height_m",
        "patient_pseudo_id",
        "patient_sex",
        "patient_weight_kg",
        "protocol_name",
        "pulse_rate_per_s",
        "reference_point_air_kerma_mgy",
        "series_description",
        "series_instance_uid",
        "sid_mm",
        "sop_class_uid",
        "sop_instance_uid",
        "source_kind",
        "source_to_entrance_mm",
        "source_to_isocenter_mm",
        "source_to_patient_mm",
        "source_to_reference_point_mm",
        "source_to_table_mm",
        "ssde_mgy",
        "station_name",
        "study_datetime",
        "study_description",
        "study_instance_uid",
        "target_exposure_index",
        "tube_current_ma",
        "view_position",
        "water_equivalent_diameter_mm",
        "xray_output_mgy_per_mas",
    ]
)
#: fields added since, left out of the fingerprint while they are None
_FINGERPRINT_WHEN_SET = tuple(f for f in _PAYLOAD_FIELDS if f not in _FINGERPRINT_ALWAYS)
_payload_values = operator.attrgetter(*_PAYLOAD_FIELDS)
_DATETIME_FIELDS = ("study_datetime", "event_datetime")
#: what JSON writes without nested objects; by ExposureEvent's types only ``filters`` (a
#: tuple of FilterLayer, whose dicts' keys come sorted) holds anything else
_SCALARS = (str, int, float, type(None), tuple)


#: fields added to ExposureEvent after the versions that wrote every field's value (null
#: included): those versions knew nothing of them, so they are left out while None
_ADDED_AFTER_EVERY_FIELD = frozenset({"mammography_intent"})


def _every_field_fingerprint(result: ParseResult) -> str:
    """The fingerprint as versions before ``_FINGERPRINT_WHEN_SET`` wrote it: every field those
    versions had, null or not (only asked when the fingerprint differs from a stored one)."""
    payload: list[dict[str, Any]] = [
        {
            k: v
            for k, v in e.as_dict().items()
            if k not in _FINGERPRINT_SKIP and not (k in _ADDED_AFTER_EVERY_FIELD and v is None)
        }
        for e in result.events
    ]
    payload.append({"accumulated": [repr(a) for a in result.accumulated]})
    return content_hash(json.dumps(payload, sort_keys=True, default=str).encode("utf-8"))


def _event_payload(event: ExposureEvent) -> tuple[dict[str, Any], bool]:
    """``as_dict()`` of ``event`` without provenance and notes, keys sorted, as JSON would
    write it; and whether every field held its declared type (no nested object to sort)."""
    out = dict(zip(_PAYLOAD_FIELDS, _payload_values(event), strict=True))
    for f in _FINGERPRINT_WHEN_SET:
        if out[f] is None:
            del out[f]
    for f in _DATETIME_FIELDS:
        value = out[f]
        if value is not None:
            out[f] = value.isoformat()
    filters = out["filters"]
    out["filters"] = [_plain(x) for x in filters]
    plain = all(type(x) is FilterLayer for x in filters)
    for f, value in out.items():
        if not isinstance(value, _SCALARS) and f != "filters":
            out[f] = _plain(value)  # not by the types, but written as as_dict() would
            plain = False
        elif type(value) is tuple and not all(isinstance(v, _SCALARS) for v in value):
            plain = False
    return out, plain


def _plain(value: Any) -> Any:
    """What :func:`dataclasses.asdict` makes of ``value`` (without the deep copies)."""
    if dataclasses.is_dataclass(value) and not isinstance(value, type):
        return {f.name: _plain(getattr(value, f.name)) for f in dataclasses.fields(value)}
    if isinstance(value, list | tuple):
        return type(value)(_plain(v) for v in value)
    if isinstance(value, dict):
        return {_plain(k): _plain(v) for k, v in value.items()}
    return value


def _prepared_sha(result: ParseResult, sha256: str | None) -> str:
    fingerprint = prepare(result)
    return sha256 or fingerprint


def prepare(result: ParseResult) -> str:
    """Make ``result`` safe to store and return its fingerprint.

    Replaces control characters in every text (see :func:`printable`) and
    computes :func:`result_fingerprint`. Parser processes call it, so the
    storing process only writes.
    """
    text = _fingerprint_text(result)
    if _ESCAPED_CONTROL.search(text) or _CONTROL.search(_unfingerprinted_text(result)):
        _make_printable(result)  # rare: walk every field, then fingerprint what is stored
        text = _fingerprint_text(result)
    return content_hash(text.encode("utf-8"))


_CONTROL = re.compile(r"[\x00-\x08\x0b\x0c\x0e-\x1f\x7f]")  # C0 controls but TAB, LF, CR

#: the same characters as the fingerprint's JSON writes them: ``\b``, ``\f`` and ``\u00XX``
#: escapes of the event fields' text, and ``\xXX`` escapes (backslash doubled by JSON) inside
#: the accumulations' reprs. A text that merely contains such a sequence (a literal backslash
#: before ``b``, say) takes the slow path too, which is harmless.
_ESCAPED_CONTROL = re.compile(
    r"\\[bf]|\\u00(?:0[0-8bcef]|1[0-9a-f]|7f)|\\\\x(?:0[0-8bcef]|1[0-9a-f]|7f)"
)


def _unfingerprinted_text(result: ParseResult) -> str:
    """Every text of ``result`` the fingerprint leaves out, joined (for the control check)."""
    source = result.source
    parts: list[str] = [
        source.sop_instance_uid,
        source.sop_class_uid,
        source.kind,
        source.modality or "",
        source.study_instance_uid or "",
        source.series_instance_uid or "",
        *result.warnings,
    ]
    for event in result.events:
        parts.extend(event.provenance)
        parts.extend(event.provenance.values())
        parts.extend(event.notes)
    return "\n".join(parts)


def printable(text: str) -> str:
    """``text`` with every control character but TAB, LF and CR replaced by U+FFFD."""
    return _CONTROL.sub("\ufffd", text) if _CONTROL.search(text) else text


def _printable_value(value: Any) -> Any:
    if isinstance(value, str):
        return printable(value)
    if isinstance(value, list):
        return [_printable_value(v) for v in value]
    if isinstance(value, tuple):
        return tuple(_printable_value(v) for v in value)
    if isinstance(value, dict):
        return {_printable_value(k): _printable_value(v) for k, v in value.items()}
    if dataclasses.is_dataclass(value) and not isinstance(value, type):
        _make_printable(value)
    return value


def _make_printable(obj: Any) -> None:
    for f in dataclasses.fields(obj):
        value = getattr(obj, f.name)
        cleaned = _printable_value(value)
        if cleaned is not value and cleaned != value:
            if type(obj).__dataclass_params__.frozen:
                object.__setattr__(obj, f.name, cleaned)
            else:
                setattr(obj, f.name, cleaned)


_WRITER_TURNS: dict[str, WriterTurn] = {}
_WRITER_TURNS_GUARD = threading.Lock()
#: longest sleep between two looks at a busy writer's lock (SQLite's own handler sleeps 100 ms)
_TURN_POLL_MAX_S = 0.005


class WriterTurn:
    """The turn at one SQLite database's writer: this process's threads in order (a re-entrant
    lock), and the processes in turn by an exclusive ``flock(2)`` on a file of their own beside
    the database (``<database>-writer.lock``).

    ``flock`` belongs to the open file, never to the database's own files: SQLite's POSIX locks
    on those are the process's, and a second descriptor of them closed would drop them. A
    process that ends, however it ends, lets go of its turn (the kernel closes its files). A
    turn waited for longer than SQLite's busy timeout is given up, and SQLite's own handler
    decides; so is the file lock when the file cannot be made (a read-only folder).
    """

    def __init__(self, database: Path | None) -> None:
        #: the lock file; ``None`` for a database in memory (one process: its threads' lock only)
        self.path = database.with_name(database.name + WRITER_LOCK_SUFFIX) if database else None
        self._threads = threading.RLock()
        self._depth = 0
        self._fd: int | None = None
        self._pid = 0
        self._locked = False

    def __enter__(self) -> WriterTurn:
        self._threads.acquire()
        if self._depth == 0:
            self._locked = self._take_file()
        self._depth += 1
        return self

    def __exit__(self, *exc: object) -> None:
        self._depth -= 1
        if self._depth == 0 and self._locked and self._fd is not None:
            fcntl.flock(self._fd, fcntl.LOCK_UN)
            self._locked = False
        self._threads.release()

    def _descriptor(self) -> int | None:
        if self.path is None:
            return None
        if self._fd is None or self._pid != os.getpid():  # a forked child opens its own
            try:
                self._fd = os.open(self.path, os.O_RDWR | os.O_CREAT | os.O_CLOEXEC, 0o600)
            except OSError as exc:
                log.warning("writers take turns by SQLite alone: cannot open %s (%s)",
                            self.path, exc.strerror or exc)  # fmt: skip
                self._fd = None
            self._pid = os.getpid()
        return self._fd

    def _take_file(self) -> bool:
        fd = self._descriptor()
        if fd is None:
            return False
        deadline = time.monotonic() + SQLITE_BUSY_TIMEOUT_MS / 1000
        pause = 0.0005
        while True:
            try:
                fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
                return True
            except BlockingIOError:
                if time.monotonic() >= deadline:
                    return False
                time.sleep(pause)
                pause = min(pause * 2, _TURN_POLL_MAX_S)


def writer_turn(sessions: sessionmaker[Session]) -> contextlib.AbstractContextManager[Any]:
    """The turn of this process at a SQLite store's one writer (a no-op elsewhere).

    SQLite lets one transaction write at a time; a writer that finds the database locked waits
    in SQLite's busy handler, which polls with growing sleeps (up to 100 ms each), so under a
    burst of writers some wait many times the others' share (the uploads' tail in
    ``bench_load.py``). Writers that store objects take their turns here instead
    (:class:`WriterTurn`): threads of one process in order, processes by a file lock they wait
    on in steps of at most 5 ms. A database in memory has one process: its threads' lock only.
    """
    bind = sessions.kw.get("bind")
    url = getattr(bind, "url", None)
    if url is None or url.get_backend_name() != "sqlite":
        return contextlib.nullcontext()
    key = str(url)
    with _WRITER_TURNS_GUARD:
        if key not in _WRITER_TURNS:
            files = database_files(bind)
            _WRITER_TURNS[key] = WriterTurn(files[0] if files else None)
        return _WRITER_TURNS[key]


class Pipeline:
    """Stores parsed objects; one instance per process, sharing one session factory.

    With a ``completion`` (:class:`beamaudit.api.intake.postprocess.Completion`) every event is
    stored with its exam type and reconstructed figures, computed in the transaction that
    stores it; without one, events are stored as read and
    :func:`beamaudit.api.intake.postprocess.process_new_events` completes them afterwards.
    """

    def __init__(
        self, session_factory: sessionmaker[Session], *, completion: Completion | None = None
    ) -> None:
        self._sessions = session_factory
        self.completion = completion

    @property
    def sessions(self) -> sessionmaker[Session]:
        """The session factory the pipeline stores through."""
        return self._sessions

    # -- errors ---------------------------------------------------------------------------
    def record_error(
        self,
        error: IngestError,
        *,
        received_via: str,
        source: str | None = None,
        sop_instance_uid: str | None = None,
    ) -> int:
        """Record an input we could not use; returns the error's id."""
        with self._sessions.begin() as session:
            row = m.IngestError(
                received_via=received_via,
                source=printable(error.source or source or "(unknown)"),
                sop_instance_uid=printable(sop_instance_uid) if sop_instance_uid else None,
                code=error.code,
                reason=printable(error.reason),
            )
            session.add(row)
            session.flush()
            return row.id

    def record_errors(
        self, errors: Iterable[tuple[IngestError, str | None]], *, received_via: str
    ) -> None:
        """Record many errors in one transaction (``(error, source)`` pairs)."""
        with self._sessions.begin() as session:
            for error, source in errors:
                session.add(
                    m.IngestError(
                        received_via=received_via,
                        source=printable(error.source or source or "(unknown)"),
                        code=error.code,
                        reason=printable(error.reason),
                    )
                )

    # -- objects --------------------------------------------------------------------------
    def store(
        self,
        result: ParseResult,
        *,
        received_via: str,
        received_from: str | None = None,
        sha256: str | None = None,
    ) -> StoreOutcome:
        """Store one parsed object durably (committed when this returns)."""
        outcomes = self.store_many([(result, received_from, sha256)], received_via=received_via)
        return outcomes[0]

    def store_many(
        self,
        items: list[tuple[ParseResult, str | None, str | None]],
        *,
        received_via: str,
        prepared: bool = False,
    ) -> list[StoreOutcome]:
        """Store several objects in one transaction; falls back to one by one on a conflict.

        ``items`` holds ``(result, received_from, sha256)`` triples. Every object
        is stored or reported (duplicate / conflict); none is lost. ``prepared``
        says the results already went through :func:`prepare` (a parser process
        did it) and carry their fingerprints as ``sha256``.
        """
        if not prepared:
            items = [(r, src, _prepared_sha(r, sha)) for r, src, sha in items]
        if len(items) == 1:
            return [self._store_alone(items[0], received_via)]
        try:
            with writer_turn(self._sessions), self._sessions.begin() as session:
                return _BatchWriter(session, received_via, self.completion).store(items)
        except IntegrityError:
            return [self._store_alone(item, received_via) for item in items]

    def _store_alone(
        self, item: tuple[ParseResult, str | None, str | None], received_via: str
    ) -> StoreOutcome:
        """One object in its own transaction, tried again after losing a race.

        Another ingest node may commit the same object, or a row this object shares with others
        (its study, device, room or site), between our look-up and our insert: the unique
        constraint refuses our insert. A fresh transaction then sees the winner's rows, and the
        object is stored beside them, or found a duplicate (or a conflict) of the winner's.
        """
        result = item[0]
        detail = ""
        for _ in range(_RACE_ATTEMPTS):
            try:
                with writer_turn(self._sessions), self._sessions.begin() as session:
                    return _BatchWriter(session, received_via, self.completion).store([item])[0]
            except IntegrityError as exc:
                detail = str(exc.orig).splitlines()[0] if exc.orig is not None else str(exc)
        log.error(
            "storing %s lost %d races in a row: %s",
            result.source.sop_instance_uid,
            _RACE_ATTEMPTS,
            detail,
        )
        return StoreOutcome(
            "conflict",
            result.source.sop_instance_uid,
            reason=f"refused by the store's unique constraints {_RACE_ATTEMPTS} times: {detail}",
        )


_STUDY_FIELDS = (
    "accession_number",
    "study_datetime",
    "study_description",
    "patient_pseudo_id",
    "patient_age_years",
    "patient_sex",
    "patient_weight_kg",
    "patient_height_m",
)

#: keys of the lookup rows for device identity (the devices table's unique constraint)
_DEVICE_KEY = ("manufacturer", "model_name", "serial_number", "station_name")

_ACCUMULATED_COLUMNS = tuple(
    name
    for name in m.AccumulatedDoseRow.__table__.columns.keys()  # noqa: SIM118
    if name in AccumulatedDose.__dataclass_fields__
    and name not in {"study_id", "sop_instance_uid", "id"}
)
_ACCUMULATED_DETAILS = tuple(
    name
    for name in AccumulatedDose.__dataclass_fields__
    if name not in _ACCUMULATED_COLUMNS and name not in {"sop_instance_uid", "study_instance_uid"}
)

#: parameters per IN (...) list: below SQLite's and PostgreSQL's limits
_IN_CHUNK = 500


def _chunks(values: list[Any], size: int = _IN_CHUNK) -> Iterable[list[Any]]:
    for start in range(0, len(values), size):
        yield values[start : start + size]


def _table(model: type[Any]) -> Table:
    """The Core table of a mapped class (typed for set-wise statements)."""
    return cast(Table, model.__table__)


class _BatchWriter:
    """Stores a batch of prepared objects in one transaction with set-wise statements.

    Look-ups are made once per batch (which objects are stored already, which studies and
    devices exist), rows are inserted with one multi-row statement per table, and the linking of
    image headers with dose reports runs once per study that has a report. Devices, rooms and
    sites seen for the first time are created through the ORM (rare: once per device).
    """

    def __init__(
        self, session: Session, received_via: str, completion: Completion | None = None
    ) -> None:
        self.session = session
        self.conn = session.connection()
        self.received_via = received_via
        self.completion = completion
        self.now = utcnow()

    def store(self, items: list[tuple[ParseResult, str | None, str | None]]) -> list[StoreOutcome]:
        outcomes: list[StoreOutcome | None] = [None] * len(items)
        existing = self._existing_objects([r.source.sop_instance_uid for r, _, _ in items])
        fresh: list[int] = []
        for i, (result, _, sha256) in enumerate(items):
            uid = result.source.sop_instance_uid
            if uid in existing:
                stored_sha = existing[uid]
                if (
                    sha256
                    and stored_sha
                    and stored_sha != sha256
                    and stored_sha != _every_field_fingerprint(result)
                ):
                    outcomes[i] = StoreOutcome(
                        "conflict",
                        uid,
                        reason=(
                            f"SOP Instance UID {uid} is already stored with different content; "
                            "the first object was kept"
                        ),
                    )
                else:
                    outcomes[i] = StoreOutcome("duplicate", uid)
                continue
            existing[uid] = sha256  # a second copy later in this batch is a duplicate
            fresh.append(i)
        if fresh:
            for i, outcome in zip(fresh, self._insert([items[i] for i in fresh]), strict=True):
                outcomes[i] = outcome
        return [o for o in outcomes if o is not None]

    # -- look-ups -------------------------------------------------------------------------
    def _existing_objects(self, uids: list[str]) -> dict[str, str | None]:
        t = _table(m.SourceObjectRow)
        found: dict[str, str | None] = {}
        for chunk in _chunks(sorted(set(uids))):
            for uid, sha in self.conn.execute(
                select(t.c.sop_instance_uid, t.c.content_sha256).where(
                    t.c.sop_instance_uid.in_(chunk)
                )
            ):
                found[uid] = sha
        return found

    def _studies(self, results: list[ParseResult]) -> dict[str, int]:
        """Study ids by Study Instance UID: existing studies completed, new ones inserted."""
        t = _table(m.Study)
        uids = sorted({r.source.study_instance_uid for r in results if r.source.study_instance_uid})
        current: dict[str, dict[str, Any]] = {}
        for chunk in _chunks(uids):
            for row in self.conn.execute(
                select(
                    t.c.id,
                    t.c.study_instance_uid,
                    t.c.has_dose_report,
                    *(t.c[n] for n in _STUDY_FIELDS),
                ).where(t.c.study_instance_uid.in_(chunk))
            ).mappings():
                current[row["study_instance_uid"]] = dict(row)
        changed: set[str] = set()
        new: dict[str, dict[str, Any]] = {}
        for result in results:
            uid = result.source.study_instance_uid
            if not uid:
                continue
            if uid in current:
                study, is_new = current[uid], False
            else:
                study = new.setdefault(
                    uid,
                    {"study_instance_uid": uid, "has_dose_report": False, "created_at": self.now}
                    | dict.fromkeys(_STUDY_FIELDS),
                )
                is_new = True
            first = result.events[0] if result.events else None
            if first is not None:
                for name in _STUDY_FIELDS:
                    value = getattr(first, name)
                    if value is not None and study[name] is None:
                        study[name] = value
                        if not is_new:
                            changed.add(uid)
            if result.source.kind == "rdsr" and not study["has_dose_report"]:
                study["has_dose_report"] = True
                if not is_new:
                    changed.add(uid)
        ids = {uid: row["id"] for uid, row in current.items()}
        if changed:
            update_rows(
                self.conn,
                t,
                [
                    {"id": current[uid]["id"]}
                    | {n: current[uid][n] for n in (*_STUDY_FIELDS, "has_dose_report")}
                    for uid in sorted(changed)
                ],
            )
        if new:
            insert_rows(self.conn, t, list(new.values()))
            ids.update(self._ids_by(t.c.study_instance_uid, list(new)))
        self.with_report = {uid for uid, row in (current | new).items() if row["has_dose_report"]}
        return ids

    def _ids_by(self, column: Any, keys: list[str]) -> dict[str, int]:
        """Ids of the rows just inserted, by their unique key (multi-row inserts return none)."""
        table = column.table
        ids: dict[str, int] = {}
        for chunk in _chunks(keys):
            for key, row_id in self.conn.execute(
                select(column, table.c.id).where(column.in_(chunk))
            ):
                ids[key] = row_id
        return ids

    def _device_rooms(
        self, events: Iterable[ExposureEvent]
    ) -> dict[tuple[str, str, str, str], tuple[int, int]]:
        """(device id, room id) per device key; devices, rooms and sites created when new."""
        keys: dict[tuple[str, str, str, str], ExposureEvent] = {}
        for event in events:
            key = _device_key(event)
            if any(key):
                keys.setdefault(key, event)
        out: dict[tuple[str, str, str, str], tuple[int, int]] = {}
        if not keys:
            return out
        t = _table(m.Device)
        stations = sorted({k[3] for k in keys})
        for chunk in _chunks(stations):
            for row in self.conn.execute(
                select(t.c.id, t.c.room_id, *(t.c[n] for n in _DEVICE_KEY)).where(
                    t.c.station_name.in_(chunk)
                )
            ):
                key = (row.manufacturer, row.model_name, row.serial_number, row.station_name)
                if key in keys and row.room_id is not None:
                    out[key] = (row.id, row.room_id)
        for key, event in keys.items():
            if key not in out:
                device, room = _device_and_room(self.session, event)
                out[key] = (device.id, room.id)
        return out

    # -- inserts --------------------------------------------------------------------------
    def _insert(
        self, items: list[tuple[ParseResult, str | None, str | None]]
    ) -> list[StoreOutcome]:
        results = [r for r, _, _ in items]
        study_ids = self._studies(results)
        devices = self._device_rooms(e for r in results for e in r.events)
        so = _table(m.SourceObjectRow)
        source_rows = [
            {
                "sop_instance_uid": r.source.sop_instance_uid,
                "sop_class_uid": r.source.sop_class_uid,
                "kind": r.source.kind,
                "modality": r.source.modality,
                "study_id": study_ids.get(r.source.study_instance_uid or ""),
                "series_instance_uid": r.source.series_instance_uid,
                "received_via": self.received_via,
                "received_from": received_from,
                "content_sha256": sha256,
                "received_at": self.now,
            }
            for r, received_from, sha256 in items
        ]
        insert_rows(self.conn, so, source_rows)
        by_uid = self._ids_by(
            so.c.sop_instance_uid, [str(r["sop_instance_uid"]) for r in source_rows]
        )
        source_ids = [by_uid[str(r["sop_instance_uid"])] for r in source_rows]
        event_rows: list[dict[str, Any]] = []
        owners: list[int] = []  # index of the item each event row belongs to
        acc_rows: list[dict[str, Any]] = []
        for k, (result, source_id) in enumerate(zip(results, source_ids, strict=True)):
            study_id = study_ids.get(result.source.study_instance_uid or "")
            for event in result.events:
                device_id, room_id = devices.get(_device_key(event), (None, None))
                event_rows.append(
                    _event_row(event, result, source_id, study_id, device_id, room_id, self.now)
                )
                owners.append(k)
            acc_rows.extend(
                _accumulated_row(acc, source_id, study_id) for acc in result.accumulated
            )
        event_ids: list[int] = []
        if event_rows:
            ev = _table(m.ExposureEventRow)
            if self.completion is not None:
                self.completion.complete(self.session, event_rows)
            insert_rows(self.conn, ev, event_rows)
            found: dict[tuple[int, int], int] = {}
            for chunk in _chunks(source_ids):
                for row in self.conn.execute(
                    select(ev.c.id, ev.c.source_object_id, ev.c.event_index).where(
                        ev.c.source_object_id.in_(chunk)
                    )
                ):
                    found[(row.source_object_id, row.event_index)] = row.id
            event_ids = [found[(r["source_object_id"], r["event_index"])] for r in event_rows]
        if acc_rows:
            insert_rows(self.conn, _table(m.AccumulatedDoseRow), acc_rows)
        _link(
            self.conn,
            sorted({study_ids[uid] for uid in self.with_report if uid in study_ids}),
            sorted({e.irradiation_event_uid or "" for r in results for e in r.events} - {""}),
        )
        # the skin-dose maps of fluoroscopy studies with geometry, like the other figures: here
        # with a completion, else by process_new_events
        skin_studies = studies_with_geometry(event_rows) if self.completion is not None else ()
        if skin_studies:
            update_skin_doses(self.session, skin_studies)
        per_item: list[list[int]] = [[] for _ in items]
        for k, event_id in zip(owners, event_ids, strict=True):
            per_item[k].append(event_id)
        return [
            StoreOutcome("stored", r.source.sop_instance_uid, events=len(ids), event_ids=ids)
            for r, ids in zip(results, per_item, strict=True)
        ]


def _device_key(event: ExposureEvent) -> tuple[str, str, str, str]:
    return (
        event.manufacturer or "",
        event.model_name or "",
        event.device_serial_number or "",
        event.station_name or "",
    )


def _event_row(
    event: ExposureEvent,
    result: ParseResult,
    source_object_id: int,
    study_id: int | None,
    device_id: int | None,
    room_id: int | None,
    now: Any,
) -> dict[str, Any]:
    row: dict[str, Any] = dict(zip(_EVENT_COLUMNS, _event_column_values(event), strict=True))
    receptor = {
        name: list(getattr(event, name))
        for name in _RECEPTOR_FIELDS
        if getattr(event, name) is not None
    }
    row.update(
        event_key=event.event_key,
        source_object_id=source_object_id,
        study_id=study_id,
        device_id=device_id,
        room_id=room_id,
        source_kind=event.source_kind,
        event_index=event.event_index,
        superseded=False,
        filters=[{"material": f.material, "thickness_mm": f.thickness_mm} for f in event.filters]
        or None,
        receptor_geometry=receptor or None,
        skin_geometry=skin_geometry_of(event),
        provenance=dict(event.provenance),
        notes=list(event.notes) + list(result.warnings if event.event_index == 0 else []),
        stored_at=now,
    )
    return row


def _accumulated_row(
    acc: AccumulatedDose, source_object_id: int, study_id: int | None
) -> dict[str, Any]:
    row: dict[str, Any] = {name: getattr(acc, name) for name in _ACCUMULATED_COLUMNS}
    row.update(
        source_object_id=source_object_id,
        study_id=study_id,
        details={name: getattr(acc, name) for name in _ACCUMULATED_DETAILS},
    )
    return row


def _device_and_room(session: Session, event: ExposureEvent) -> tuple[m.Device, m.Room]:
    """The device of ``event`` and its room, created when seen for the first time."""
    key = dict(zip(_DEVICE_KEY, _device_key(event), strict=True))
    device = session.scalar(select(m.Device).filter_by(**key))
    if device is None:
        device = m.Device(
            **key,
            device_observer_uid=event.device_observer_uid,
            institution_name=event.institution_name,
        )
        session.add(device)
        session.flush()
    room = session.get(m.Room, device.room_id) if device.room_id else None
    if room is None:
        room = _default_room(session, event)
        device.room_id = room.id
        session.flush()
    return device, room


def _default_room(session: Session, event: ExposureEvent) -> m.Room:
    """A device seen for the first time gets the room named by its station name.

    Physicists can rename rooms and move devices later (API and CLI); the
    default keeps every event attached to some room, never dropped.
    """
    site_name = event.institution_name or "(unnamed site)"
    site = session.scalar(select(m.Site).where(m.Site.name == site_name))
    if site is None:
        site = m.Site(name=site_name)
        session.add(site)
        session.flush()
    room_name = (
        event.station_name
        or " ".join(x for x in (event.manufacturer, event.model_name) if x)
        or "(unnamed room)"
    )
    room = session.scalar(select(m.Room).filter_by(site_id=site.id, name=room_name))
    if room is None:
        room = m.Room(site_id=site.id, name=room_name, modality=event.modality)
        session.add(room)
        session.flush()
    return room


def _link(conn: Any, study_ids: list[int], event_uids: list[str]) -> None:
    """Mark the image-header events a dose report describes (``ingest/linking.py``'s rule).

    The rule is given every stored event it may link after a batch: those of the batch's studies
    that have a dose report, and those sharing an Irradiation Event UID of the batch's events with
    a report event (whichever arrived first, in any study).
    """
    ev, so, st = _table(m.ExposureEventRow), _table(m.SourceObjectRow), _table(m.Study)
    rows: dict[int, Any] = {}

    def read(*where: Any) -> None:
        stmt = (
            select(
                ev.c.id,
                ev.c.source_kind,
                ev.c.event_index,
                ev.c.event_key,
                ev.c.modality,
                ev.c.modality_family,
                ev.c.irradiation_event_uid,
                so.c.sop_instance_uid,
                st.c.study_instance_uid,
            )
            .join(so, so.c.id == ev.c.source_object_id)
            .outerjoin(st, st.c.id == ev.c.study_id)
            .where(or_(ev.c.source_kind == "rdsr", ev.c.superseded.is_(False)), *where)
        )
        rows.update((row.id, row) for row in conn.execute(stmt))

    for chunk in _chunks(study_ids):
        read(ev.c.study_id.in_(chunk))
    uids = [u for u in event_uids if u]
    for chunk in _chunks(uids):  # event_key is the Irradiation Event UID when there is one
        read(ev.c.event_key.in_(chunk), ev.c.source_kind == "rdsr")
    reported = sorted(
        {r.irradiation_event_uid for r in rows.values() if r.source_kind == "rdsr"} & set(uids)
    )
    for chunk in _chunks(reported):
        read(ev.c.event_key.in_(chunk), ev.c.source_kind == "image_header")
    by_event = {(r.sop_instance_uid, r.event_index): r.id for r in rows.values()}
    superseded = sorted(
        by_event[(link.sop_instance_uid, link.event_index)]
        for link in link_header_events_to_reports(rows.values())
    )
    for chunk in _chunks(superseded):
        conn.execute(update(ev).where(ev.c.id.in_(chunk)).values(superseded=True))
