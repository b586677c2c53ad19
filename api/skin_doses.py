"""Peak skin dose of fluoroscopy and interventional procedures on the store (issue #21).

After a batch of events is stored (scan, listen, pull, upload, demo: the pipeline's
``_BatchWriter``), every study of the batch with a fluoroscopy or interventional event that
carries geometry (positioner angles from TID 10003) gets its skin-dose map computed again from
all of its stored events (:func:`update_skin_doses`): the map (:func:`beamaudit.model.skin_dose_map`
with the room's table conventions and patient support), its PSD, areas above 2/3/5 Gy, the
events at the peak, the uncertainty, and the NCRP 168 substantial radiation dose levels the
procedure reached (PSD and the study's K_a,r, P_KA and fluoroscopy time). One row per study in
``skin_doses``; a map that cannot be computed is a ``failed`` row with its reason (never a
silent gap). The follow-up state of a row (open, patient informed, follow-up booked, closed)
and its note are kept when the map is computed again.
"""

from __future__ import annotations

import functools
import logging
import math
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass, fields
from datetime import datetime, timedelta
from typing import Any

from sqlalchemy import select
from sqlalchemy.orm import Session

from beamaudit.api.store import models as m
from beamaudit.api.store.base import utcnow

log = logging.getLogger(__name__)

__all__ = [
    "FOLLOWUP_STATES",
    "SKIN_MODALITIES",
    "CumulativeEntry",
    "compute_study_skin_dose",
    "cumulative_skin_doses",
    "followup_rows",
    "set_followup",
    "skin_geometry_fields",
    "skin_geometry_of",
    "studies_with_geometry",
    "update_skin_doses",
    "update_stored_skin_doses",
]

#: Modalities whose procedures get a skin-dose map (fluoroscopy, interventional).
SKIN_MODALITIES = frozenset({"XA", "RF"})
#: Follow-up states, in the order a patient goes through them.
FOLLOWUP_STATES = ("open", "patient_informed", "follow_up_booked", "closed")


@functools.cache
def skin_geometry_fields() -> tuple[str, ...]:
    """SkinEvent fields that the events table keeps only in ``skin_geometry`` (JSON): positioner
    angles, table positions and tilts, reference point definition, patient position (read on
    first use: importing the model is left to the storing process)."""
    from beamaudit.ingest.events import ExposureEvent
    from beamaudit.model.skin_events import SkinEvent

    columns = set(m.ExposureEventRow.__table__.columns.keys())
    return tuple(
        f.name
        for f in fields(SkinEvent)
        if f.name in ExposureEvent.__dataclass_fields__ and f.name not in columns
    )


def skin_geometry_of(event: Any) -> dict[str, Any] | None:
    """The ``skin_geometry`` JSON of an ingest event (None when it records none)."""
    values = {
        name: getattr(event, name, None)
        for name in skin_geometry_fields()
        if getattr(event, name, None) is not None
    }
    return values or None


def studies_with_geometry(rows: Iterable[Mapping[str, Any]]) -> set[int]:
    """The studies of insert-ready event rows that call for a skin-dose map."""
    return {
        int(r["study_id"])
        for r in rows
        if r.get("study_id") is not None
        and (r.get("modality") or "").upper() in SKIN_MODALITIES
        and (r.get("skin_geometry") or {}).get("positioner_primary_angle_deg") is not None
    }


def _skin_room(room: m.Room | None) -> Any:
    from beamaudit.model.skin_events import SkinRoom

    if room is None:
        return SkinRoom()
    signs: dict[str, Any] = {
        name: int(value)
        for name, value in (
            ("longitudinal_sign", room.table_longitudinal_sign),
            ("lateral_sign", room.table_lateral_sign),
            ("height_sign", room.table_height_sign),
        )
        if value is not None
    }
    return SkinRoom(
        reference_longitudinal_mm=room.table_reference_longitudinal_mm,
        reference_lateral_mm=room.table_reference_lateral_mm,
        reference_height_mm=room.table_reference_height_mm,
        table_top_below_isocenter_mm=room.table_top_below_isocenter_mm,
        **signs,
    )


def _factors(room: m.Room | None) -> Any:
    from beamaudit.api.reconstruct import _patient_support
    from beamaudit.model.skin_factors import SpectrumBeamFactors

    inherent = None
    if room is not None and room.filtration:
        al = [
            f
            for f in room.filtration
            if str(f.get("material", "")).lower() in ("al", "aluminium", "aluminum")
        ]
        if len(al) == len(room.filtration):
            inherent = sum(float(f["thickness_mm"]) for f in al)
    return SpectrumBeamFactors(
        inherent_filtration_mm_al=inherent, patient_support=_patient_support(room, "below")
    )


def _skin_events(rows: Sequence[m.ExposureEventRow]) -> list[Any]:
    from beamaudit.model.skin_events import SkinEvent

    names = {f.name for f in fields(SkinEvent)}
    events = []
    for row in rows:
        values: dict[str, Any] = {
            name: getattr(row, name) for name in names if hasattr(m.ExposureEventRow, name)
        }
        values.update({k: v for k, v in (row.skin_geometry or {}).items() if k in names})
        values["filters"] = row.filters or ()
        values["event_key"] = row.irradiation_event_uid or row.event_key
        events.append(SkinEvent.from_fields(values))
    return events


def _study_totals(rows: Sequence[m.ExposureEventRow]) -> dict[str, float | None]:
    def total(values: list[float | None]) -> float | None:
        known = [v for v in values if v is not None]
        return math.fsum(known) if known else None

    fluoro = [r.irradiation_duration_s for r in rows if r.event_type == "fluoroscopy"]
    return {
        "reference_point_air_kerma_mgy": total([r.reference_point_air_kerma_mgy for r in rows]),
        "dap_gy_cm2": total([r.dap_gy_cm2 for r in rows]),
        "fluoroscopy_time_s": total(fluoro),
    }


def _one_line(exc: BaseException) -> str:
    return (str(exc).splitlines() or [type(exc).__name__])[0]


def compute_study_skin_dose(session: Session, study_id: int) -> m.SkinDoseRow | None:
    """Compute (again) the skin-dose row of one study from its stored events.

    Returns None when the study has no fluoroscopy or interventional event with geometry.
    """
    from beamaudit.model import ModelError
    from beamaudit.model.followup import substantial_dose_levels_crossed
    from beamaudit.model.patient_model import patient_model
    from beamaudit.model.skin_dose import skin_dose_map

    rows = list(
        session.scalars(
            select(m.ExposureEventRow)
            .where(
                m.ExposureEventRow.study_id == study_id,
                m.ExposureEventRow.superseded.is_(False),
                m.ExposureEventRow.modality.in_(sorted(SKIN_MODALITIES)),
            )
            .order_by(m.ExposureEventRow.event_datetime, m.ExposureEventRow.id)
        )
    )
    rows = [r for r in rows if r.source_kind == "rdsr" or r.skin_geometry]
    if not any(
        (r.skin_geometry or {}).get("positioner_primary_angle_deg") is not None for r in rows
    ):
        return None
    skin = session.scalar(select(m.SkinDoseRow).where(m.SkinDoseRow.study_id == study_id))
    if skin is None:
        skin = m.SkinDoseRow(study_id=study_id, followup_status="open", events_at_peak=[],
                             levels_crossed=[], level_checks=[])  # fmt: skip
        session.add(skin)
    skin.computed_at = utcnow()
    study = session.get(m.Study, study_id)
    room = session.get(m.Room, rows[0].room_id) if rows[0].room_id is not None else None
    totals = _study_totals(rows)
    try:
        patient = patient_model(
            height_m=study.patient_height_m if study else None,
            mass_kg=study.patient_weight_kg if study else None,
            sex=(study.patient_sex if study and study.patient_sex in ("M", "F", "O") else None),
        )
        result = skin_dose_map(
            _skin_events(rows), patient=patient, room=_skin_room(room), factors=_factors(room)
        )
    except (ModelError, ValueError, TypeError) as exc:
        skin.status, skin.reason = "failed", f"skin-dose map not computed: {_one_line(exc)}"
        skin.peak_skin_dose_mgy = skin.area_above_2gy_cm2 = None
        skin.area_above_3gy_cm2 = skin.area_above_5gy_cm2 = skin.uncertainty_pct = None
        skin.events_used, skin.record, skin.events_at_peak = None, None, []
        checks = substantial_dose_levels_crossed(**totals)
        _set_levels(skin, checks)
        log.warning("study %s: %s", study_id, skin.reason)
        return skin
    record = result.as_record()
    skin.status, skin.reason = "ok", None
    skin.peak_skin_dose_mgy = float(result.peak_skin_dose_mgy)
    areas = result.area_above_cm2
    skin.area_above_2gy_cm2 = float(areas.get(2000.0, 0.0))
    skin.area_above_3gy_cm2 = float(areas.get(3000.0, 0.0))
    skin.area_above_5gy_cm2 = float(areas.get(5000.0, 0.0))
    skin.uncertainty_pct = float(result.uncertainty.expanded_pct)
    skin.events_used = int(result.events_used)
    skin.events_at_peak = record["contributors"]
    skin.record = record
    _set_levels(
        skin, substantial_dose_levels_crossed(peak_skin_dose_mgy=skin.peak_skin_dose_mgy, **totals)
    )
    return skin


def _set_levels(skin: m.SkinDoseRow, checks: Sequence[Any]) -> None:
    skin.level_checks = [
        {
            "key": c.key,
            "quantity": c.quantity,
            "level": c.level,
            "unit": c.unit,
            "value": c.value,
            "crossed": c.crossed,
            "ratio": c.ratio,
            "text": c.describe(),
        }
        for c in checks
    ]
    skin.levels_crossed = [c.key for c in checks if c.crossed]


def update_skin_doses(session: Session, study_ids: Iterable[int]) -> int:
    """Compute the skin-dose rows of these studies in the session's transaction; returns how
    many were (re)computed."""
    n = 0
    for study_id in sorted(set(study_ids)):
        with session.no_autoflush:
            if compute_study_skin_dose(session, study_id) is not None:
                n += 1
    session.flush()
    return n


def update_stored_skin_doses(session: Session, event_ids: Sequence[int]) -> int:
    """:func:`update_skin_doses` for the studies of events already stored (a listener's events
    completed after the sends); returns how many maps were computed."""
    e = m.ExposureEventRow
    ids = list(event_ids)
    rows: list[dict[str, Any]] = []
    for start in range(0, len(ids), 500):
        rows += [
            dict(r._mapping)
            for r in session.execute(
                select(e.study_id, e.modality, e.skin_geometry).where(
                    e.id.in_(ids[start : start + 500]), e.modality.in_(sorted(SKIN_MODALITIES))
                )
            )
        ]
    return update_skin_doses(session, studies_with_geometry(rows))


def set_followup(
    session: Session, study_id: int, *, status: str, note: str | None, by: str | None
) -> m.SkinDoseRow:
    """Record a follow-up step of one procedure (the caller writes the audit row)."""
    if status not in FOLLOWUP_STATES:
        raise ValueError(f"follow-up status must be one of {', '.join(FOLLOWUP_STATES)}")
    skin = session.scalar(select(m.SkinDoseRow).where(m.SkinDoseRow.study_id == study_id))
    if skin is None:
        raise LookupError("this study has no skin-dose estimate")
    skin.followup_status, skin.followup_note = status, note
    skin.followup_by, skin.followup_at = by, utcnow()
    return skin


@dataclass(frozen=True)
class CumulativeEntry:
    """One patient's procedures in a window and their cumulative peak skin dose."""

    patient_pseudo_id: str
    study_uids: tuple[str, ...]
    peak_skin_dose_mgy: float
    lower_bound_mgy: float
    upper_bound_mgy: float
    method: str
    notes: tuple[str, ...]


def followup_rows(session: Session, *, include_closed: bool = False) -> list[dict[str, Any]]:
    """Procedures that reached an NCRP 168 level, newest first, with their follow-up state."""
    query = (
        select(m.SkinDoseRow, m.Study)
        .join(m.Study, m.Study.id == m.SkinDoseRow.study_id)
        .order_by(m.Study.study_datetime.desc(), m.Study.id)
    )
    out = []
    for skin, study in session.execute(query).all():
        if not skin.levels_crossed:
            continue
        if skin.followup_status == "closed" and not include_closed:
            continue
        out.append(_followup_row(skin, study))
    return out


def _followup_row(skin: m.SkinDoseRow, study: m.Study) -> dict[str, Any]:
    return {
        "study_instance_uid": study.study_instance_uid,
        "study_datetime": study.study_datetime,
        "patient_pseudo_id": study.patient_pseudo_id,
        "exam_type": study.exam_type,
        "status": skin.status,
        "peak_skin_dose_mgy": skin.peak_skin_dose_mgy,
        "area_above_3gy_cm2": skin.area_above_3gy_cm2,
        "uncertainty_pct": skin.uncertainty_pct,
        "levels_crossed": list(skin.levels_crossed),
        "level_checks": list(skin.level_checks),
        "followup_status": skin.followup_status,
        "followup_note": skin.followup_note,
        "followup_by": skin.followup_by,
        "followup_at": skin.followup_at,
    }


def cumulative_skin_doses(
    session: Session, *, window_days: float, as_of: datetime | None = None
) -> list[CumulativeEntry]:
    """Cumulative peak skin dose of each pseudonymised patient with more than one procedure
    within ``window_days`` before ``as_of`` (default now), from the stored maps
    (:func:`beamaudit.model.followup.cumulative_skin_dose`: maps added where they share a frame,
    else the sum of the peaks as an upper bound)."""
    from beamaudit.model.followup import cumulative_skin_dose

    end = as_of or utcnow()
    start = end - timedelta(days=window_days)
    query = (
        select(m.SkinDoseRow, m.Study)
        .join(m.Study, m.Study.id == m.SkinDoseRow.study_id)
        .where(
            m.SkinDoseRow.status == "ok",
            m.Study.patient_pseudo_id.is_not(None),
            m.Study.study_datetime >= start,
            m.Study.study_datetime <= end,
        )
        .order_by(m.Study.patient_pseudo_id, m.Study.study_datetime)
    )
    by_patient: dict[str, list[tuple[m.SkinDoseRow, m.Study]]] = {}
    for skin, study in session.execute(query).all():
        by_patient.setdefault(str(study.patient_pseudo_id), []).append((skin, study))
    out = []
    for patient, pairs in by_patient.items():
        if len(pairs) < 2:
            continue
        maps = [_map_from_record(skin.record or {}) for skin, _ in pairs]
        result = cumulative_skin_dose(maps, window_days=window_days)
        out.append(
            CumulativeEntry(
                patient_pseudo_id=patient,
                study_uids=tuple(study.study_instance_uid for _, study in pairs),
                peak_skin_dose_mgy=result.peak_skin_dose_mgy,
                lower_bound_mgy=result.lower_bound_mgy,
                upper_bound_mgy=result.upper_bound_mgy,
                method=result.method,
                notes=result.notes,
            )
        )
    return sorted(out, key=lambda e: -e.peak_skin_dose_mgy)


def _map_from_record(record: Mapping[str, Any]) -> Any:
    """The parts of a stored map record that adding maps needs (grid, dose, assumptions)."""
    import numpy as np

    grid_record = record.get("map") or {}
    grid = _RecordGrid(
        around_mm=np.asarray(grid_record.get("around_mm", []), dtype=np.float64),
        along_mm=np.asarray(grid_record.get("along_mm", []), dtype=np.float64),
    )
    dose = np.asarray(grid_record.get("dose_mgy", []), dtype=np.float64)
    return _RecordMap(
        grid=grid,
        dose_mgy=dose.reshape(grid.shape) if dose.size else np.zeros(grid.shape),
        peak_skin_dose_mgy=float(record.get("peak_skin_dose_mgy") or 0.0),
        assumptions=tuple(record.get("assumptions") or ()),
    )


@dataclass(frozen=True)
class _RecordGrid:
    around_mm: Any
    along_mm: Any

    @property
    def shape(self) -> tuple[int, int]:
        return (int(self.along_mm.size), int(self.around_mm.size))


@dataclass(frozen=True)
class _RecordMap:
    grid: _RecordGrid
    dose_mgy: Any
    peak_skin_dose_mgy: float
    assumptions: tuple[str, ...]


def add_skin_dose_flags(
    session: Session, flags: list[dict[str, Any]], parameters: Mapping[str, Any]
) -> int:
    """Put the stored peak skin doses into a review's NCRP 168 flags (``srdl_exceeded``).

    A procedure of the period whose PSD reached the NCRP 168 level gets it added to its
    ``srdl_exceeded`` flag (numbers ``peak_skin_dose_mgy`` and ``peak_skin_dose_mgy_srdl``, and
    the reason), or a flag of its own when no other level was crossed. Only procedures with an
    event within the run's period and scope (sites, rooms, exam types) count. Returns how
    many flags gained a PSD. ``flags`` are the review's JSON flags, changed in place.
    """
    from beamaudit.model.followup import substantial_dose_levels

    level = substantial_dose_levels()["peak_skin_dose"].value
    period = parameters.get("period") or {}
    start, end = str(period.get("start") or ""), str(period.get("end") or "")  # end exclusive
    query = (
        select(
            m.Study.study_instance_uid,
            m.Study.exam_type,
            m.SkinDoseRow.peak_skin_dose_mgy,
            m.SkinDoseRow.uncertainty_pct,
            m.Room.name,
            m.Site.name,
            m.ExposureEventRow.event_datetime,
        )
        .join(m.Study, m.Study.id == m.SkinDoseRow.study_id)
        .join(m.ExposureEventRow, m.ExposureEventRow.study_id == m.Study.id)
        .outerjoin(m.Room, m.Room.id == m.ExposureEventRow.room_id)
        .outerjoin(m.Site, m.Site.id == m.Room.site_id)
        .where(m.SkinDoseRow.status == "ok", m.SkinDoseRow.peak_skin_dose_mgy >= level)
    )
    by_study: dict[str, tuple[Any, ...]] = {}
    for uid, exam_type, psd, u_pct, room, site, when in session.execute(query).all():
        # events are judged by their own time, as the review does
        if when is None or not (start <= when.date().isoformat() < end):
            continue
        if not _in_scope(parameters, room=room, site=site, exam_type=exam_type):
            continue
        by_study.setdefault(uid, (exam_type, float(psd or 0.0), u_pct, room, site))
    existing = {
        (f.get("concerns") or {}).get("study_uid"): f
        for f in flags
        if f.get("kind") == "srdl_exceeded"
    }
    added = 0
    for uid, (exam_type, psd, u_pct, room, site) in by_study.items():
        text = (
            f"peak skin dose {psd:.0f} mGy (estimated, ±{u_pct or 0:.0f} %, k = 2) >= {level:g} mGy"
        )
        flag = existing.get(uid)
        if flag is None:
            flag = {
                "kind": "srdl_exceeded",
                "severity": "action",
                "reason": (
                    f"Study {uid} ({exam_type or 'unmapped'}"
                    f"{' in room ' + room if room else ''}) exceeds the NCRP 168 substantial "
                    f"radiation dose level: {text}. Follow the patient up for possible skin "
                    "effects as local procedure requires."
                ),
                "numbers": {},
                "concerns": {
                    k: v
                    for k, v in (
                        ("study_uid", uid),
                        ("site", site),
                        ("room", room),
                        ("exam_type", exam_type),
                    )
                    if v is not None
                },
            }
            flags.append(flag)
        else:
            flag["reason"] = flag["reason"].replace("level: ", f"level: {text}; ", 1)
        flag["numbers"]["peak_skin_dose_mgy"] = psd
        flag["numbers"]["peak_skin_dose_mgy_srdl"] = level
        added += 1
    return added


def _in_scope(
    parameters: Mapping[str, Any], *, room: str | None, site: str | None, exam_type: str | None
) -> bool:
    for key, value in (("rooms", room), ("sites", site), ("exam_types", exam_type)):
        wanted = parameters.get(key)
        if wanted and value not in wanted:
            return False
    return True


def skin_page_record(session: Session, study_uid: str) -> dict[str, Any] | None:
    """The exam page's skin-dose input (``render_exam(skin_dose=)``), or None."""
    row = session.execute(
        select(m.SkinDoseRow)
        .join(m.Study, m.Study.id == m.SkinDoseRow.study_id)
        .where(m.Study.study_instance_uid == study_uid)
    ).scalar_one_or_none()
    if row is None:
        return None
    return {
        "status": row.status,
        "reason": row.reason,
        "peak_skin_dose_mgy": row.peak_skin_dose_mgy,
        "area_above_2gy_cm2": row.area_above_2gy_cm2,
        "area_above_3gy_cm2": row.area_above_3gy_cm2,
        "area_above_5gy_cm2": row.area_above_5gy_cm2,
        "uncertainty_pct": row.uncertainty_pct,
        "events_used": row.events_used,
        "level_checks": list(row.level_checks or []),
        "followup_status": row.followup_status,
        "record": row.record,
    }


def followup_page_data(session: Session, window_days: float) -> dict[str, Any]:
    """The flags page's follow-up section (``render_flags(followup=)``)."""
    return {
        "items": followup_rows(session),
        "window_days": window_days,
        "cumulative": [
            {
                "patient_pseudo_id": e.patient_pseudo_id,
                "procedures": len(e.study_uids),
                "peak_skin_dose_mgy": e.peak_skin_dose_mgy,
                "upper_bound_mgy": e.upper_bound_mgy,
                "method": e.method,
            }
            for e in cumulative_skin_doses(session, window_days=window_days)
        ],
    }
