"""Peak skin dose of fluoroscopy and interventional procedures, computed at ingest (issue #21).

Like the exam types and dose figures: with a ``Completion`` in the storing transaction
(``pipeline._BatchWriter``: scan, ``listen``, pull, upload), else by ``process_new_events`` (a
listener storing as read), every study with an XA or RF event that carries geometry
(positioner angles from TID 10003) gets its skin-dose map computed again from all its stored
events: the map (:func:`beamaudit.model.skin_dose_map` with the room's table conventions and
patient support), its PSD, areas above 2/3/5 Gy, the events at the peak, the uncertainty, and
the NCRP 168 substantial radiation dose levels the procedure reached (PSD and the study's K_a,r,
P_KA and fluoroscopy time). One row per study in ``skin_doses``
(:mod:`beamaudit.api.store.skin_doses` reads them); a map that cannot be computed is a
``failed`` row with its reason (never a silent gap). The follow-up state of a row is kept when
the map is computed again.
"""

from __future__ import annotations

import functools
import logging
import math
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import fields
from typing import Any

from sqlalchemy import select
from sqlalchemy.orm import Session

from beamaudit.api.intake.reconstruct import room_patient_support
from beamaudit.api.store import models as m
from beamaudit.api.store.base import utcnow

log = logging.getLogger(__name__)

__all__ = [
    "SKIN_MODALITIES",
    "compute_study_skin_dose",
    "skin_geometry_fields",
    "skin_geometry_of",
    "studies_with_geometry",
    "update_skin_doses",
    "update_stored_skin_doses",
]

SKIN_MODALITIES = frozenset({"XA", "RF"})


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
        inherent_filtration_mm_al=inherent, patient_support=room_patient_support(room, "below")
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
