"""Simulation of the radiography rooms (DX rooms, the CR room, the mobile unit).

Per day a Poisson number of studies (the room's rate), each a procedure drawn from the room's
exam mix, each view exposed as :mod:`beamaudit.api.demo.physics` says: patient thickness from
weight, tube charge from the AEC (or the radiographer's judgement on the R10 mAs scale), field
from the collimation, true DAP from the room's tube output, reported DAP from the room's DAP
meter. The planted findings of these rooms (see :data:`beamaudit.api.demo.plants.PLANTED`) are
applied here: the DAP meter fault, the doubled AEC dose level, the failed dose link, the unmapped
protocol name and the radiography outliers.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from datetime import date, timedelta
from typing import NamedTuple

import numpy as np

from beamaudit.api.demo.context import SimulationContext, at
from beamaudit.api.demo.physics import (
    TubeOutput,
    aec_exposure_mas,
    exposure_dap_gy_cm2,
    patient_thickness_mm,
)
from beamaudit.api.demo.plants import OutlierPlan, PlantedPlan
from beamaudit.api.demo.records import Patient, RadiographStudy, RadiographView
from beamaudit.api.demo.scenario import PROCEDURES, RoomSpec, ViewProgram

__all__ = ["RadiographyPlan", "simulate_radiography"]

#: Patient exit surface to image receptor, mm: the same common-practice gaps as beamaudit's
#: model defaults (``model/data/dose_defaults.csv``).
RECEPTOR_GAP_MM = {"wall_bucky": 40.0, "table_bucky": 60.0, "direct": 10.0}
#: Tube current the generator picks, mA (fixed mA stations; common practice).
_TUBE_CURRENT_MA = {"wall_bucky": 500.0, "table_bucky": 400.0, "direct": 250.0}
_MOBILE_TUBE_CURRENT_MA = 100.0
#: Spreads (log-standard deviations or standard deviations), invented.
_THICKNESS_SPREAD = 0.05  # body build at a given weight
_AEC_SPREAD = 0.06  # AEC termination reproducibility
_FIELD_SPREAD = 0.05  # collimation habits, per side
_METER_SPREAD = 0.03  # DAP meter reading reproducibility
_DI_NOISE_DB = 0.25  # detector and processing
_ESTIMATE_SPREAD = 0.08  # the radiographer's judgement of the charge a manual view needs
#: Large patients under AEC: above this multiple of the standard charge the radiographer adds
#: 10 kV; by the "15 % rule" of the trade, 15 % more kV halves the charge for the same detector
#: exposure (common practice rule of thumb).
_KV_STEP_ABOVE = 2.0
_KV_STEP_KV = 10.0
_FIFTEEN_PERCENT = 0.15


@dataclass(frozen=True)
class RadiographyPlan:
    """The dates of this run's planted radiography findings."""

    plan: PlantedPlan
    meter_date: date
    change_date: date
    no_dose_date: date
    unmapped_date: date


def _clipped(rng: np.random.Generator, sigma: float) -> float:
    """A normal draw of standard deviation ``sigma``, clipped at two standard deviations."""
    return float(np.clip(rng.normal(0.0, sigma), -2.0 * sigma, 2.0 * sigma))


def _edges(extent_mm: float, detector_mm: float, spacing_mm: float) -> tuple[int, int, float]:
    """Collimator edges (1-based pixel positions, inclusive) of a centred field, and its size."""
    n_pixels = round(detector_mm / spacing_mm)
    width_px = int(np.clip(round(extent_mm / spacing_mm), 2, n_pixels))
    first = (n_pixels - width_px) // 2 + 1
    return first, first + width_px - 1, width_px * spacing_mm


@dataclass(frozen=True)
class _Technique:
    """Tube voltage and charge of one exposure: what the detector needs and what was given."""

    kvp_kv: float
    needed_mas: float
    used_mas: float


@dataclass(frozen=True)
class _Field:
    """The collimated field at the receptor: its edges (1-based pixels) and size."""

    edges_px: tuple[int, int, int, int]
    width_mm: float
    height_mm: float


class _Labels(NamedTuple):
    """The names an image header gives one exposure, and the plants it carries."""

    protocol_name: str
    body_part: str | None
    exam_type: str | None
    planted: list[str]


class _RoomSimulator:
    def __init__(self, room: RoomSpec, ctx: SimulationContext, dates: RadiographyPlan) -> None:
        assert room.programs is not None
        self.room = room
        self.programs = room.programs
        self.ctx = ctx
        self.dates = dates
        self.plan = dates.plan
        self.rng = ctx.rng(f"room:{room.key}")
        self.tube = TubeOutput(
            filters=room.filtration,
            anode_angle_deg=room.anode_angle_deg,
            efficiency=room.output_efficiency,
        )
        self.room_digit = {"rad1": 1, "rad2": 2, "cr1": 3, "mobile1": 4}.get(room.key, 9)

    # ---------------------------------------------------------------------------- one view
    def _view(
        self,
        study: RadiographStudy,
        index: int,
        key: str,
        when_h: float,
        laterality: str,
        technique_recorded: bool,
    ) -> RadiographView:
        """One exposure of ``study`` on the room's program ``key``, the planted findings of its
        day applied."""
        room, rng, day = self.room, self.rng, study.start.date()
        prog: ViewProgram = self.programs[key]
        mas_ref, ei_target = prog.mas_ref, room.target_exposure_index
        changed = self._dose_level_raised(key, day)
        if changed:  # AEC dose level and target EI raised together: DI stays near 0
            mas_ref *= self.plan.change_factor
            ei_target *= self.plan.change_factor
        thickness = self._thickness_mm(prog, study.patient.weight_kg)
        technique = self._technique(prog, mas_ref, thickness)
        sid = self._sid_mm(prog)
        to_patient = sid - RECEPTOR_GAP_MM[prog.receptor]
        ma = _MOBILE_TUBE_CURRENT_MA if room.kind == "mobile" else _TUBE_CURRENT_MA[prog.receptor]
        field = self._field(prog)
        output = float(self.tube.output_ugy_per_mas_1m(technique.kvp_kv))
        dap_true = float(
            exposure_dap_gy_cm2(
                output_ugy_per_mas_1m=output,
                exposure_mas=technique.used_mas,
                sid_mm=sid,
                field_area_cm2=field.width_mm * field.height_mm / 100.0,
            )
        )
        meter = self._meter_factor(day)
        di = 10.0 * math.log10(technique.used_mas / technique.needed_mas)
        di += _clipped(rng, _DI_NOISE_DB)
        labels = self._labels(prog, key, day, changed)
        when = study.start + timedelta(minutes=2 * index + float(rng.uniform(0, 1.5)))
        return RadiographView(
            index=index,
            program=key,
            exam_type=labels.exam_type,
            protocol_name=labels.protocol_name,
            series_description=labels.protocol_name,
            body_part=labels.body_part,
            view_position=prog.view_position,
            laterality=laterality,
            sop_uid=self.ctx.uids.uid("image", study.study_uid, index),
            event_uid=self.ctx.uids.uid("event", study.study_uid, index),
            acquired=when,
            aec=prog.aec,
            grid=prog.grid,
            kvp_kv=technique.kvp_kv,
            exposure_mas=technique.used_mas,
            tube_current_ma=ma,
            exposure_time_ms=technique.used_mas / ma * 1000.0,
            sid_mm=sid,
            source_to_patient_mm=to_patient,
            source_to_entrance_mm=to_patient - thickness,
            thickness_mm=thickness,
            field_width_mm=field.width_mm,
            field_height_mm=field.height_mm,
            collimator_edges_px=field.edges_px,
            output_ugy_per_mas_1m=output,
            dap_true_gy_cm2=dap_true,
            dap_reported_gy_cm2=dap_true * meter,
            exposure_index=ei_target * 10.0 ** (di / 10.0),
            target_exposure_index=ei_target,
            deviation_index=di,
            technique_recorded=technique_recorded,
            planted=labels.planted,
        )

    def _dose_level_raised(self, key: str, day: date) -> bool:
        """Whether the planted AEC change has raised program ``key``'s dose level by ``day``."""
        return (
            self.room.key == self.plan.change_room
            and key == self.plan.change_program
            and day >= self.dates.change_date
        )

    def _meter_faulty(self, day: date) -> bool:
        """Whether the planted DAP meter fault is in this room on ``day``."""
        return self.room.key == self.plan.dap_meter_room and day >= self.dates.meter_date

    def _unmapped(self, key: str, day: date) -> bool:
        """Whether program ``key`` is run under the planted unmapped menu entry on ``day``."""
        return (
            self.room.key == self.plan.unmapped_room
            and key in self.plan.unmapped_programs
            and day >= self.dates.unmapped_date
        )

    def _thickness_mm(self, prog: ViewProgram, weight_kg: float) -> float:
        """The patient's thickness along the beam, whole mm: the program's thickness scaled by
        weight (:func:`~beamaudit.api.demo.physics.patient_thickness_mm`), times the body build
        spread."""
        thickness = float(
            patient_thickness_mm(
                thickness_ref_mm=prog.thickness_ref_mm,
                weight_kg=weight_kg,
                exponent=prog.thickness_exponent,
            )
        ) * math.exp(self.rng.normal(0.0, _THICKNESS_SPREAD))
        return round(thickness)

    def _technique(self, prog: ViewProgram, mas_ref: float, thickness: float) -> _Technique:
        """Tube voltage and charge for a patient of ``thickness`` mm.

        The charge the detector needs follows
        :func:`~beamaudit.api.demo.physics.aec_exposure_mas`. Under AEC a large patient (above
        ``_KV_STEP_ABOVE`` times the standard charge) gets ``_KV_STEP_KV`` more, and by the 15 %
        rule the needed charge falls by ``2 ** (ΔkV / kV / 0.15)`` (common practice rule of
        thumb); the AEC then terminates near the need. Without AEC the radiographer estimates the
        need and sets the nearest step of the R10 mAs scale, ``10 ** (round(10 log10 mAs) / 10)``.
        """
        room, rng = self.room, self.rng
        needed = float(
            aec_exposure_mas(
                mas_ref=mas_ref,
                thickness_mm=thickness,
                thickness_ref_mm=prog.thickness_ref_mm,
                doubling_mm=prog.doubling_mm,
                efficiency=room.output_efficiency,
            )
        )
        kv = prog.kvp_kv
        if prog.aec and needed * room.output_efficiency / mas_ref > _KV_STEP_ABOVE:
            # a large patient: the radiographer raises the kV, and the AEC needs less charge
            kv += _KV_STEP_KV
            needed /= 2.0 ** (_KV_STEP_KV / prog.kvp_kv / _FIFTEEN_PERCENT)
        if prog.aec:
            used = needed * math.exp(_clipped(rng, _AEC_SPREAD))
        else:  # the radiographer's estimate of what is needed, set on the R10 mAs scale
            estimate = needed * math.exp(_clipped(rng, _ESTIMATE_SPREAD))
            used = 10.0 ** (round(10.0 * math.log10(estimate)) / 10.0)
        return _Technique(kvp_kv=kv, needed_mas=needed, used_mas=round(used, 2))

    def _sid_mm(self, prog: ViewProgram) -> float:
        """Source to image receptor distance: the program's, or at the bedside as the mobile unit
        measures it (880-1200 mm, to 5 mm, never twice the same)."""
        if self.room.kind != "mobile":
            return prog.sid_mm
        drawn = float(np.clip(self.rng.normal(prog.sid_mm, 40.0), 880.0, 1200.0))
        return 5.0 * round(drawn / 5.0)

    def _field(self, prog: ViewProgram) -> _Field:
        """The collimated field of one exposure: the program's field with the radiographer's
        spread per side, centred on the detector and cut to its pixels."""
        room, rng = self.room, self.rng
        left, right, width_mm = _edges(
            prog.field_cm[0] * 10.0 * math.exp(rng.normal(0.0, _FIELD_SPREAD)),
            room.detector_mm[0],
            room.pixel_spacing_mm,
        )
        upper, lower, height_mm = _edges(
            prog.field_cm[1] * 10.0 * math.exp(rng.normal(0.0, _FIELD_SPREAD)),
            room.detector_mm[1],
            room.pixel_spacing_mm,
        )
        return _Field(edges_px=(left, right, upper, lower), width_mm=width_mm, height_mm=height_mm)

    def _meter_factor(self, day: date) -> float:
        """Reported over delivered DAP of one exposure: the room's meter with its reading
        spread, times the planted fault's factor from its day."""
        meter = self.room.dap_meter_factor * math.exp(self.rng.normal(0.0, _METER_SPREAD))
        if self._meter_faulty(day):
            meter *= self.plan.dap_meter_factor
        return meter

    def _labels(self, prog: ViewProgram, key: str, day: date, changed: bool) -> _Labels:
        """What the image header names the exposure, and the plants it carries."""
        protocol = prog.protocol_name
        body_part: str | None = prog.body_part
        exam_type: str | None = prog.exam_type
        planted: list[str] = []
        if self._unmapped(key, day):  # a new reader menu entry that fills no body part
            protocol = self.plan.unmapped_protocol_name
            body_part, exam_type = None, None
            planted.append("unmapped_protocol")
        if changed:
            planted.append("change_point")
        if self._meter_faulty(day):
            planted.append("dap_ratio")
        return _Labels(protocol, body_part, exam_type, planted)

    # --------------------------------------------------------------------------- one study
    def study(
        self,
        day: date,
        hour: float,
        procedure_key: str,
        seq: int,
        patient: Patient | None = None,
    ) -> RadiographStudy:
        room, rng, ctx = self.room, self.rng, self.ctx
        procedure = PROCEDURES[procedure_key]
        if patient is None:
            patient = ctx.patients.patient(day, age_mean_y=room.age_mean_y, age_sd_y=room.age_sd_y)
        accession = f"HB{day:%Y%m%d}{self.room_digit}{seq:02d}"
        study_uid = ctx.uids.uid("study", room.key, accession)
        study = RadiographStudy(
            room=room.key,
            study_uid=study_uid,
            series_uid=ctx.uids.uid("series", study_uid),
            accession=accession,
            patient=patient,
            start=at(day, hour),
            procedure=procedure_key,
            study_description=procedure.study_description,
            weight_recorded=bool(rng.random() < room.weight_recorded_fraction),
        )
        paired = procedure_key in ("hip", "knee")
        laterality = ("R" if rng.random() < 0.5 else "L") if paired else "U"
        recorded = bool(rng.random() < room.technique_recorded_fraction)
        for index, key in enumerate(procedure.views):
            study.views.append(self._view(study, index, key, hour, laterality, recorded))
        return study

    def run(self) -> list[RadiographStudy]:
        room, rng = self.room, self.rng
        keys = [k for k, _ in room.procedures]
        weights = np.array([w for _, w in room.procedures], dtype=float)
        weights /= weights.sum()
        late = 24.0 if room.kind == "mobile" else 17.5
        early = 0.0 if room.kind == "mobile" else 8.0
        studies: list[RadiographStudy] = []
        for day in self.ctx.calendar.days():
            rate = room.studies_per_weekday if day.weekday() < 5 else room.studies_per_weekend_day
            n = int(rng.poisson(rate))
            for seq, hour in enumerate(np.sort(rng.uniform(early, late - 0.25, n))):
                key = keys[int(rng.choice(len(keys), p=weights))]
                studies.append(self.study(day, float(hour), key, seq))
        for outlier in self.plan.outliers:
            if outlier.room == room.key:
                studies.append(self._outlier(outlier))
        if room.key == self.plan.no_dose_room:
            self._plant_no_dose(studies)
        if room.key == self.plan.paediatric_room:
            studies += self._paediatric()
        studies.sort(key=lambda s: s.start)
        return studies

    # ---------------------------------------------------------------------------- plants
    def _outlier(self, outlier: OutlierPlan) -> RadiographStudy:
        calendar = self.ctx.calendar
        day = calendar.weekday_on_or_after(outlier.month_index, outlier.day)
        procedure = next(
            k
            for k, _ in self.room.procedures
            if any(self.programs[v].exam_type == outlier.exam_type for v in PROCEDURES[k].views)
        )
        study = self.study(day, 11.0, procedure, 90)
        level = self.ctx.reference_level(outlier.exam_type, outlier.quantity, day)
        assert level is not None, f"no reference level for the planted outlier {outlier.key}"
        for view in study.views:
            if view.exam_type != outlier.exam_type:
                continue
            factor = outlier.target_ratio * level[0] / view.dap_reported_gy_cm2
            old_mas = view.exposure_mas
            view.exposure_mas = round(old_mas * factor, 1)
            scale = view.exposure_mas / old_mas  # DAP is proportional to the tube charge
            view.exposure_time_ms = view.exposure_mas / view.tube_current_ma * 1000.0
            view.dap_true_gy_cm2 *= scale
            view.dap_reported_gy_cm2 *= scale
            view.aec = False
            assert view.deviation_index is not None and view.target_exposure_index is not None
            view.deviation_index += 10.0 * math.log10(scale)
            view.exposure_index = view.target_exposure_index * 10.0 ** (view.deviation_index / 10)
            view.planted.append("exam_above_investigation_level")
        study.planted.append(outlier.key)
        return study

    def _paediatric(self) -> list[RadiographStudy]:
        """The planted children's chest PAs, from random streams of their own (the room's adult
        studies and every other room keep their draws): weights uniform in the plan's band,
        exposed on the adult program."""
        plan, ctx = self.plan, self.ctx
        adults_rng, self.rng = self.rng, ctx.rng(f"paediatric:{self.room.key}")
        people = ctx.rng(f"paediatric_patients:{self.room.key}")
        studies: list[RadiographStudy] = []
        try:
            for day in ctx.calendar.days():
                if day.weekday() >= 5:
                    continue
                n = int(self.rng.poisson(plan.paediatric_per_weekday))
                for i, hour in enumerate(np.sort(self.rng.uniform(15.0, 17.0, n))):
                    patient = _child(people, day, plan, 1 + len(studies))
                    study = self.study(day, float(hour), plan.paediatric_procedure, 60 + i, patient)
                    study.planted.append("paediatric_above_level")
                    studies.append(study)
        finally:
            self.rng = adults_rng
        return studies

    def _plant_no_dose(self, studies: list[RadiographStudy]) -> None:
        """The dose link fails for ``no_dose_exams`` consecutive studies from the planned day."""
        start = self.dates.no_dose_date
        chosen = [s for s in sorted(studies, key=lambda s: s.start) if s.start.date() >= start]
        for study in chosen[: self.plan.no_dose_exams]:
            study.planted.append("no_dose_data")
            for view in study.views:
                view.technique_recorded = False
                view.dose_recorded = False
                view.exposure_index = view.target_exposure_index = view.deviation_index = None
                view.planted.append("no_dose_data")


def _child(rng: np.random.Generator, on: date, plan: PlantedPlan, number: int) -> Patient:
    """An invented child of the plan's weight band and ages (names as obviously invented as the
    adults')."""
    from beamaudit.api.demo.context import _GIVEN_F, _GIVEN_M, _SURNAMES

    female = bool(rng.random() < 0.5)
    age_y = float(rng.uniform(*plan.paediatric_age_y))
    weight = float(rng.uniform(*plan.paediatric_weight_kg))
    given = (_GIVEN_F if female else _GIVEN_M)[int(rng.integers(15))]
    return Patient(
        patient_id=f"HBC{number:06d}",
        name=f"{_SURNAMES[int(rng.integers(len(_SURNAMES)))]}^{given}",
        sex="F" if female else "M",
        birth_date=on - timedelta(days=int(age_y * 365.25)),
        height_m=round(0.75 + 0.06 * age_y, 2),  # a rough growth line, invented
        weight_kg=weight,
    )


def simulate_radiography(
    room: RoomSpec, ctx: SimulationContext, dates: RadiographyPlan
) -> list[RadiographStudy]:
    """Every study of one radiography room over the context's calendar, planted findings in."""
    return _RoomSimulator(room, ctx, dates).run()
