"""Reconstruction: run the beam and dose model over stored exposure events.

For every projection event that records its technique (kV and mAs) the
model's figures are written beside the reported ones: HVL, tube output,
incident and entrance surface air kerma, entrance dose, DAP, their
uncertainties, the reported/reconstructed DAP ratio and the why trail.

The beam of a room is the room's configured total filtration (inherent
included; the IEC 60601-1-3 minimum of 2.5 mm Al is assumed, and said in the
trail, when the room has none) plus the added filters the event itself records,
and the room's active calibration from QA measurements when there is one. With
the tube below the table (the room's ``tube_side``; for XA and RF when the room
does not say, assumed) the table top and mattress are in the beam: the room's
``table_transmission`` (measured) or ``table_filtration`` (layers), else the
model's documented default (assumed). The beam quantities are computed once per
distinct beam (kV to 0.1 kV, filtration, tube, calibration, table) in a batch
and reused.

Distances are read by what their IOD defines: Distance Source to Patient
(0018,1111) is to the table side in DX, CR and MG images and to the isocentre
in XA and XRF images (DICOM PS3.3 C.8.7.5, C.8.7.6), where the entrance surface
is taken half a patient thickness before the isocentre.

Events without kV or mAs (CR readers record 0) keep ``recon_status =
"no_technique"``; CT events are ``"not_applicable"`` (their dose quantities are
CTDIvol and DLP, reported by the scanner); a model failure is
``"failed"`` with its reason in ``notes``, never silently dropped.
"""

from __future__ import annotations

import json
import logging
import math
import pickle
import threading
from collections import OrderedDict
from collections.abc import Callable, Iterable, Sequence
from dataclasses import dataclass
from functools import cache, lru_cache
from typing import Any, cast

from sqlalchemy import Table, select, update
from sqlalchemy.orm import Session, sessionmaker

from beamaudit.api.intake.mammography import (
    MAMMOGRAPHY_FIGURES_CLEARED,
    is_mammography,
    mammography_beam,
    mammography_figures,
    mammography_trail,
)
from beamaudit.api.store import models as m
from beamaudit.api.store.bulk import update_rows

__all__ = [
    "FIGURES_CLEARED",
    "RECIPE_KIND",
    "ReconSummary",
    "RoomBeams",
    "anode_symbol",
    "calibration_for_room",
    "figures",
    "reconstruct_events",
    "room_patient_support",
    "trail_for_event",
    "warm_up",
]

log = logging.getLogger(__name__)

CHUNK = 500


@dataclass
class ReconSummary:
    reconstructed: int = 0
    no_technique: int = 0
    not_applicable: int = 0
    failed: int = 0

    def add(self, status: str, n: int = 1) -> None:
        """Count ``n`` events that ended with ``status`` (``recon_status``; ``ok`` counts as
        reconstructed, anything unknown as failed)."""
        if status == "ok":
            self.reconstructed += n
        elif status == "no_technique":
            self.no_technique += n
        elif status == "not_applicable":
            self.not_applicable += n
        else:
            self.failed += n

    def as_dict(self) -> dict[str, int]:
        return {
            "reconstructed": self.reconstructed,
            "no_technique": self.no_technique,
            "not_applicable": self.not_applicable,
            "failed": self.failed,
        }


def calibration_for_room(session: Session, room: m.Room | None) -> Any:
    """The room's active :class:`beamaudit.model.RoomCalibration`, or ``None`` (uncalibrated)."""
    if room is None:
        return None
    return _calibration_from_row(_active_calibration_row(session, room.id), room)


def _calibration_from_row(row: m.RoomCalibrationRow | None, room: m.Room | None) -> Any:
    from beamaudit.model import RoomCalibration

    if row is None or room is None:
        return None
    kwargs: dict[str, Any] = {}
    if row.output_scale_uncertainty_rel is not None:
        kwargs["output_scale_uncertainty_rel"] = row.output_scale_uncertainty_rel
    return RoomCalibration(
        output_scale=row.output_scale,
        inherent_filtration_mm_al=row.inherent_filtration_mm_al,
        calibrated=True,
        anode=anode_symbol(room.anode_material),
        anode_angle_deg=room.anode_angle_deg,
        ripple_percent=room.ripple_percent,
        source=f"room QA measurements (calibration {row.id}, {row.n_measurements} measurements)",
        **kwargs,
    )


_ANODES = {"tungsten": "W", "molybdenum": "Mo", "rhodium": "Rh", "silver": "Ag"}


def anode_symbol(material: str | None) -> str:
    """The anode's chemical symbol from the room's anode material (tungsten when not known)."""
    return _ANODES.get((material or "tungsten").lower(), material or "W")


class _BeamCache:
    """Beam inputs per distinct beam, computed once per batch (or, bounded by ``limit``, once
    per process: the beams of the why trails that the event pages make again).

    Threads share it (the API's thread pool): a beam not computed yet is computed by one thread
    while the others that need it wait, rather than every request of a burst computing it again.
    """

    def __init__(self, limit: int | None = None) -> None:
        self._cache: dict[tuple[Any, ...], Any] = {}
        self._limit = limit
        self._lock = threading.Lock()

    def get(
        self,
        *,
        kvp_kv: float,
        filters: tuple[Any, ...] | None,
        room: m.Room | None,
        calibration: Any,
        support: Any = None,
        notes: tuple[str, ...] = (),
    ) -> Any:
        from dataclasses import replace

        from beamaudit.model import BeamInputs, BeamSpec, compute_beam
        from beamaudit.model.beam_quality import beam_quality_uncertainty

        anode = anode_symbol(room.anode_material if room else None)
        angle = room.anode_angle_deg if room else 12.0
        ripple = room.ripple_percent if room else 0.0
        key = (
            round(kvp_kv, 1),
            filters,
            anode,
            angle,
            ripple,
            calibration,  # a frozen dataclass: equal calibrations give equal beams
            support,
            notes,
        )
        found = self._cache.get(key)
        if found is not None:
            return found
        with self._lock:  # one thread computes a beam; the others wait for it (GIL-bound work)
            found = self._cache.get(key)
            if found is None:
                if self._limit is not None and len(self._cache) >= self._limit:
                    self._cache.clear()  # a bound, not an LRU: few rooms make few distinct beams
                spec = BeamSpec(
                    kv=round(kvp_kv, 1),
                    filters=filters,
                    anode=anode,
                    anode_angle_deg=angle,
                    ripple_percent=ripple,
                )
                result = compute_beam(spec, calibration=calibration)
                # the HVL's uncertainty from the tube voltage, filtration and attenuation data
                # (the beam model alone gives it none without them): it enters B's uncertainty
                quality = beam_quality_uncertainty(spec, calibration=calibration)
                found = replace(
                    BeamInputs.from_beam_result(result, patient_support=support, assumptions=notes),
                    hvl1_standard_uncertainty_mm_al=quality.standard_uncertainties["hvl1_mm_al"],
                    hvl1_uncertainty_method=quality.method,
                )
                self._cache[key] = found
        return found


#: The beams of the why trails made again for one event at a time (the event page, the REST
#: event): the same beam inputs as a batch's, kept per process so that a page of a room's events
#: computes each distinct beam once. Beam inputs are not changed by the dose model.
_TRAIL_BEAMS = _BeamCache(limit=256)

#: what the model assumes for an event that belongs to no room
_NO_ROOM_NOTE = "no room known: a tungsten anode of 12 degrees at constant potential assumed"
#: what the model assumes when a room records added filters but no total filtration
_DEFAULT_INHERENT_NOTE = (
    "the room has no filtration configured: {al:g} mm Al (IEC 60601-1-3 minimum) assumed in "
    "front of the event's added filters"
)


def _filters(
    room: m.Room | None, event: Any, calibration: Any
) -> tuple[tuple[Any, ...] | None, tuple[str, ...]]:
    """The beam's filtration for the model, and what it assumed.

    With a calibration that fitted the room's inherent filtration, only the
    event's added filters are passed (the model adds the fitted inherent
    filtration). Otherwise: the room's configured total filtration (or the
    model's default, assumed) plus the event's added filters.
    """
    from beamaudit.model import DEFAULT_TOTAL_FILTRATION_MM_AL, FilterSpec, default_filters

    layers: list[Any] = []
    if room is not None and room.filtration:
        layers.extend(FilterSpec(f["material"], float(f["thickness_mm"])) for f in room.filtration)
    event_layers = [
        FilterSpec(f["material"], float(f["thickness_mm"]))
        for f in (event.filters or [])
        if float(f.get("thickness_mm") or 0) > 0
    ]
    if calibration is not None and calibration.inherent_filtration_mm_al is not None:
        return tuple(event_layers), ()
    if not layers and not event_layers:
        return None, ()  # the model's default, noted by the model
    notes: tuple[str, ...] = ()
    if not layers:
        layers.extend(default_filters())
        notes = (_DEFAULT_INHERENT_NOTE.format(al=DEFAULT_TOTAL_FILTRATION_MM_AL),)
    return tuple(layers + event_layers), notes


#: modalities whose image headers give Distance Source to Patient (0018,1111) as the distance
#: from the source to the isocentre (DICOM PS3.3 C.8.7.5 XA Positioner Module; the XRF
#: Positioner Module C.8.7.6 the same, from memory); elsewhere it is to the table side
_ISOCENTRE_MODALITIES = frozenset({"XA", "RF"})
_ISOCENTRE_PROVENANCE = (
    "(0018,1111) DistanceSourceToPatient, source to isocentre in XA and XRF images "
    "(DICOM PS3.3 C.8.7.5 XA Positioner, C.8.7.6 XRF Positioner)"
)
#: modalities whose tube is taken as below the table when the room does not say
_UNDER_COUCH_MODALITIES = frozenset({"XA", "RF"})


def _tube_side(room: m.Room | None, event: Any) -> tuple[str, str | None]:
    """The tube's side of the table for ``event``, and the assumption when the room is silent."""
    if room is not None and room.tube_side in ("above", "below"):
        return room.tube_side, None
    modality = (event.modality or "").upper()
    if modality in _UNDER_COUCH_MODALITIES:
        return "below", (
            f"tube taken as below the table (the usual for {modality}; the room does not say)"
        )
    return "above", None


def room_patient_support(room: m.Room | None, side: str) -> Any:
    """The room's table top and mattress in the beam of a tube below the table, or None."""
    from beamaudit.model import FilterSpec
    from beamaudit.model.patient_support import PatientSupport, default_patient_support

    if side != "below":
        return None
    if room is not None and room.table_transmission is not None:
        return PatientSupport(
            measured_transmission=float(room.table_transmission),
            source="room configuration (measured table transmission)",
        )
    if room is not None and room.table_filtration:
        return PatientSupport(
            layers=tuple(
                FilterSpec(f["material"], float(f["thickness_mm"])) for f in room.table_filtration
            ),
            source="room configuration (table top and mattress)",
        )
    return default_patient_support()


def _filters_key(filters: Any) -> Any:
    """A hashable stand-in for an event's recorded filters (a list of dicts, or nothing)."""
    if not filters:
        return None
    return tuple((f.get("material"), f.get("thickness_mm")) for f in filters)


@lru_cache(maxsize=4096)
def _exam(body_part: str | None, view_position: str | None) -> str | None:
    from beamaudit.model import find_exam

    return find_exam(body_part=body_part, view_position=view_position)


def _texts(provenance: dict[str, Any]) -> dict[str, Any]:
    """The provenance the model's trail can name: every value a text (a stored event's JSON
    could hold anything; what ingest writes is texts only, checked at C speed)."""
    try:
        "".join(provenance.values())
    except TypeError:
        return {k: v for k, v in provenance.items() if isinstance(v, str)}
    return provenance


def _geometry(event: Any, room: m.Room | None) -> Any:
    GeometryInputs = _model().GeometryInputs  # the model's class

    prov = dict(_texts(event.provenance or {}))
    to_patient = event.source_to_patient_mm if event.modality_family != "ct" else None
    to_isocentre = event.source_to_isocenter_mm
    if (event.modality or "").upper() in _ISOCENTRE_MODALITIES and to_patient is not None:
        # (0018,1111) of an XA or XRF image is the distance to the isocentre, not to the table
        if to_isocentre is None:
            to_isocentre = to_patient
            prov["source_to_isocenter_mm"] = _ISOCENTRE_PROVENANCE
        to_patient = None
    side, _ = _tube_side(room, event)
    return GeometryInputs(
        sid_mm=event.sid_mm,
        source_to_patient_mm=to_patient,
        source_to_entrance_mm=event.source_to_entrance_mm,
        source_to_isocenter_mm=to_isocentre,
        source_to_table_mm=event.source_to_table_mm,
        tube_side=side,
        source_to_reference_point_mm=event.source_to_reference_point_mm,
        body_part_thickness_mm=event.body_part_thickness_mm,
        magnification_factor=event.magnification_factor,
        field_width_mm=event.field_width_mm,
        field_height_mm=event.field_height_mm,
        field_area_cm2=event.field_area_cm2,
        collimator_edges_px=_receptor(event, "collimator_edges_px"),
        imager_pixel_spacing_mm=_receptor(event, "imager_pixel_spacing_mm"),
        detector_dimensions_mm=_receptor(event, "detector_dimensions_mm"),
        exam=_exam(event.body_part, event.view_position),
        table_to_detector_gap_mm=room.table_to_detector_mm if room else None,
        provenance=prov,
    )


@cache
def _model() -> Any:
    """``beamaudit.model``, imported on first use (it loads NumPy, SciPy and xraylib)."""
    import beamaudit.model

    return beamaudit.model


def _receptor(event: Any, name: str) -> Any:
    value = (event.receptor_geometry or {}).get(name)
    return tuple(float(v) for v in value) if value else None


#: columns of an event the model reads
_INPUT_COLUMNS = (
    "id",
    "room_id",
    "modality",
    "modality_family",
    "kvp_kv",
    "exposure_mas",
    "filters",
    "provenance",
    "notes",
    "receptor_geometry",
    "sid_mm",
    "source_to_patient_mm",
    "source_to_entrance_mm",
    "source_to_isocenter_mm",
    "source_to_table_mm",
    "source_to_reference_point_mm",
    "body_part_thickness_mm",
    "magnification_factor",
    "field_width_mm",
    "field_height_mm",
    "field_area_cm2",
    "body_part",
    "view_position",
    "dap_gy_cm2",
    # mammography (beamaudit.api.mammography)
    "anode_material",
    "patient_age_years",
    "mammography_acquisition",
    "tomo_scan_arc_deg",
    "tomo_projections",
    "organ_dose_mgy",
    "organ_exposed",
)

#: stored figures: column <- BulkDose attribute
_FIGURE_COLUMNS = {
    "recon_hvl1_mm_al": "hvl1_mm_al",
    "recon_output_ugy_per_mas_1m": "output_ugy_per_mas_1m",
    "recon_incident_air_kerma_mgy": "incident_air_kerma_mgy",
    "recon_dap_gy_cm2": "dap_gy_cm2",
    "recon_dap_u_gy_cm2": "dap_standard_uncertainty_gy_cm2",
    "recon_esak_mgy": "esak_mgy",
    "recon_esak_u_mgy": "esak_standard_uncertainty_mgy",
    "recon_entrance_dose_mgy": "entrance_dose_mgy",
    "recon_backscatter_factor": "backscatter_factor",
    "recon_fsd_mm": "fsd_mm",
}

#: what ``recon_trail`` holds for figures made in bulk: how to make the trail again
RECIPE_KIND = "recipe"


def _table(model: type[Any]) -> Table:
    """The Core table of a mapped class (typed for set-wise statements)."""
    return cast(Table, model.__table__)


#: what of a room the model uses (its snapshot in a recipe)
_ROOM_BEAM_COLUMNS = (
    "anode_material",
    "anode_angle_deg",
    "ripple_percent",
    "filtration",
    "table_to_detector_mm",
    "tube_side",
    "table_filtration",
    "table_transmission",
)
#: what of a calibration the model uses
_CALIBRATION_COLUMNS = (
    "output_scale",
    "output_scale_uncertainty_rel",
    "inherent_filtration_mm_al",
    "n_measurements",
)


def _room_snapshot(room: Any) -> dict[str, Any] | None:
    if room is None:
        return None
    return {
        "id": room.id,
        "anode_material": room.anode_material,
        "anode_angle_deg": room.anode_angle_deg,
        "ripple_percent": room.ripple_percent,
        "filtration": room.filtration,
        "table_to_detector_mm": room.table_to_detector_mm,
        "tube_side": room.tube_side,
        "table_filtration": room.table_filtration,
        "table_transmission": room.table_transmission,
    }


def _calibration_snapshot(row: Any) -> dict[str, Any] | None:
    if row is None:
        return None
    return {
        "id": row.id,
        "output_scale": row.output_scale,
        "output_scale_uncertainty_rel": row.output_scale_uncertainty_rel,
        "inherent_filtration_mm_al": row.inherent_filtration_mm_al,
        "n_measurements": row.n_measurements,
    }


def _active_calibration_rows(session: Session, room_ids: list[int]) -> dict[int, Any]:
    """Each room's active calibration (its columns the model uses), as
    :func:`_active_calibration_row` picks it."""
    t = _table(m.RoomCalibrationRow)
    out: dict[int, Any] = {}
    for row in session.execute(
        select(t.c.id, t.c.room_id, *(t.c[n] for n in _CALIBRATION_COLUMNS))
        .where(t.c.room_id.in_(room_ids), t.c.active.is_(True))
        .order_by(t.c.room_id, t.c.created_at.desc(), t.c.id.desc())
    ):
        out.setdefault(row.room_id, row)
    return out


def _active_calibration_row(session: Session, room_id: int) -> m.RoomCalibrationRow | None:
    return session.scalar(
        select(m.RoomCalibrationRow)
        .where(m.RoomCalibrationRow.room_id == room_id, m.RoomCalibrationRow.active.is_(True))
        .order_by(m.RoomCalibrationRow.created_at.desc(), m.RoomCalibrationRow.id.desc())
        .limit(1)
    )


def reconstruct_events(
    session_factory: sessionmaker[Session], event_ids: Sequence[int]
) -> ReconSummary:
    """Reconstruct the given events (in chunks, one transaction each).

    The figures of a chunk are computed together (:func:`beamaudit.model.dose_from_beams`) and
    written with one statement per kind of outcome. The why trail is not stored per event:
    ``recon_trail`` keeps the recipe (room configuration and calibration as used, model
    version), from which :func:`trail_for_event` makes the full trail again on demand.
    """
    summary = ReconSummary()
    rooms = RoomBeams()
    ids = list(event_ids)
    for start in range(0, len(ids), CHUNK):
        chunk = ids[start : start + CHUNK]
        with session_factory.begin() as session:
            rooms.load(session, _room_ids(session, chunk))
            _reconstruct_chunk(session, chunk, rooms, summary)
    return summary


class RoomBeams:
    """The rooms' beam configurations and active calibrations, as the model takes them.

    Loaded once per room (detached copies: they outlive the transaction that read them), with
    the beams computed so far (one per distinct beam), for one run of reconstruction: a scan,
    one chunk of stored events.
    """

    def __init__(self) -> None:
        self.rooms: dict[int, m.Room | None] = {}
        self.calibrations: dict[int, Any] = {}
        self.recipes: dict[int | None, dict[str, Any]] = {}
        self.cache = _BeamCache()

    def load(self, session: Session, room_ids: Iterable[int]) -> None:
        """Read the rooms not read yet (two queries, whatever their number)."""
        wanted = sorted({r for r in room_ids if r not in self.rooms})
        if not wanted:
            return
        t = _table(m.Room)
        columns = [t.c[n] for n in ("id", *_ROOM_BEAM_COLUMNS)]
        found = {r.id: r for r in session.execute(select(*columns).where(t.c.id.in_(wanted)))}
        active = _active_calibration_rows(session, wanted)
        for room_id in wanted:
            recipe = _recipe(found.get(room_id), active.get(room_id))
            room = _room_from_snapshot(recipe["room"])
            self.rooms[room_id] = room
            self.calibrations[room_id] = _calibration_from_snapshot(recipe["calibration"], room)
            self.recipes[room_id] = recipe


def _room_ids(session: Session, chunk: list[int]) -> set[int]:
    ev = _table(m.ExposureEventRow)
    return {
        r
        for r in session.scalars(
            select(ev.c.room_id).where(ev.c.id.in_(chunk), ev.c.room_id.is_not(None)).distinct()
        )
    }


def _recipe(room: Any, calibration: Any) -> dict[str, Any]:
    from beamaudit import __version__

    return {
        "kind": RECIPE_KIND,
        "software_version": __version__,
        "room": _room_snapshot(room),
        "calibration": _calibration_snapshot(calibration),
    }


#: the figure columns, as a reconstruction that ends without figures leaves them
FIGURES_CLEARED: dict[str, Any] = (
    {col: None for col in (*_FIGURE_COLUMNS, "recon_calibrated")}
    | {
        "dap_ratio_reported_to_recon": None,
        "recon_trail": None,
    }
    | MAMMOGRAPHY_FIGURES_CLEARED
)


def figures(events: Sequence[Any], rooms: RoomBeams) -> list[dict[str, Any]]:
    """The reconstruction columns of each event, in order.

    ``events`` are stored rows or rows about to be stored: anything with the attributes of
    :data:`_INPUT_COLUMNS` (``id`` aside). Each dict holds ``recon_status`` (``ok``,
    ``not_applicable`` for CT, ``no_technique`` without kV or mAs, ``failed``) and, for
    ``ok``, the figures, ``recon_calibrated``, ``dap_ratio_reported_to_recon`` and
    ``recon_trail`` (the recipe); for ``failed``, ``notes`` with the event's notes and the
    reason appended. The rooms of the events must be loaded in ``rooms``.
    """
    from beamaudit.model import ModelError, dose_from_beams

    out: list[dict[str, Any]] = []
    todo: list[int] = []
    beams: list[Any] = []
    geometries: list[Any] = []
    # the beam of an event depends on its room, kV and added filters only: one look-up each
    beam_of: dict[tuple[Any, ...], Any] = {}
    for k, event in enumerate(events):
        room = rooms.rooms.get(event.room_id) if event.room_id is not None else None
        if event.modality_family == "ct" or event.modality == "CT":
            out.append({"recon_status": "not_applicable"})
            continue
        if not event.kvp_kv or not event.exposure_mas:
            out.append({"recon_status": "no_technique"})
            continue
        if is_mammography(event):  # the Dance method's figures, not the radiography ones
            out.append(_mammography(event, room, rooms))
            continue
        key = (
            event.room_id,
            event.kvp_kv,
            _filters_key(event.filters),
            _tube_side(room, event),
        )
        if key not in beam_of:
            beam_of[key] = _beam(event, room, rooms)
        beam = beam_of[key]
        try:
            if isinstance(beam, ModelError):
                raise beam
            geometry = _geometry(event, room)
        except ModelError as exc:
            out.append(_failure(event, exc))
            continue
        out.append({})
        todo.append(k)
        beams.append(beam)
        geometries.append(geometry)
    if todo:
        bulk = dose_from_beams(
            beams, exposure_mas=[events[k].exposure_mas for k in todo], geometries=geometries
        )
        names = tuple(_FIGURE_COLUMNS)
        # per event, the figures as Python floats, None where not finite
        rows = zip(*(_finite_list(getattr(bulk, a)) for a in _FIGURE_COLUMNS.values()), strict=True)
        for i, (k, figures_row) in enumerate(zip(todo, rows, strict=True)):
            event = events[k]
            error = bulk.errors[i]
            if error is not None:
                out[k] = _failure(event, error)
                continue
            values: dict[str, Any] = {
                "recon_status": "ok",
                **dict(zip(names, figures_row, strict=True)),
            }
            dap = values["recon_dap_gy_cm2"]
            values["recon_calibrated"] = bool(bulk.calibrated[i])
            values["dap_ratio_reported_to_recon"] = (
                event.dap_gy_cm2 / dap if event.dap_gy_cm2 and dap else None
            )
            values["recon_trail"] = rooms.recipes.get(event.room_id) or _recipe(None, None)
            out[k] = values
    return out


def _mammography(event: Any, room: Any, rooms: RoomBeams) -> dict[str, Any]:
    from beamaudit.model import ModelError

    calibration = rooms.calibrations.get(event.room_id) if event.room_id is not None else None
    recipe = rooms.recipes.get(event.room_id) or _recipe(None, None)
    try:
        return mammography_figures(event, room, calibration, recipe)
    except ModelError as exc:
        return _failure(event, exc)


def _beam(event: Any, room: Any, rooms: RoomBeams) -> Any:
    """The beam of ``event`` in ``room``, or the model's error (kept for the events that share
    the beam)."""
    from beamaudit.model import ModelError

    calibration = rooms.calibrations.get(event.room_id) if event.room_id is not None else None
    try:
        return _event_beam(event, room, calibration, rooms.cache)
    except ModelError as exc:
        return exc


def _event_beam(event: Any, room: Any, calibration: Any, cache: _BeamCache) -> Any:
    """The model's beam inputs of ``event`` in ``room``: filtration, calibration, and the table
    top and mattress when the tube is below the table, with what was assumed."""
    filters, notes = _filters(room, event, calibration)
    side, side_note = _tube_side(room, event)
    if room is None:
        notes += (_NO_ROOM_NOTE,)
    return cache.get(
        kvp_kv=event.kvp_kv,
        filters=filters,
        room=room,
        calibration=calibration,
        support=room_patient_support(room, side),
        notes=notes + ((side_note,) if side_note else ()),
    )


def _reconstruct_chunk(
    session: Session, chunk: list[int], rooms: RoomBeams, summary: ReconSummary
) -> None:
    ev = _table(m.ExposureEventRow)
    events = session.execute(
        select(*(ev.c[name] for name in _INPUT_COLUMNS)).where(ev.c.id.in_(chunk))
    ).all()
    by_status: dict[str, list[int]] = {"not_applicable": [], "no_technique": []}
    done: list[dict[str, Any]] = []
    failed: list[dict[str, Any]] = []
    for event, values in zip(events, figures(events, rooms), strict=True):
        status = values["recon_status"]
        if status in by_status:
            by_status[status].append(event.id)
        elif status == "ok":
            done.append(values | {"id": event.id})
        else:
            failed.append(values | FIGURES_CLEARED | {"id": event.id})
    for status, event_ids in by_status.items():
        for part in _id_chunks(event_ids):
            session.execute(
                update(ev).where(ev.c.id.in_(part)).values(recon_status=status, **FIGURES_CLEARED)
            )
    conn = session.connection()
    update_rows(conn, ev, done)
    update_rows(conn, ev, failed)
    summary.add("ok", len(done))
    for status, event_ids in by_status.items():
        summary.add(status, len(event_ids))
    summary.add("failed", len(failed))


def _failure(event: Any, error: Any) -> dict[str, Any]:
    return {
        "recon_status": "failed",
        "notes": [*(event.notes or []), f"reconstruction failed: {error}"],
    }


def _finite_list(values: Any) -> list[float | None]:
    """The values as Python floats, ``None`` for NaN and infinities."""
    isfinite = math.isfinite
    return [x if isfinite(x) else None for x in map(float, values)]


def _id_chunks(ids: list[int], size: int = 500) -> Iterable[list[int]]:
    for start in range(0, len(ids), size):
        yield ids[start : start + size]


def warm_up() -> None:
    """Load the model's data tables (attenuation, backscatter, spectra) by making one trail's beam
    and dose, and set up the store's ORM mappings, so that a serving process pays for them before
    its first request rather than under its first burst of requests (about a second of CPU per
    process)."""
    from sqlalchemy.orm import configure_mappers

    from beamaudit.model import GeometryInputs, dose_from_beam

    beam = _TRAIL_BEAMS.get(kvp_kv=80.0, filters=None, room=None, calibration=None)
    dose_from_beam(beam, exposure_mas=10.0, geometry=GeometryInputs(sid_mm=1000.0))
    configure_mappers()  # the store's ORM classes, otherwise set up by the first query


def trail_for_event(session: Session, event: m.ExposureEventRow) -> dict[str, Any] | None:
    """The why trail of an event's reconstructed figures (``ExposureDose.as_dict()``).

    Figures made in bulk keep only their recipe (the room's beam configuration and calibration
    as they were used); the trail is made again from it and the event's own stored inputs with
    :func:`beamaudit.model.dose_from_beam`, the same model as the stored figures. Should the
    result differ from what is stored (another software version made the figures), the trail
    says so in its ``notes``. Events reconstructed with a stored trail return it as it is.
    """
    stored = event.recon_trail
    if not stored or stored.get("kind") != RECIPE_KIND:
        return stored
    if event.recon_status != "ok" or not event.kvp_kv or not event.exposure_mas:
        return None
    room = _room_from_snapshot(stored.get("room"))
    calibration = _calibration_from_snapshot(stored.get("calibration"), room)
    if is_mammography(event):
        return _mammography_trail(event, room, calibration, stored)
    mas = event.exposure_mas
    return _TRAILS.made(event, lambda: _trail_made_again(event, mas, room, calibration, stored))


def _trail_made_again(
    event: m.ExposureEventRow,
    exposure_mas: float,
    room: m.Room | None,
    calibration: Any,
    stored: dict[str, Any],
) -> dict[str, Any]:
    """The trail of a radiograph or fluoroscopy event made again from its recipe (its
    ``exposure_mas`` given: the caller checked that it has one)."""
    from beamaudit.model import ModelError, dose_from_beam

    try:
        beam = _event_beam(event, room, calibration, _TRAIL_BEAMS)
        dose = dose_from_beam(
            beam,
            exposure_mas=exposure_mas,
            geometry=_geometry(event, room),
            reported_dap_gy_cm2=event.dap_gy_cm2,
            reported_entrance_dose_mgy=event.entrance_dose_mgy,
            entrance_dose_derivation=event.entrance_dose_derivation,
            reported_reference_point_air_kerma_mgy=event.reference_point_air_kerma_mgy,
        )
    except ModelError as exc:
        return {"notes": [f"the trail could not be made again: {exc}"], "recipe": stored}
    out: dict[str, Any] = dose.as_dict()
    out["recipe"] = stored
    for name, unit, stored_value, now in (
        ("DAP", "Gy·cm²", event.recon_dap_gy_cm2, dose.dap.value),
        ("incident air kerma", "mGy", event.recon_incident_air_kerma_mgy,
         dose.incident_air_kerma.value),
    ):  # fmt: skip
        if stored_value and not math.isclose(now, stored_value, rel_tol=1e-9):
            out.setdefault("notes", []).append(
                f"the stored {name} ({stored_value:.6g} {unit}) was made by software version "
                f"{stored.get('software_version')}; this trail, made now, gives {now:.6g} {unit}"
            )
    return out


class _TrailsMade:
    """Trails made again, kept per process for the events last shown (a page or an API client
    asks for the same event again): keyed by the event's every stored value, so a changed
    event (reconstructed again, completed, another recipe) is made again; each caller gets its
    own copy. The model's data tables do not change while a process runs.

    A trail is kept pickled and each caller gets it unpickled: a copy of its own, made in an
    eighth of the time of ``copy.deepcopy`` (the copy of a radiograph's trail, its spectrum
    and steps, had been nearly half the time spent answering for one event)."""

    def __init__(self, size: int) -> None:
        self._size = size
        self._kept: OrderedDict[tuple[Any, ...], bytes] = OrderedDict()
        self._lock = threading.Lock()

    @staticmethod
    def key(event: m.ExposureEventRow) -> tuple[Any, ...]:
        values: list[Any] = []
        for column in event.__table__.columns:
            value = getattr(event, column.key)
            if isinstance(value, dict | list):
                value = json.dumps(value, sort_keys=True, default=str)
            values.append(value)
        return tuple(values)

    def made(self, event: m.ExposureEventRow, make: Callable[[], dict[str, Any]]) -> dict[str, Any]:
        key = self.key(event)
        with self._lock:
            kept = self._kept.get(key)
            if kept is not None:
                self._kept.move_to_end(key)
        if kept is not None:
            trail: dict[str, Any] = pickle.loads(kept)
            return trail
        trail = make()
        pickled = pickle.dumps(trail, protocol=pickle.HIGHEST_PROTOCOL)
        with self._lock:
            self._kept[key] = pickled
            while len(self._kept) > self._size:
                self._kept.popitem(last=False)
        return trail


#: the trails of the last 512 events shown
_TRAILS = _TrailsMade(512)


def _mammography_trail(
    event: m.ExposureEventRow, room: m.Room | None, calibration: Any, stored: dict[str, Any]
) -> dict[str, Any]:
    from beamaudit.model import ModelError

    try:
        out = mammography_trail(event, room, calibration)
    except ModelError as exc:
        return {"notes": [f"the trail could not be made again: {exc}"], "recipe": stored}
    out["recipe"] = stored
    now, kept = out["mgd_mgy"], event.recon_mgd_mgy
    if kept and not math.isclose(now, kept, rel_tol=1e-9):
        out.setdefault("notes", []).append(
            f"the stored mean glandular dose ({kept:.6g} mGy) was made by software version "
            f"{stored.get('software_version')}; this trail, made now, gives {now:.6g} mGy"
        )
    return out


def _room_from_snapshot(snapshot: dict[str, Any] | None) -> m.Room | None:
    if not snapshot:
        return None
    return m.Room(
        id=snapshot.get("id"),
        name="(as used)",
        anode_material=snapshot.get("anode_material") or "tungsten",
        anode_angle_deg=snapshot.get("anode_angle_deg", 12.0),
        ripple_percent=snapshot.get("ripple_percent", 0.0),
        filtration=snapshot.get("filtration"),
        table_to_detector_mm=snapshot.get("table_to_detector_mm"),
        tube_side=snapshot.get("tube_side"),
        table_filtration=snapshot.get("table_filtration"),
        table_transmission=snapshot.get("table_transmission"),
    )


def _calibration_from_snapshot(snapshot: dict[str, Any] | None, room: m.Room | None) -> Any:
    if not snapshot:
        return None
    row = m.RoomCalibrationRow(
        id=snapshot.get("id"),
        output_scale=snapshot["output_scale"],
        output_scale_uncertainty_rel=snapshot.get("output_scale_uncertainty_rel"),
        inherent_filtration_mm_al=snapshot.get("inherent_filtration_mm_al"),
        n_measurements=snapshot.get("n_measurements") or 0,
    )
    return _calibration_from_row(row, room)


def beam_for_event(event: m.ExposureEventRow) -> Any:
    """The beam (spectrum, HVL, output) the model used for ``event``, from its stored recipe alone.

    The room's beam configuration and calibration are those of the recipe, as they were when
    the figures were made, not the room's current ones: after a recalibration the exam page's
    spectrum and HVL still agree with the stored figures and the why trail beside them. For a
    mammography event, the beam at the breast's upper surface of the Dance method (its target,
    K-edge filter and paddle: :func:`~beamaudit.api.intake.mammography.mammography_beam`). None
    without technique, for CT, or for an event without a recipe (not reconstructed).
    """
    from beamaudit.model import BeamSpec, ModelError, compute_beam

    recipe = event.recon_trail
    if not event.kvp_kv or event.modality_family == "ct":
        return None
    if not recipe or recipe.get("kind") != RECIPE_KIND:
        return None
    room = _room_from_snapshot(recipe.get("room"))
    calibration = _calibration_from_snapshot(recipe.get("calibration"), room)
    mammography = is_mammography(event)
    key = None
    if not mammography:  # a fluoroscopy study's events share few beams: each made once
        key = (
            json.dumps(recipe, sort_keys=True, default=str),
            round(event.kvp_kv, 1),
            _filters_key(event.filters),
        )
        if key in _EVENT_BEAMS:
            return _EVENT_BEAMS[key]
    try:
        if mammography:  # the breast beam of the Dance method: its target, paddle
            return mammography_beam(event, room, calibration)
        beam = compute_beam(
            BeamSpec(
                kv=round(event.kvp_kv, 1),
                filters=_filters(room, event, calibration)[0],
                anode=anode_symbol(room.anode_material if room else None),
                anode_angle_deg=room.anode_angle_deg if room else 12.0,
                ripple_percent=room.ripple_percent if room else 0.0,
            ),
            calibration=calibration,
        )
    except ModelError:
        return None
    if len(_EVENT_BEAMS) >= _EVENT_BEAMS_LIMIT:
        _EVENT_BEAMS.clear()  # a bound, not an LRU: few rooms make few distinct beams
    _EVENT_BEAMS[key] = beam
    return beam


#: The beams of :func:`beam_for_event` kept per process (the exam page of a fluoroscopy study
#: asks for one per event; its events share a few beams). A beam result is never changed.
_EVENT_BEAMS: dict[Any, Any] = {}
_EVENT_BEAMS_LIMIT = 256
