"""Stored skin doses of fluoroscopy and interventional procedures (issue #21): the NCRP 168
follow-up list and its steps, the cumulative skin dose of one pseudonymised patient in a window,
the PSD in a review's ``srdl_exceeded`` flags, the exam page's input. The rows are computed at
ingest by :mod:`beamaudit.api.intake.skin`.
"""

from __future__ import annotations

from collections.abc import Collection, Mapping
from dataclasses import dataclass, field, fields
from datetime import datetime, timedelta
from typing import Any

from sqlalchemy import select
from sqlalchemy.orm import Session

from beamaudit.api.store import models as m
from beamaudit.api.store.base import utcnow

__all__ = [
    "FOLLOWUP_STATES",
    "CumulativeEntry",
    "add_skin_dose_flags",
    "cumulative_skin_doses",
    "followup_in_period",
    "followup_page_data",
    "followup_rows",
    "followup_states",
    "patient_skin_dose",
    "set_followup",
    "skin_page_record",
]

FOLLOWUP_STATES = ("open", "patient_informed", "follow_up_booked", "closed")


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
    """One patient's procedures in a window and their cumulative peak skin dose (``method``:
    how it was made, :func:`beamaudit.model.followup.cumulative_skin_dose`)."""

    patient_pseudo_id: str
    study_uids: tuple[str, ...]
    peak_skin_dose_mgy: float
    lower_bound_mgy: float
    upper_bound_mgy: float
    method: str
    notes: tuple[str, ...]
    #: the exams' ids, in the order of ``study_uids``
    exam_ids: tuple[int, ...] = ()
    #: the added map (``SkinDoseMap.as_record()``'s shape), None when the peaks were added
    map_record: dict[str, Any] | None = field(default=None, repr=False, compare=False)

    def summary(self) -> dict[str, Any]:
        """The entry without its map (the follow-up list's row)."""
        return {f.name: getattr(self, f.name) for f in fields(self) if f.name != "map_record"}


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


def followup_states(session: Session, study_uids: Collection[str]) -> dict[str, str]:
    """The follow-up state of each of ``study_uids`` that has a skin-dose row (the flags page's
    ``srdl_exceeded`` rows)."""
    if not study_uids:
        return {}
    query = (
        select(m.Study.study_instance_uid, m.SkinDoseRow.followup_status)
        .join(m.SkinDoseRow, m.SkinDoseRow.study_id == m.Study.id)
        .where(m.Study.study_instance_uid.in_(sorted(study_uids)))
    )
    return {uid: state for uid, state in session.execute(query).all() if state}


def followup_in_period(session: Session, *, start: str, end: str) -> list[dict[str, Any]]:
    """Procedures with an event in ``[start, end)`` (ISO dates, end exclusive, events judged by
    their own time as the review does) that reached an NCRP 168 level, closed ones included,
    oldest first: the committee report's follow-up section. Each row is a
    :func:`followup_rows` row with the procedure's ``room`` (a room of its events)."""
    query = (
        select(m.SkinDoseRow, m.Study, m.ExposureEventRow.event_datetime, m.Room.name)
        .join(m.Study, m.Study.id == m.SkinDoseRow.study_id)
        .join(m.ExposureEventRow, m.ExposureEventRow.study_id == m.Study.id)
        .outerjoin(m.Room, m.Room.id == m.ExposureEventRow.room_id)
        .order_by(m.Study.study_datetime, m.Study.id)
    )
    out: dict[int, dict[str, Any]] = {}
    for skin, study, when, room in session.execute(query).all():
        if not skin.levels_crossed or study.id in out:
            continue
        if when is None or not (start <= when.date().isoformat() < end):
            continue
        out[study.id] = {**_followup_row(skin, study), "room": room}
    return list(out.values())


def cumulative_skin_doses(
    session: Session, *, window_days: float, as_of: datetime | None = None
) -> list[CumulativeEntry]:
    """Cumulative peak skin dose of each pseudonymised patient with more than one procedure
    within ``window_days`` before ``as_of`` (default now), highest first (:func:`patient_skin_dose`
    for how each is made)."""
    out = [
        entry
        for entry in _cumulative(session, window_days=window_days, as_of=as_of).values()
        if len(entry.study_uids) > 1
    ]
    return sorted(out, key=lambda e: -e.peak_skin_dose_mgy)


def patient_skin_dose(
    session: Session, patient_pseudo_id: str, *, window_days: float, as_of: datetime | None = None
) -> CumulativeEntry | None:
    """One pseudonymised patient's skin dose over the procedures within ``window_days`` before
    ``as_of`` (default now), or None when the patient has no skin-dose row in the window.

    The stored maps are added cell by cell where they lie on one patient-surface grid (the same
    patient model: :func:`beamaudit.model.followup.cumulative_skin_dose`, method ``maps_added``,
    or ``maps_added_assumed_alignment`` where a map's place along the body was assumed); maps of
    different patient models cannot be added, and the sum of the procedures' peaks is given as
    the upper bound it is (``peaks_added``). A procedure in the window whose map could not be
    computed is named in the notes, never dropped in silence. ``map_record`` is the added map in
    the shape of ``SkinDoseMap.as_record()`` (None when the peaks were added).
    """
    found = _cumulative(session, window_days=window_days, as_of=as_of, patient=patient_pseudo_id)
    return found.get(patient_pseudo_id)


def _cumulative(
    session: Session,
    *,
    window_days: float,
    as_of: datetime | None,
    patient: str | None = None,
) -> dict[str, CumulativeEntry]:
    end = as_of or utcnow()
    start = end - timedelta(days=window_days)
    query = (
        select(m.SkinDoseRow, m.Study)
        .join(m.Study, m.Study.id == m.SkinDoseRow.study_id)
        .where(
            m.Study.patient_pseudo_id.is_not(None),
            m.Study.study_datetime >= start,
            m.Study.study_datetime <= end,
        )
        .order_by(m.Study.patient_pseudo_id, m.Study.study_datetime, m.Study.id)
    )
    if patient is not None:
        query = query.where(m.Study.patient_pseudo_id == patient)
    by_patient: dict[str, list[tuple[m.SkinDoseRow, m.Study]]] = {}
    for skin, study in session.execute(query).all():
        by_patient.setdefault(str(study.patient_pseudo_id), []).append((skin, study))
    return {
        key: _patient_entry(key, pairs, window_days=window_days)
        for key, pairs in by_patient.items()
    }


def _patient_entry(
    patient: str, pairs: list[tuple[m.SkinDoseRow, m.Study]], *, window_days: float
) -> CumulativeEntry:
    from beamaudit.model.followup import cumulative_skin_dose

    usable = [(s, st) for s, st in pairs if s.status == "ok" and (s.record or {}).get("map")]
    without = [st.study_instance_uid for s, st in pairs if (s, st) not in usable]
    maps = [_map_from_record(skin.record or {}) for skin, _ in usable]
    result = cumulative_skin_dose(maps, window_days=window_days)
    notes = list(result.notes)
    if without:
        notes.append(
            f"{len(without)} procedure(s) in the window without a skin-dose map "
            f"({', '.join(without)}): not in the cumulative figure, which is a lower bound "
            "for that reason"
        )
    record = None
    if result.dose_mgy is not None and usable:
        record = _added_record(usable[0][0].record or {}, result.dose_mgy)
    return CumulativeEntry(
        patient_pseudo_id=patient,
        study_uids=tuple(study.study_instance_uid for _, study in pairs),
        peak_skin_dose_mgy=result.peak_skin_dose_mgy,
        lower_bound_mgy=result.lower_bound_mgy,
        upper_bound_mgy=result.upper_bound_mgy,
        method=result.method,
        notes=tuple(notes),
        exam_ids=tuple(int(study.id) for _, study in pairs),
        map_record=record,
    )


def _added_record(first: Mapping[str, Any], dose: Any) -> dict[str, Any]:
    """The added map in the shape of ``SkinDoseMap.as_record()``: the first map's grid and
    patient, the summed dose, its peak and the areas above the follow-up levels."""
    import numpy as np

    grid = dict(first.get("map") or {})
    total = np.asarray(dose, dtype=np.float64)
    levels = [float(v) for v in first.get("isodose_levels_mgy") or ()]
    cell_cm2 = float(grid.get("cell_around_mm") or 0.0) * float(grid.get("cell_along_mm") or 0.0)
    peak = None
    if total.size and float(total.max()) > 0:
        i, j = (int(k) for k in np.unravel_index(int(np.argmax(total)), total.shape))
        peak = {
            "side": "back" if j < total.shape[1] // 2 else "front",
            "along_mm": float(grid["along_mm"][i]),
            "around_mm": float(grid["around_mm"][j]),
            "along_index": i,
            "around_index": j,
        }
    grid["dose_mgy"] = np.round(total, 3).tolist()
    return {
        "peak_skin_dose_mgy": float(total.max()) if total.size else 0.0,
        "area_above_cm2": {
            f"{v:g}": float(np.count_nonzero(total >= v)) * cell_cm2 / 100.0 for v in levels
        },
        "isodose_levels_mgy": levels,
        "peak": peak,
        "uncertainty_pct": None,
        "patient": first.get("patient") or {},
        "map": grid,
    }


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
    names = dict(session.execute(select(m.ExamTypeRow.code, m.ExamTypeRow.name)).all())
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
                    f"Study {uid} ({names.get(exam_type) or exam_type or 'exam type not mapped'}"
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
        "exam_id": row.study_id,
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
