"""Simulation of the CT scanner and the fluoroscopy room.

CT: each study is a localiser (constant-angle acquisition, no CT Dose container, as scanners
commonly report it) and one helical acquisition whose CTDIvol follows patient weight through
tube-current modulation. The scanner writes a TID 10011 dose report and one image (with CTDIvol)
per helical acquisition.

Fluoroscopy: each study is a few pulsed fluoroscopy runs and spot images; automatic brightness
control raises kV and mA with patient size; every event's DAP and reference-point air kerma come
from the room's tube output (:mod:`beamaudit.api.demo.physics`) and the geometry of an under-couch
tube (reference point 1 cm above the tabletop). The room writes a TID 10001 dose report.

The CT and fluoroscopy outliers of :data:`beamaudit.api.demo.plants.PLANTED` are made here.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from datetime import date, datetime, timedelta
from typing import NamedTuple

import numpy as np

from beamaudit.api.demo.context import SimulationContext, at
from beamaudit.api.demo.physics import STANDARD_WEIGHT_KG, TubeOutput, exposure_dap_gy_cm2
from beamaudit.api.demo.plants import OutlierPlan, PlantedPlan
from beamaudit.api.demo.records import (
    CtAcquisition,
    CtStudy,
    FluoroEvent,
    FluoroStudy,
    Patient,
)
from beamaudit.api.demo.scenario import (
    CT_PROTOCOLS,
    FLUORO_PROTOCOLS,
    CtProtocol,
    FluoroProtocol,
    RoomSpec,
)

__all__ = ["simulate_ct", "simulate_fluoro"]

# ------------------------------------------------------------------------------------------ CT
#: CTDIvol per effective mAs scales with tube voltage about as kV**2.5 (invented rule of thumb).
_CT_KV_EXPONENT = 2.5
_CT_SPREAD = 0.08  # CTDIvol spread at a given weight (modulation, positioning)
_LOCALIZER_KV, _LOCALIZER_MA, _LOCALIZER_SPEED_MM_S = 120.0, 35.0, 100.0
_MODULATION_PEAK = 1.5  # maximum over mean tube current under modulation
#: shares of CT studies whose localizer and axial images every 50 mm are sent ("series"), and
#: whose localizer alone is ("localizer"); the scanner sends one centre image per acquisition
#: of every study
SIZE_SERIES_SHARE = 0.15
LOCALIZER_ONLY_SHARE = 0.15
SIZE_IMAGE_SPACING_MM = 50.0


def _ct_acquisition(
    ctx: SimulationContext,
    study_uid: str,
    index: int,
    protocol: CtProtocol,
    *,
    started: datetime,
    ctdivol_mgy: float,
    length_mm: float,
    modulation: bool,
    label: str,
) -> CtAcquisition:
    total_collimation = protocol.single_collimation_mm * protocol.n_channels
    per_100mas = protocol.ctdi_per_100mas_mgy * (protocol.kvp_kv / 120.0) ** _CT_KV_EXPONENT
    effective_mas = ctdivol_mgy / per_100mas * 100.0
    mean_ma = effective_mas * protocol.pitch / protocol.rotation_time_s
    rotations = length_mm / (protocol.pitch * total_collimation)
    return CtAcquisition(
        event_uid=ctx.uids.uid("event", study_uid, index),
        series_uid=ctx.uids.uid("series", study_uid, index),
        image_sop_uid=ctx.uids.uid("image", study_uid, index),
        started=started,
        protocol=protocol.protocol_name,
        phase_label=label,
        spiral=True,
        kvp_kv=protocol.kvp_kv,
        tube_current_ma=round(mean_ma, 1),
        max_tube_current_ma=round(mean_ma * (_MODULATION_PEAK if modulation else 1.0), 1),
        exposure_time_s=round(rotations * protocol.rotation_time_s, 2),
        rotation_time_s=protocol.rotation_time_s,
        pitch=protocol.pitch,
        single_collimation_mm=protocol.single_collimation_mm,
        total_collimation_mm=total_collimation,
        scanning_length_mm=round(length_mm, 1),
        ctdivol_mgy=round(ctdivol_mgy, 2),
        dlp_mgy_cm=round(ctdivol_mgy * length_mm / 10.0, 1),
        head_phantom=protocol.phantom == "head",
    )


def _ct_study(
    room: RoomSpec,
    ctx: SimulationContext,
    rng: np.random.Generator,
    day: date,
    hour: float,
    protocol: CtProtocol,
    seq: int,
    *,
    runs: int = 1,
    ctdivol_mgy: float | None = None,
    length_mm: float | None = None,
    modulation: bool = True,
    patient: Patient | None = None,
) -> CtStudy:
    if patient is None:
        patient = ctx.patients.patient(day, age_mean_y=room.age_mean_y, age_sd_y=room.age_sd_y)
    accession = f"HB{day:%Y%m%d}5{seq:02d}"
    study_uid = ctx.uids.uid("study", room.key, accession)
    start = at(day, hour)
    localizer = CtAcquisition(
        event_uid=ctx.uids.uid("event", study_uid, 0),
        series_uid=ctx.uids.uid("series", study_uid, 0),
        image_sop_uid=None,
        started=start + timedelta(minutes=1),
        protocol=protocol.protocol_name,
        phase_label="LOCALIZER",
        spiral=False,
        kvp_kv=_LOCALIZER_KV,
        tube_current_ma=_LOCALIZER_MA,
        max_tube_current_ma=_LOCALIZER_MA,
        exposure_time_s=round(protocol.localizer_length_mm / _LOCALIZER_SPEED_MM_S, 2),
        rotation_time_s=None,
        pitch=None,
        single_collimation_mm=protocol.single_collimation_mm,
        total_collimation_mm=2 * protocol.single_collimation_mm,
        scanning_length_mm=protocol.localizer_length_mm,
        ctdivol_mgy=None,
        dlp_mgy_cm=None,
        head_phantom=protocol.phantom == "head",
    )
    study = CtStudy(
        room=room.key,
        study_uid=study_uid,
        accession=accession,
        patient=patient,
        start=start,
        end=start,
        exam_type=protocol.exam_type,
        study_description=protocol.study_description,
        body_part=protocol.body_part,
        target_region=protocol.target_region,
        weight_recorded=bool(rng.random() < room.weight_recorded_fraction),
        frame_of_reference_uid=ctx.uids.uid("frame", study_uid),
        report_sop_uid=ctx.uids.uid("report", study_uid),
        report_series_uid=ctx.uids.uid("report-series", study_uid),
        acquisitions=[localizer],
    )
    size = patient.weight_kg / STANDARD_WEIGHT_KG
    for run in range(runs):
        ctdivol = ctdivol_mgy
        if ctdivol is None:
            ctdivol = protocol.ctdivol_ref_mgy * size**protocol.size_exponent
            ctdivol *= math.exp(rng.normal(0.0, _CT_SPREAD))
        length = length_mm
        if length is None:
            length = float(
                np.clip(
                    rng.normal(protocol.scan_length_mm, protocol.scan_length_sd_mm),
                    0.6 * protocol.scan_length_mm,
                    1.4 * protocol.scan_length_mm,
                )
            )
        label = f"PHASE {run + 1}" if runs > 1 else ""
        when = start + timedelta(minutes=3 + 2 * run)
        study.acquisitions.append(
            _ct_acquisition(
                ctx,
                study_uid,
                run + 1,
                protocol,
                started=when,
                ctdivol_mgy=ctdivol,
                length_mm=length,
                modulation=modulation,
                label=label,
            )
        )
    last = study.acquisitions[-1]
    study.end = last.started + timedelta(seconds=math.ceil(last.exposure_time_s) + 60)
    return study


def _ct_outlier(
    room: RoomSpec, ctx: SimulationContext, rng: np.random.Generator, outlier: OutlierPlan
) -> CtStudy:
    day = ctx.calendar.weekday_on_or_after(outlier.month_index, outlier.day)
    protocol = next(p for p, _ in CT_PROTOCOLS if p.exam_type == outlier.exam_type)
    level = ctx.reference_level(outlier.exam_type, outlier.quantity, day)
    assert level is not None and outlier.quantity == "dlp_mgy_cm"
    runs = 5 if outlier.exam_type == "ct_abdomen_pelvis" else 3
    length = 480.0 if runs == 5 else 360.0
    ctdivol = outlier.target_ratio * level[0] * 10.0 / (runs * length)
    study = _ct_study(
        room,
        ctx,
        rng,
        day,
        13.0,
        protocol,
        90,
        runs=runs,
        ctdivol_mgy=ctdivol,
        length_mm=length,
        modulation=runs == 5,
    )
    study.planted.append(outlier.key)
    return study


#: the invented patient of the recurrent-exposure plant (never drawn by the patient factory)
RECURRENT_PATIENT = Patient(
    patient_id="HB0990001",
    name="Thistlewood^Marlo",
    sex="F",
    birth_date=date(1961, 3, 14),
    height_m=1.66,
    weight_kg=70.0,
)


def _recurrent_studies(
    room: RoomSpec, ctx: SimulationContext, rng: np.random.Generator, plan: PlantedPlan
) -> list[CtStudy]:
    """The recurrent patient's studies, spread evenly over the calendar's weekdays."""
    protocol = next(p for p, _ in CT_PROTOCOLS if p.exam_type == "ct_abdomen_pelvis")
    weekdays = [d for d in ctx.calendar.days() if d.weekday() < 5]
    step = len(weekdays) / plan.recurrent_exams
    studies = []
    for i in range(plan.recurrent_exams):
        day = weekdays[int(i * step)]
        study = _ct_study(
            room, ctx, rng, day, 11.5, protocol, 80 + i,
            runs=plan.recurrent_phases, ctdivol_mgy=plan.recurrent_ctdivol_mgy,
            length_mm=plan.recurrent_length_mm, patient=RECURRENT_PATIENT,
        )  # fmt: skip
        study.planted.append("recurrent_patient")
        studies.append(study)
    return studies


def simulate_ct(room: RoomSpec, ctx: SimulationContext, plan: PlantedPlan) -> list[CtStudy]:
    """Every study of the CT scanner over the context's calendar, planted outliers in."""
    rng = ctx.rng(f"room:{room.key}")
    protocols = [p for p, _ in CT_PROTOCOLS]
    weights = np.array([w for _, w in CT_PROTOCOLS], dtype=float)
    weights /= weights.sum()
    studies = []
    for day in ctx.calendar.days():
        rate = room.studies_per_weekday if day.weekday() < 5 else room.studies_per_weekend_day
        n = int(rng.poisson(rate))
        for seq, hour in enumerate(np.sort(rng.uniform(7.0, 22.5, n))):
            protocol = protocols[int(rng.choice(len(protocols), p=weights))]
            studies.append(_ct_study(room, ctx, rng, day, float(hour), protocol, seq))
    for outlier in plan.outliers:
        if outlier.room == room.key:
            studies.append(_ct_outlier(room, ctx, rng, outlier))
    if plan.recurrent_room == room.key:
        studies += _recurrent_studies(room, ctx, ctx.rng("recurrent"), plan)
    studies.sort(key=lambda s: s.start)
    # which studies the scanner also sends its localizer and a sample of axial images for: a
    # random stream of its own, so every other draw stays what it was
    images = ctx.rng(f"ct_images:{room.key}")
    for study in studies:
        draw = float(images.random())
        study.size_images = (
            "series" if draw < SIZE_SERIES_SHARE
            else "localizer" if draw < SIZE_SERIES_SHARE + LOCALIZER_ONLY_SHARE else ""
        )  # fmt: skip
    return studies


# ---------------------------------------------------------------------------------- fluoroscopy
_SOURCE_TO_TABLE_MM = 480.0  # under-couch focus to tabletop (invented, of the usual size)
_REFERENCE_POINT_MM = _SOURCE_TO_TABLE_MM + 10.0  # 1 cm above the tabletop
_DETECTOR_CLEARANCE_MM = 150.0  # patient surface to the image receptor, on average
_SPOT_MA = 300.0
_FLUORO_SPREAD = 0.10
_ABC_MAX_FACTOR = 1.3  # tube current limit of pulsed fluoroscopy, relative to the standard patient
_METER_SPREAD = 0.03


@dataclass(frozen=True)
class _Beam:
    """Technique and geometry that one fluoroscopy study keeps throughout."""

    protocol: FluoroProtocol
    size: float  # patient weight over the standard weight
    kv: float
    ma: float
    sid_mm: float
    field_mm: tuple[float, float]


class _Timeline(NamedTuple):
    """A study's events in order, and the clock after the last."""

    events: list[FluoroEvent]
    clock: datetime


class _Fluoro:
    def __init__(self, room: RoomSpec, ctx: SimulationContext) -> None:
        self.room = room
        self.ctx = ctx
        self.rng = ctx.rng(f"room:{room.key}")
        inherent = (("Al", room.inherent_al_mm),)
        self.fluoro_filters = room.added_filters
        self.spot_filters = (("Cu", 0.1),)
        self.fluoro_tube = TubeOutput(
            filters=inherent + self.fluoro_filters, anode_angle_deg=room.anode_angle_deg
        )
        self.spot_tube = TubeOutput(
            filters=inherent + self.spot_filters, anode_angle_deg=room.anode_angle_deg
        )

    def _event(
        self,
        study_uid: str,
        index: int,
        started: datetime,
        *,
        fluoroscopy: bool,
        kv: float,
        ma: float,
        mas: float,
        time_ms: float,
        duration_s: float,
        pulses: int | None,
        protocol: FluoroProtocol,
        sid: float,
        field_mm: tuple[float, float],
    ) -> FluoroEvent:
        tube = self.fluoro_tube if fluoroscopy else self.spot_tube
        output = float(tube.output_ugy_per_mas_1m(kv))
        dap = float(
            exposure_dap_gy_cm2(
                output_ugy_per_mas_1m=output,
                exposure_mas=mas,
                sid_mm=sid,
                field_area_cm2=field_mm[0] * field_mm[1] / 100.0,
            )
        )
        rp_mgy = output * mas * (1000.0 / _REFERENCE_POINT_MM) ** 2 * 1e-3
        meter = self.room.dap_meter_factor * math.exp(self.rng.normal(0.0, _METER_SPREAD))
        return FluoroEvent(
            event_uid=self.ctx.uids.uid("event", study_uid, index),
            started=started,
            fluoroscopy=fluoroscopy,
            kvp_kv=kv,
            tube_current_ma=round(ma, 1),
            exposure_mas=mas,
            exposure_time_ms=time_ms,
            duration_s=round(duration_s, 2),
            pulse_rate_per_s=protocol.pulse_rate_per_s if fluoroscopy else None,
            number_of_pulses=pulses,
            pulse_width_ms=protocol.pulse_width_ms if fluoroscopy else None,
            filters=self.fluoro_filters if fluoroscopy else self.spot_filters,
            field_width_mm=field_mm[0],
            field_height_mm=field_mm[1],
            sid_mm=sid,
            source_to_table_mm=_SOURCE_TO_TABLE_MM,
            source_to_rp_mm=_REFERENCE_POINT_MM,
            output_ugy_per_mas_1m=output,
            dap_true_gy_cm2=dap,
            dap_reported_gy_cm2=dap * meter,
            dose_rp_reported_mgy=rp_mgy * meter,
        )

    def study(
        self,
        day: date,
        hour: float,
        protocol: FluoroProtocol,
        seq: int,
        *,
        fluoro_time_s: float | None = None,
        spots: int | None = None,
    ) -> FluoroStudy:
        """One examination: pulsed fluoroscopy runs, each followed by its share of the spot
        images, at the technique and geometry of one patient (``fluoro_time_s`` and ``spots``
        fix what is otherwise drawn)."""
        room, rng, ctx = self.room, self.rng, self.ctx
        patient = ctx.patients.patient(day, age_mean_y=room.age_mean_y, age_sd_y=room.age_sd_y)
        accession = f"HB{day:%Y%m%d}6{seq:02d}"
        study_uid = ctx.uids.uid("study", room.key, accession)
        start = at(day, hour)
        size = patient.weight_kg / STANDARD_WEIGHT_KG
        kv, ma = self._abc_technique(protocol, size)
        total_s = self._fluoro_time_s(protocol) if fluoro_time_s is None else fluoro_time_s
        n_runs = int(rng.integers(protocol.runs[0], protocol.runs[1] + 1))
        n_spots = (
            spots
            if spots is not None
            else int(rng.integers(protocol.spots[0], protocol.spots[1] + 1))
        )
        run_times = rng.dirichlet(np.full(n_runs, 3.0)) * total_s
        sid, field = self._geometry(protocol, size)
        beam = _Beam(protocol, size=size, kv=kv, ma=ma, sid_mm=sid, field_mm=field)
        events = self._events(study_uid, start + timedelta(minutes=2), beam, run_times, n_spots)
        return FluoroStudy(
            room=room.key,
            study_uid=study_uid,
            accession=accession,
            patient=patient,
            start=start,
            end=events.clock + timedelta(minutes=1),
            exam_type=protocol.exam_type,
            study_description=protocol.study_description,
            protocol_name=protocol.protocol_name,
            target_region=protocol.target_region,
            weight_recorded=bool(rng.random() < room.weight_recorded_fraction),
            report_sop_uid=ctx.uids.uid("report", study_uid),
            report_series_uid=ctx.uids.uid("report-series", study_uid),
            events=events.events,
        )

    def _abc_technique(self, protocol: FluoroProtocol, size: float) -> tuple[float, float]:
        """Tube voltage and current that automatic brightness control sets for a patient of
        ``size`` times the standard weight: ``kV = kV_ref size**0.25`` (65-110 kV, whole kV) and
        ``mA = mA_ref min(size**1.5, _ABC_MAX_FACTOR)`` with a spread, up to the generator's
        pulsed-fluoroscopy limit (invented scalings of the usual shape)."""
        kv = float(round(np.clip(protocol.kv_ref * size**0.25, 65.0, 110.0)))
        ma = protocol.ma_ref * min(size**1.5, _ABC_MAX_FACTOR)
        ma *= math.exp(self.rng.normal(0.0, _FLUORO_SPREAD))
        return kv, ma

    def _fluoro_time_s(self, protocol: FluoroProtocol) -> float:
        """Total fluoroscopy time: log-normal about the protocol's median, kept within half and
        one and a half times it."""
        median = protocol.fluoro_time_median_s
        total_s = median * math.exp(self.rng.normal(0.0, protocol.fluoro_time_sigma))
        return float(np.clip(total_s, 0.5 * median, 1.5 * median))

    def _geometry(self, protocol: FluoroProtocol, size: float) -> tuple[float, tuple[float, float]]:
        """Source to image distance and field (mm) of one study: the under-couch tube, the
        tabletop, the patient (``230 mm size**0.5``, invented) and the detector clearance, with
        the operator's spread."""
        rng = self.rng
        thickness = 230.0 * size**0.5
        sid = float(
            round(
                _SOURCE_TO_TABLE_MM
                + 10.0
                + thickness
                + _DETECTOR_CLEARANCE_MM
                + rng.normal(0.0, 20.0)
            )
        )
        field = (
            round(protocol.field_cm[0] * 10.0 * math.exp(rng.normal(0.0, 0.05))),
            round(protocol.field_cm[1] * 10.0 * math.exp(rng.normal(0.0, 0.05))),
        )
        return sid, field

    def _events(
        self,
        study_uid: str,
        clock: datetime,
        beam: _Beam,
        run_times: np.ndarray,
        n_spots: int,
    ) -> _Timeline:
        """The study's events from ``clock`` on: each run is followed by its share of the spot
        images (20 s after a run, 15 s after a spot)."""
        spots_after = np.array_split(np.arange(n_spots), len(run_times))
        events: list[FluoroEvent] = []
        for run, run_s in enumerate(run_times):
            events.append(self._run_event(study_uid, len(events), clock, beam, float(run_s)))
            clock += timedelta(seconds=float(run_s) + 20.0)
            for _ in spots_after[run]:
                events.append(self._spot_event(study_uid, len(events), clock, beam))
                clock += timedelta(seconds=15.0)
        return _Timeline(events, clock)

    def _run_event(
        self, study_uid: str, index: int, started: datetime, beam: _Beam, run_s: float
    ) -> FluoroEvent:
        """One pulsed fluoroscopy run of ``run_s`` seconds: ``pulses = max(1, round(run_s
        rate))``, beam-on time ``pulses * pulse width``, charge ``mA * time``."""
        protocol = beam.protocol
        pulses = max(1, round(run_s * protocol.pulse_rate_per_s))
        time_ms = pulses * protocol.pulse_width_ms
        return self._event(
            study_uid,
            index,
            started,
            fluoroscopy=True,
            kv=beam.kv,
            ma=beam.ma,
            mas=beam.ma * time_ms / 1000.0,
            time_ms=time_ms,
            duration_s=run_s,
            pulses=pulses,
            protocol=protocol,
            sid=beam.sid_mm,
            field_mm=beam.field_mm,
        )

    def _spot_event(
        self, study_uid: str, index: int, started: datetime, beam: _Beam
    ) -> FluoroEvent:
        """One spot image at 3 kV above fluoroscopy and ``_SPOT_MA``: the protocol's charge
        scaled as the fluoroscopy current (``min(size**1.5, _ABC_MAX_FACTOR)``), with a spread."""
        protocol = beam.protocol
        spot_mas = protocol.spot_mas * min(beam.size**1.5, _ABC_MAX_FACTOR)
        spot_mas *= math.exp(self.rng.normal(0.0, 0.1))
        spot_ms = spot_mas / _SPOT_MA * 1000.0
        return self._event(
            study_uid,
            index,
            started,
            fluoroscopy=False,
            kv=beam.kv + 3.0,
            ma=_SPOT_MA,
            mas=spot_mas,
            time_ms=spot_ms,
            duration_s=spot_ms / 1000.0,
            pulses=None,
            protocol=protocol,
            sid=beam.sid_mm,
            field_mm=beam.field_mm,
        )

    def outlier(self, outlier: OutlierPlan) -> FluoroStudy:
        day = self.ctx.calendar.weekday_on_or_after(outlier.month_index, outlier.day)
        protocol = next(p for p, _ in FLUORO_PROTOCOLS if p.exam_type == outlier.exam_type)
        level = self.ctx.reference_level(outlier.exam_type, outlier.quantity, day)
        assert level is not None and outlier.quantity == "dap_gy_cm2"
        study = self.study(day, 10.0, protocol, 90, fluoro_time_s=27 * 60.0, spots=30)
        scale = outlier.target_ratio * level[0] / study.dap_total_reported_gy_cm2
        for e in study.events:  # a higher tube current throughout (ABC on a large patient)
            e.tube_current_ma = round(e.tube_current_ma * scale, 1)
            e.exposure_mas *= scale
            if not e.fluoroscopy:
                e.exposure_time_ms *= scale
                e.duration_s = round(e.exposure_time_ms / 1000.0, 2)
                e.tube_current_ma = _SPOT_MA
            e.dap_true_gy_cm2 *= scale
            e.dap_reported_gy_cm2 *= scale
            e.dose_rp_reported_mgy *= scale
        study.planted.append(outlier.key)
        return study


def simulate_fluoro(room: RoomSpec, ctx: SimulationContext, plan: PlantedPlan) -> list[FluoroStudy]:
    """Every study of the fluoroscopy room over the context's calendar, planted outliers in."""
    sim = _Fluoro(room, ctx)
    protocols = [p for p, _ in FLUORO_PROTOCOLS]
    weights = np.array([w for _, w in FLUORO_PROTOCOLS], dtype=float)
    weights /= weights.sum()
    studies = []
    for day in ctx.calendar.days():
        rate = room.studies_per_weekday if day.weekday() < 5 else room.studies_per_weekend_day
        n = int(sim.rng.poisson(rate))
        for seq, hour in enumerate(np.sort(sim.rng.uniform(9.0, 16.0, n))):
            protocol = protocols[int(sim.rng.choice(len(protocols), p=weights))]
            studies.append(sim.study(day, float(hour), protocol, seq))
    for outlier in plan.outliers:
        if outlier.room == room.key:
            studies.append(sim.outlier(outlier))
    studies.sort(key=lambda s: s.start)
    return studies
