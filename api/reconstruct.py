"""Reconstruction: run the beam and dose model over stored exposure events.

For every projection event that records its technique (kV and mAs) the
model's figures are written beside the reported ones: HVL, tube output,
incident and entrance surface air kerma, entrance dose, DAP, their
uncertainties, the reported/reconstructed DAP ratio and the why trail.

The beam of a room is the room's configured total filtration (inherent
included; the IEC 60601-1-3 minimum of 2.5 mm Al is assumed when the room has
none) plus the added filters the event itself records, and the room's active
calibration from QA measurements when there is one. The beam quantities are
computed once per distinct beam (kV to 0.1 kV, filtration, tube, calibration)
in a batch and reused.

Events without kV or mAs (CR readers record 0) keep ``recon_status =
"no_technique"``; CT events are ``"not_applicable"`` (their dose quantities are
CTDIvol and DLP, reported by the scanner); a model failure is
``"failed"`` with its reason in ``notes``, never silently dropped.
"""

from __future__ import annotations

import logging
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

from sqlalchemy import select
from sqlalchemy.orm import Session, sessionmaker

from beamaudit.api.store import models as m

__all__ = ["ReconSummary", "calibration_for_room", "reconstruct_events"]

log = logging.getLogger(__name__)

CHUNK = 500


@dataclass
class ReconSummary:
    reconstructed: int = 0
    no_technique: int = 0
    not_applicable: int = 0
    failed: int = 0

    def as_dict(self) -> dict[str, int]:
        return {
            "reconstructed": self.reconstructed,
            "no_technique": self.no_technique,
            "not_applicable": self.not_applicable,
            "failed": self.failed,
        }


def calibration_for_room(session: Session, room: m.Room | None) -> Any:
    """The room's active :class:`beamaudit.model.RoomCalibration`, or ``None`` (uncalibrated)."""
    from beamaudit.model import RoomCalibration

    if room is None:
        return None
    row = session.scalar(
        select(m.RoomCalibrationRow)
        .where(m.RoomCalibrationRow.room_id == room.id, m.RoomCalibrationRow.active.is_(True))
        .order_by(m.RoomCalibrationRow.created_at.desc(), m.RoomCalibrationRow.id.desc())
        .limit(1)
    )
    if row is None:
        return None
    kwargs: dict[str, Any] = {}
    if row.output_scale_uncertainty_rel is not None:
        kwargs["output_scale_uncertainty_rel"] = row.output_scale_uncertainty_rel
    return RoomCalibration(
        output_scale=row.output_scale,
        inherent_filtration_mm_al=row.inherent_filtration_mm_al,
        calibrated=True,
        anode=_anode_symbol(room.anode_material),
        anode_angle_deg=room.anode_angle_deg,
        ripple_percent=room.ripple_percent,
        source=f"room QA measurements (calibration {row.id}, {row.n_measurements} measurements)",
        **kwargs,
    )


_ANODES = {"tungsten": "W", "molybdenum": "Mo", "rhodium": "Rh"}


def _anode_symbol(material: str | None) -> str:
    return _ANODES.get((material or "tungsten").lower(), material or "W")


class _BeamCache:
    """Beam inputs per distinct beam, computed once per batch."""

    def __init__(self) -> None:
        self._cache: dict[tuple[Any, ...], Any] = {}

    def get(
        self,
        *,
        kvp_kv: float,
        filters: tuple[Any, ...] | None,
        room: m.Room | None,
        calibration: Any,
    ) -> Any:
        from beamaudit.model import BeamInputs, BeamSpec, compute_beam, tissue_to_air_ratio

        anode = _anode_symbol(room.anode_material if room else None)
        angle = room.anode_angle_deg if room else 12.0
        ripple = room.ripple_percent if room else 0.0
        key = (
            round(kvp_kv, 1),
            filters,
            anode,
            angle,
            ripple,
            id(calibration) if calibration else None,
        )
        if key not in self._cache:
            spec = BeamSpec(
                kv=round(kvp_kv, 1),
                filters=filters,
                anode=anode,
                anode_angle_deg=angle,
                ripple_percent=ripple,
            )
            result = compute_beam(spec, calibration=calibration)
            self._cache[key] = BeamInputs.from_beam_result(
                result, tissue_to_air_ratio=float(tissue_to_air_ratio(result))
            )
        return self._cache[key]


def _filters(
    room: m.Room | None, event: m.ExposureEventRow, calibration: Any
) -> tuple[Any, ...] | None:
    """The beam's filtration for the model.

    With a calibration that fitted the room's inherent filtration, only the
    event's added filters are passed (the model adds the fitted inherent
    filtration). Otherwise: the room's configured total filtration (or the
    model's default, assumed) plus the event's added filters.
    """
    from beamaudit.model import FilterSpec, default_filters

    layers: list[Any] = []
    if room is not None and room.filtration:
        layers.extend(FilterSpec(f["material"], float(f["thickness_mm"])) for f in room.filtration)
    event_layers = [
        FilterSpec(f["material"], float(f["thickness_mm"]))
        for f in (event.filters or [])
        if float(f.get("thickness_mm") or 0) > 0
    ]
    if calibration is not None and calibration.inherent_filtration_mm_al is not None:
        return tuple(event_layers)
    if not layers and not event_layers:
        return None
    if not layers:
        layers.extend(default_filters())
    return tuple(layers + event_layers)


def _geometry(event: m.ExposureEventRow, room: m.Room | None) -> Any:
    from beamaudit.model import GeometryInputs, find_exam

    prov = dict(event.provenance or {})
    return GeometryInputs(
        sid_mm=event.sid_mm,
        source_to_patient_mm=event.source_to_patient_mm if event.modality_family != "ct" else None,
        source_to_entrance_mm=event.source_to_entrance_mm,
        source_to_isocenter_mm=event.source_to_isocenter_mm,
        source_to_table_mm=event.source_to_table_mm,
        source_to_reference_point_mm=event.source_to_reference_point_mm,
        body_part_thickness_mm=event.body_part_thickness_mm,
        magnification_factor=event.magnification_factor,
        field_width_mm=event.field_width_mm,
        field_height_mm=event.field_height_mm,
        field_area_cm2=event.field_area_cm2,
        collimator_edges_px=_receptor(event, "collimator_edges_px"),
        imager_pixel_spacing_mm=_receptor(event, "imager_pixel_spacing_mm"),
        detector_dimensions_mm=_receptor(event, "detector_dimensions_mm"),
        exam=find_exam(body_part=event.body_part, view_position=event.view_position),
        table_to_detector_gap_mm=room.table_to_detector_mm if room else None,
        provenance={k: v for k, v in prov.items() if isinstance(v, str)},
    )


def _receptor(event: m.ExposureEventRow, name: str) -> Any:
    value = (event.receptor_geometry or {}).get(name)
    return tuple(float(v) for v in value) if value else None


def reconstruct_events(
    session_factory: sessionmaker[Session], event_ids: Sequence[int]
) -> ReconSummary:
    """Reconstruct the given events (in chunks, one transaction each)."""
    summary = ReconSummary()
    cache = _BeamCache()
    ids = list(event_ids)
    for start in range(0, len(ids), CHUNK):
        chunk = ids[start : start + CHUNK]
        with session_factory.begin() as session:
            rooms: dict[int, m.Room | None] = {}
            calibrations: dict[int, Any] = {}
            for event in session.scalars(
                select(m.ExposureEventRow).where(m.ExposureEventRow.id.in_(chunk))
            ):
                room = None
                if event.room_id is not None:
                    if event.room_id not in rooms:
                        rooms[event.room_id] = session.get(m.Room, event.room_id)
                        calibrations[event.room_id] = calibration_for_room(
                            session, rooms[event.room_id]
                        )
                    room = rooms[event.room_id]
                calibration = calibrations.get(event.room_id) if event.room_id else None
                _reconstruct_one(event, room, calibration, cache, summary)
    return summary


def _reconstruct_one(
    event: m.ExposureEventRow,
    room: m.Room | None,
    calibration: Any,
    cache: _BeamCache,
    summary: ReconSummary,
) -> None:
    from beamaudit.model import ModelError, dose_from_beam

    if event.modality_family == "ct" or event.modality == "CT":
        event.recon_status = "not_applicable"
        summary.not_applicable += 1
        return
    if not event.kvp_kv or not event.exposure_mas:
        event.recon_status = "no_technique"
        summary.no_technique += 1
        return
    try:
        beam = cache.get(
            kvp_kv=event.kvp_kv,
            filters=_filters(room, event, calibration),
            room=room,
            calibration=calibration,
        )
        dose = dose_from_beam(
            beam,
            exposure_mas=event.exposure_mas,
            geometry=_geometry(event, room),
            reported_dap_gy_cm2=event.dap_gy_cm2,
            reported_entrance_dose_mgy=event.entrance_dose_mgy,
            entrance_dose_derivation=event.entrance_dose_derivation,
            reported_reference_point_air_kerma_mgy=event.reference_point_air_kerma_mgy,
        )
    except ModelError as exc:
        event.recon_status = "failed"
        event.notes = [*(event.notes or []), f"reconstruction failed: {exc}"]
        summary.failed += 1
        return
    event.recon_status = "ok"
    event.recon_hvl1_mm_al = dose.hvl1_mm_al
    event.recon_output_ugy_per_mas_1m = dose.output_ugy_per_mas_1m
    event.recon_incident_air_kerma_mgy = dose.incident_air_kerma.value
    event.recon_dap_gy_cm2 = dose.dap.value
    event.recon_dap_u_gy_cm2 = dose.dap.standard_uncertainty
    event.recon_esak_mgy = dose.esak.value if dose.esak else None
    event.recon_esak_u_mgy = dose.esak.standard_uncertainty if dose.esak else None
    event.recon_entrance_dose_mgy = dose.entrance_dose.value if dose.entrance_dose else None
    event.recon_backscatter_factor = (
        dose.backscatter_factor.value if dose.backscatter_factor else None
    )
    event.recon_fsd_mm = dose.fsd.value
    event.recon_calibrated = dose.calibrated
    event.dap_ratio_reported_to_recon = (
        event.dap_gy_cm2 / dose.dap.value if event.dap_gy_cm2 and dose.dap.value else None
    )
    event.recon_trail = dose.as_dict()
    summary.reconstructed += 1


def beam_for_event(session: Session, event: m.ExposureEventRow) -> Any:
    """The beam (spectrum, HVL, output) the model used for ``event``, or None without technique."""
    from beamaudit.model import BeamSpec, ModelError, compute_beam

    if not event.kvp_kv or event.modality_family == "ct":
        return None
    room = session.get(m.Room, event.room_id) if event.room_id else None
    calibration = calibration_for_room(session, room)
    try:
        return compute_beam(
            BeamSpec(
                kv=round(event.kvp_kv, 1),
                filters=_filters(room, event, calibration),
                anode=_anode_symbol(room.anode_material if room else None),
                anode_angle_deg=room.anode_angle_deg if room else 12.0,
                ripple_percent=room.ripple_percent if room else 0.0,
            ),
            calibration=calibration,
        )
    except ModelError:
        return None
