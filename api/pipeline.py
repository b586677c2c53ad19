"""The bridge: parsed DICOM objects (``beamaudit.ingest``) become rows of the store.

One call of :meth:`Pipeline.store` takes the :class:`~beamaudit.ingest.events.ParseResult`
of one DICOM object and, in one transaction, stores its source object, study,
device, room, events and accumulations. Reconstruction by the beam and dose
model (``beamaudit.model``) runs afterwards over many events at once
(:mod:`beamaudit.api.reconstruct`), so ingest stays fast.

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
  the report: every image-header event of that study whose modality the
  report covers (projection x-ray for TID 10001, CT for TID 10011) is marked
  ``superseded`` and left out of reviews, whichever of the two arrived first.

Text that reaches the store
---------------------------
Control characters in what a device wrote (a NUL inside a Station Name, stray escape bytes)
are replaced by U+FFFD before anything is queried or stored: PostgreSQL refuses NUL in text and
JSON, and a stored value should never hide a character nobody can see.
"""

from __future__ import annotations

import dataclasses
import hashlib
import json
import logging
import re
from collections.abc import Iterable
from dataclasses import dataclass, field
from typing import Any, Literal

from sqlalchemy import select, update
from sqlalchemy.exc import IntegrityError
from sqlalchemy.orm import Session, sessionmaker

from beamaudit.api.store import models as m
from beamaudit.ingest.errors import IngestError
from beamaudit.ingest.events import AccumulatedDose, ExposureEvent, ParseResult

__all__ = [
    "CT_MODALITIES",
    "Pipeline",
    "StoreOutcome",
    "content_hash",
    "printable",
    "report_covers",
    "result_fingerprint",
]

log = logging.getLogger(__name__)

CT_MODALITIES = frozenset({"CT"})
PROJECTION_MODALITIES = frozenset({"CR", "DX", "MG", "RF", "XA", "DR", "PX"})

#: ExposureEvent fields stored as columns of the same name
_EVENT_COLUMNS = tuple(
    name
    for name in m.ExposureEventRow.__table__.columns.keys()  # noqa: SIM118
    if name in ExposureEvent.__dataclass_fields__
    and name not in {"event_key", "source_kind", "event_index", "filters", "provenance", "notes"}
)

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
    has a different one.
    """
    payload = [
        {k: v for k, v in e.as_dict().items() if k not in {"provenance", "notes"}}
        for e in result.events
    ]
    payload.append({"accumulated": [repr(a) for a in result.accumulated]})
    return content_hash(json.dumps(payload, sort_keys=True, default=str).encode("utf-8"))


_CONTROL = re.compile(r"[\x00-\x08\x0b\x0c\x0e-\x1f\x7f]")  # C0 controls but TAB, LF, CR


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


def report_covers(report_modalities: Iterable[str | None], header_modality: str | None) -> bool:
    """Whether a dose report with ``report_modalities`` describes an image-header event.

    A CT dose report (TID 10011) covers CT headers; a projection report (TID 10001)
    covers projection headers (CR, DX, MG, RF, XA).
    """
    mods = {x for x in report_modalities if x}
    if header_modality in CT_MODALITIES:
        return bool(mods & CT_MODALITIES)
    return bool(mods - CT_MODALITIES) or not mods


class Pipeline:
    """Stores parsed objects; one instance per process, sharing one session factory."""

    def __init__(self, session_factory: sessionmaker[Session]) -> None:
        self._sessions = session_factory

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
    ) -> list[StoreOutcome]:
        """Store several objects in one transaction; falls back to one by one on a conflict.

        ``items`` holds ``(result, received_from, sha256)`` triples. Every object
        is stored or reported (duplicate / conflict); none is lost.
        """
        for result, _, _ in items:
            _make_printable(result)
        if len(items) == 1:
            return [self._store_alone(items[0], received_via)]
        try:
            with self._sessions.begin() as session:
                return [
                    self._store_one(session, r, received_via, src, sha) for r, src, sha in items
                ]
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
        result, received_from, sha256 = item
        detail = ""
        for _ in range(_RACE_ATTEMPTS):
            try:
                with self._sessions.begin() as session:
                    return self._store_one(session, result, received_via, received_from, sha256)
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

    def _store_one(
        self,
        session: Session,
        result: ParseResult,
        received_via: str,
        received_from: str | None,
        sha256: str | None,
    ) -> StoreOutcome:
        src = result.source
        sha256 = sha256 or result_fingerprint(result)
        existing = session.execute(
            select(m.SourceObjectRow.id, m.SourceObjectRow.content_sha256).where(
                m.SourceObjectRow.sop_instance_uid == src.sop_instance_uid
            )
        ).first()
        if existing is not None:
            if sha256 and existing.content_sha256 and existing.content_sha256 != sha256:
                return StoreOutcome(
                    "conflict",
                    src.sop_instance_uid,
                    reason=(
                        f"SOP Instance UID {src.sop_instance_uid} is already stored with "
                        "different content; the first object was kept"
                    ),
                )
            return StoreOutcome("duplicate", src.sop_instance_uid)

        study = self._study(session, result)
        source_row = m.SourceObjectRow(
            sop_instance_uid=src.sop_instance_uid,
            sop_class_uid=src.sop_class_uid,
            kind=src.kind,
            modality=src.modality,
            study_id=study.id if study else None,
            series_instance_uid=src.series_instance_uid,
            received_via=received_via,
            received_from=received_from,
            content_sha256=sha256,
        )
        session.add(source_row)
        session.flush()

        rows = []
        for event in result.events:
            device, room = self._device_and_room(session, event)
            row = m.ExposureEventRow(
                event_key=event.event_key,
                source_object_id=source_row.id,
                study_id=study.id if study else None,
                device_id=device.id if device else None,
                room_id=room.id if room else None,
                source_kind=event.source_kind,
                event_index=event.event_index,
                filters=[
                    {"material": f.material, "thickness_mm": f.thickness_mm} for f in event.filters
                ]
                or None,
                receptor_geometry={
                    name: list(getattr(event, name))
                    for name in _RECEPTOR_FIELDS
                    if getattr(event, name) is not None
                }
                or None,
                provenance=dict(event.provenance),
                notes=list(event.notes) + list(result.warnings if event.event_index == 0 else []),
                **{name: getattr(event, name) for name in _EVENT_COLUMNS},
            )
            rows.append(row)
        session.add_all(rows)
        for acc in result.accumulated:
            session.add(self._accumulated_row(acc, source_row.id, study.id if study else None))
        session.flush()
        if study is not None:
            self._link(session, study, result)
        return StoreOutcome(
            "stored", src.sop_instance_uid, events=len(rows), event_ids=[r.id for r in rows]
        )

    # -- helpers --------------------------------------------------------------------------
    def _study(self, session: Session, result: ParseResult) -> m.Study | None:
        uid = result.source.study_instance_uid
        if not uid:
            return None
        study = session.scalar(select(m.Study).where(m.Study.study_instance_uid == uid))
        first = result.events[0] if result.events else None
        if study is None:
            study = m.Study(study_instance_uid=uid)
            session.add(study)
        if first is not None:
            for name in (
                "accession_number",
                "study_datetime",
                "study_description",
                "patient_pseudo_id",
                "patient_age_years",
                "patient_sex",
                "patient_weight_kg",
                "patient_height_m",
            ):
                value = getattr(first, name)
                if value is not None and getattr(study, name) is None:
                    setattr(study, name, value)
        if result.source.kind == "rdsr":
            study.has_dose_report = True
        session.flush()
        return study

    def _device_and_room(
        self, session: Session, event: ExposureEvent
    ) -> tuple[m.Device | None, m.Room | None]:
        key = {
            "manufacturer": event.manufacturer or "",
            "model_name": event.model_name or "",
            "serial_number": event.device_serial_number or "",
            "station_name": event.station_name or "",
        }
        if not any(key.values()):
            return None, None
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
            room = self._default_room(session, event)
            device.room_id = room.id
        return device, room

    def _default_room(self, session: Session, event: ExposureEvent) -> m.Room:
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

    @staticmethod
    def _accumulated_row(
        acc: AccumulatedDose, source_object_id: int, study_id: int | None
    ) -> m.AccumulatedDoseRow:
        columns = {
            name: getattr(acc, name)
            for name in m.AccumulatedDoseRow.__table__.columns.keys()  # noqa: SIM118
            if name in AccumulatedDose.__dataclass_fields__ and name not in {"study_id"}
        }
        columns.pop("sop_instance_uid", None)
        details: dict[str, Any] = {
            name: getattr(acc, name)
            for name in AccumulatedDose.__dataclass_fields__
            if name not in columns and name not in {"sop_instance_uid", "study_instance_uid"}
        }
        return m.AccumulatedDoseRow(
            source_object_id=source_object_id, study_id=study_id, details=details, **columns
        )

    @staticmethod
    def _link(session: Session, study: m.Study, result: ParseResult) -> None:
        """Mark image-header events of ``study`` that a dose report of the study describes."""
        report_modalities = session.scalars(
            select(m.ExposureEventRow.modality)
            .where(m.ExposureEventRow.study_id == study.id)
            .where(m.ExposureEventRow.source_kind == "rdsr")
            .distinct()
        ).all()
        if not study.has_dose_report:
            return
        header_modalities = session.scalars(
            select(m.ExposureEventRow.modality)
            .where(m.ExposureEventRow.study_id == study.id)
            .where(m.ExposureEventRow.source_kind == "image_header")
            .where(m.ExposureEventRow.superseded.is_(False))
            .distinct()
        ).all()
        covered = [mod for mod in header_modalities if report_covers(report_modalities, mod)]
        if covered:
            session.execute(
                update(m.ExposureEventRow)
                .where(m.ExposureEventRow.study_id == study.id)
                .where(m.ExposureEventRow.source_kind == "image_header")
                .where(m.ExposureEventRow.modality.in_(covered))
                .values(superseded=True)
            )
