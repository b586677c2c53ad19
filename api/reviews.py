"""Reviews against reference levels, on the store: the bridge to :mod:`beamaudit.api.review`.

* :func:`events_frame` reads the events of a period from the store into the
  review core's input table (contract in :mod:`beamaudit.api.review.events`):
  superseded image-header events (their study's dose report carries them) are
  left out, and the images of one CT acquisition count once (the first image by
  id stands for its acquisition: CTDIvol in CT headers is per acquisition and
  is never summed over slices). ``esak_mgy`` is beamaudit's reconstructed
  entrance surface air kerma; ``dap_gy_cm2`` the reported DAP and
  ``recon_dap_gy_cm2`` the reconstructed one.
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

from dataclasses import replace
from datetime import UTC, date, datetime
from typing import Any

import numpy as np
import pandas as pd
from sqlalchemy import func, select
from sqlalchemy.orm import Session, sessionmaker

from beamaudit import __version__
from beamaudit.api.auth import record_change
from beamaudit.api.review import (
    ExamCatalogue,
    MappingRules,
    Period,
    ReviewParameters,
    ReviewResult,
    load_default_catalogue,
    load_default_rules,
    map_events,
    review,
)
from beamaudit.api.routes._review_rows import (
    catalogue_from_store,
    exam_type_row_values,
    level_sets_from_store,
    rules_from_store,
)
from beamaudit.api.store import models as m
from beamaudit.api.store.base import utcnow

__all__ = [
    "ensure_catalogue",
    "events_frame",
    "map_stored_events",
    "month_period",
    "run_review",
    "stored_flags_frame",
]

_EVENT_SELECT = (
    m.ExposureEventRow.id.label("event_id"),
    func.coalesce(m.ExposureEventRow.event_datetime, m.ExposureEventRow.study_datetime).label(
        "event_datetime"
    ),
    m.Study.study_instance_uid.label("study_uid"),
    m.ExposureEventRow.room_id,
    m.ExposureEventRow.device_id,
    m.ExposureEventRow.modality,
    m.ExposureEventRow.modality_family,
    m.ExposureEventRow.source_kind,
    m.ExposureEventRow.acquisition_key,
    m.ExposureEventRow.exam_type,
    m.ExposureEventRow.study_description,
    m.ExposureEventRow.series_description,
    m.ExposureEventRow.protocol_name,
    m.ExposureEventRow.body_part,
    m.ExposureEventRow.view_position,
    m.ExposureEventRow.event_type,
    m.ExposureEventRow.patient_weight_kg,
    m.ExposureEventRow.dap_gy_cm2,
    m.ExposureEventRow.recon_dap_gy_cm2,
    m.ExposureEventRow.recon_esak_mgy.label("esak_mgy"),
    m.ExposureEventRow.reference_point_air_kerma_mgy.label("ref_point_air_kerma_mgy"),
    m.ExposureEventRow.ctdivol_mgy,
    m.ExposureEventRow.dlp_mgy_cm,
    m.ExposureEventRow.organ_dose_mgy.label("agd_mgy"),
    m.ExposureEventRow.deviation_index,
    m.ExposureEventRow.irradiation_duration_s,
)


def month_period(text: str) -> Period:
    """``YYYY-MM`` as a :class:`Period` (raises ``ReviewError`` on a bad month)."""
    return Period.parse(text)


def _as_utc(value: date) -> datetime:
    return datetime(value.year, value.month, value.day, tzinfo=UTC)


def _names(session: Session) -> tuple[dict[int, tuple[str, str]], dict[int, str]]:
    rooms = {
        r.id: (r.name, site)
        for r, site in session.execute(
            select(m.Room, m.Site.name).join(m.Site, m.Site.id == m.Room.site_id)
        )
    }
    devices = {
        d.id: " ".join(x for x in (d.manufacturer, d.model_name, d.serial_number) if x)
        or d.station_name
        or f"device {d.id}"
        for d in session.scalars(select(m.Device))
    }
    return rooms, devices


def events_frame(session: Session, *, start: date, end: date) -> pd.DataFrame:
    """The review core's events table for events in ``[start, end)`` (UTC dates)."""
    stmt = (
        select(*_EVENT_SELECT)
        .outerjoin(m.Study, m.Study.id == m.ExposureEventRow.study_id)
        .where(m.ExposureEventRow.superseded.is_(False))
        .where(
            func.coalesce(m.ExposureEventRow.event_datetime, m.ExposureEventRow.study_datetime)
            >= _as_utc(start)
        )
        .where(
            func.coalesce(m.ExposureEventRow.event_datetime, m.ExposureEventRow.study_datetime)
            < _as_utc(end)
        )
    )
    result = session.execute(stmt)
    frame = pd.DataFrame(result.fetchall(), columns=list(result.keys()))
    if frame.empty:
        frame = pd.DataFrame(columns=[c.name for c in _EVENT_SELECT])
    # one row per CT acquisition from image headers (slices share the acquisition's CTDIvol)
    ct_headers = (frame["source_kind"] == "image_header") & frame["acquisition_key"].notna()
    if ct_headers.any():
        keep = ~ct_headers | ~frame.loc[:, ["acquisition_key"]].assign(
            _k=frame["acquisition_key"].where(ct_headers)
        )["_k"].duplicated(keep="first")
        frame = frame.loc[keep]
    rooms, devices = _names(session)
    room_ids = frame["room_id"].astype("Int64")
    frame = frame.assign(
        room=[rooms[i][0] if pd.notna(i) and i in rooms else "(no room)" for i in room_ids],
        site=[rooms[i][1] if pd.notna(i) and i in rooms else "(no site)" for i in room_ids],
        device=[
            devices.get(int(i), "(unknown device)") if pd.notna(i) else "(unknown device)"
            for i in frame["device_id"].astype("Int64")
        ],
        fluoro_time_s=frame["irradiation_duration_s"].where(
            frame["event_type"] == "fluoroscopy", np.nan
        ),
        study_uid=frame["study_uid"].fillna(frame["event_id"].map(lambda i: f"(event {i})")),
        event_datetime=pd.to_datetime(frame["event_datetime"], utc=True),
    )
    frame = frame.drop(
        columns=[
            "room_id",
            "device_id",
            "modality_family",
            "source_kind",
            "acquisition_key",
            "event_type",
            "irradiation_duration_s",
        ]
    )
    return frame.reset_index(drop=True)


def ensure_catalogue(
    session: Session, *, actor: str = "system"
) -> tuple[ExamCatalogue, MappingRules]:
    """The stored catalogue and rules; seeds the shipped ones into an empty store."""
    if session.scalar(select(func.count()).select_from(m.ExamTypeRow)) == 0:
        catalogue = load_default_catalogue()
        for t in catalogue.types:
            session.add(m.ExamTypeRow(**exam_type_row_values(t)))
        rules = load_default_rules(catalogue)
        for r in rules.rules:
            session.add(
                m.MappingRuleRow(
                    priority=r.priority,
                    exam_type=r.exam_type,
                    patterns=dict(r.patterns),
                    note=r.note,
                )
            )
        session.flush()
        record_change(
            session,
            actor=actor,
            action="seed",
            entity="exam_catalogue",
            after={"exam_types": len(catalogue.types), "mapping_rules": len(rules.rules)},
        )
    return catalogue_from_store(session), rules_from_store(session)


def map_stored_events(session: Session, event_ids: list[int] | None = None) -> int:
    """Set ``exam_type`` of stored events from the mapping rules; returns how many were mapped.

    With ``event_ids`` None, every event is (re)mapped (after the rules changed).
    """
    _, rules = ensure_catalogue(session)
    cols = [
        m.ExposureEventRow.id,
        m.ExposureEventRow.modality,
        m.ExposureEventRow.room_id,
        m.ExposureEventRow.study_description,
        m.ExposureEventRow.series_description,
        m.ExposureEventRow.protocol_name,
        m.ExposureEventRow.body_part,
        m.ExposureEventRow.view_position,
    ]
    stmt = select(*cols)
    if event_ids is not None:
        if not event_ids:
            return 0
        stmt = stmt.where(m.ExposureEventRow.id.in_(event_ids))
    rows = session.execute(stmt).fetchall()
    if not rows:
        return 0
    rooms, _ = _names(session)
    frame = pd.DataFrame(rows, columns=[c.key for c in cols])
    frame["room"] = [rooms.get(i, ("", ""))[0] if pd.notna(i) else None for i in frame["room_id"]]
    mapped = map_events(frame, rules)
    n = 0
    for event_id, exam_type in zip(frame["id"], mapped, strict=True):
        value = None if exam_type is None or (isinstance(exam_type, float)) else str(exam_type)
        session.execute(
            m.ExposureEventRow.__table__.update()
            .where(m.ExposureEventRow.id == int(event_id))
            .values(exam_type=value)
        )
        n += value is not None
    return n


def _lookback_start(period: Period, months: int) -> date:
    y, mo = period.start.year, period.start.month - months
    while mo <= 0:
        mo += 12
        y -= 1
    return date(y, mo, 1)


def _history(
    session: Session, params: ReviewParameters, levels: list[Any], catalogue: ExamCatalogue
) -> pd.DataFrame | None:
    months = params.changepoint_lookback_months
    if months <= 0:
        return None
    start = _lookback_start(params.period, months)
    events = events_frame(session, start=start, end=params.period.start)
    if events.empty:
        return None
    earlier = replace(
        params, period=Period(start, params.period.start), levels_on=params.period.start
    )
    result = review(events, levels=levels, params=earlier, catalogue=catalogue)
    return result.monthly_df


def execute_review(
    session: Session, params: ReviewParameters
) -> tuple[ReviewResult, list[dict[str, Any]]]:
    """Run the review core on the store's events; returns the result and the level sets used."""
    catalogue, rules = ensure_catalogue(session)
    pairs = level_sets_from_store(session)
    levels = [s for _, s in pairs]
    events = events_frame(session, start=params.period.start, end=params.period.end)
    history = _history(session, params, levels, catalogue)
    result = review(
        events, levels=levels, params=params, history_df=history, catalogue=catalogue, rules=rules
    )
    used = [
        {"id": row.id, "name": row.name, "version": row.version, "kind": row.kind,
         "effective_from": row.effective_from.isoformat()}
        for row, _ in pairs
    ]  # fmt: skip
    return result, used


def run_review(
    sessions: sessionmaker[Session],
    params: ReviewParameters,
    *,
    kind: str = "monthly",
    actor: str = "cli",
) -> int:
    """Run and store a review; returns the :class:`ReviewRun` id (status ``done`` or ``failed``)."""
    from beamaudit.api.review import ReviewError

    with sessions.begin() as session:
        run = m.ReviewRun(
            kind=kind,
            period=params.period.label,
            parameters=params.to_json_dict(),
            software_version=__version__,
            status="running",
        )
        session.add(run)
        session.flush()
        run_id = run.id
        record_change(session, actor=actor, action="start", entity="review_run", entity_id=run_id,
                      after={"kind": kind, "period": run.period})  # fmt: skip
    try:
        with sessions.begin() as session:
            result, used = execute_review(session, params)
            body = result.to_json_dict()
            run = session.get(m.ReviewRun, run_id)
            assert run is not None
            run.level_sets = used
            run.result = body
            run.status = "done"
            run.finished_at = utcnow()
            for flag in body["flags"]:
                session.add(
                    m.FlagRow(
                        review_run_id=run_id,
                        kind=flag["kind"],
                        severity=flag.get("severity") or "info",
                        reason=flag["reason"],
                        numbers=flag.get("numbers") or {},
                        event_id=flag.get("event_id"),
                        study_instance_uid=flag.get("study_uid"),
                        room=flag.get("room"),
                        exam_type=flag.get("exam_type"),
                    )
                )
    except ReviewError as exc:
        with sessions.begin() as session:
            run = session.get(m.ReviewRun, run_id)
            assert run is not None
            run.status = "failed"
            run.error = str(exc)
            run.finished_at = utcnow()
    return run_id


def stored_flags_frame(session: Session, run_id: int) -> pd.DataFrame:
    """The flags of one stored run as a table."""
    rows = session.scalars(select(m.FlagRow).where(m.FlagRow.review_run_id == run_id)).all()
    return pd.DataFrame(
        [
            {
                "flag_id": r.id,
                "kind": r.kind,
                "severity": r.severity,
                "reason": r.reason,
                "room": r.room,
                "exam_type": r.exam_type,
                "event_id": r.event_id,
                "study_uid": r.study_instance_uid,
                "status": r.status,
            }
            for r in rows
        ]  # fmt: skip
    )


def store_level_sets(
    session: Session, sets: list[Any], *, actor: str = "cli"
) -> list[m.ReferenceLevelSetRow]:
    """Add reference-level set versions (all or none; the caller owns the transaction).

    Raises
    ------
    ReviewError
        A set version that is stored already, or an exam type the catalogue lacks.
    """
    from beamaudit.api.review import ReviewError

    catalogue, _ = ensure_catalogue(session)
    known = {t.exam_type for t in catalogue.types}
    rows = []
    for s in sets:
        unknown = sorted({e.exam_type for e in s.entries} - known)
        if unknown:
            raise ReviewError(
                f"set {s.name!r} {s.version}: exam types not in the catalogue: {', '.join(unknown)}"
            )
        clash = session.scalar(
            select(m.ReferenceLevelSetRow.id).where(
                m.ReferenceLevelSetRow.name == s.name, m.ReferenceLevelSetRow.version == s.version
            )
        )
        if clash is not None:
            raise ReviewError(
                f"set {s.name!r} version {s.version!r} is stored already (id {clash})"
            )
        row = m.ReferenceLevelSetRow(
            name=s.name, kind=s.kind, version=s.version,
            effective_from=s.effective_from, source=s.source or None,
        )  # fmt: skip
        session.add(row)
        session.flush()
        session.add_all(
            m.ReferenceLevelRow(
                set_id=row.id, exam_type=e.exam_type, quantity=e.quantity,
                value=e.value, unit=e.unit, source=e.source or None,
            )
            for e in s.entries
        )  # fmt: skip
        record_change(
            session, actor=actor, action="import", entity="reference_level_set", entity_id=row.id,
            after={"name": s.name, "version": s.version, "kind": s.kind, "levels": len(s.entries)},
        )  # fmt: skip
        rows.append(row)
    session.flush()
    return rows
