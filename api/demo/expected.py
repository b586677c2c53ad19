"""The numbers the reviews should find, computed from the generated records themselves.

Every expected figure of the manifest (planted ratios, monthly medians, the highest healthy
values that keep unplanted flags quiet) is measured on the very exposures that were written, so
the manifest never promises what the files do not hold. Flag kinds are the review core's
(:data:`beamaudit.api.review.flags.FLAG_KINDS`), and the thresholds the plants are designed
against are the review core's defaults (:class:`beamaudit.api.review.run.ReviewParameters`),
except the CUSUM baseline, which a review of only a few months must shorten
(:data:`DESIGN_CUSUM_BASELINE_MONTHS`).
"""

from __future__ import annotations

import statistics
from collections import defaultdict
from collections.abc import Iterable, Iterator
from dataclasses import dataclass, field
from datetime import date
from typing import Any

from beamaudit.api.demo.context import SimulationContext
from beamaudit.api.demo.interventional import INTERVENTIONAL_PLANTS
from beamaudit.api.demo.manifest import PlantedFinding
from beamaudit.api.demo.plants import OutlierPlan
from beamaudit.api.demo.radiography import RadiographyPlan
from beamaudit.api.demo.records import (
    CtStudy,
    FluoroStudy,
    Patient,
    RadiographStudy,
    RadiographView,
)
from beamaudit.api.demo.scenario import RoomSpec
from beamaudit.api.review.run import ReviewParameters

__all__ = [
    "DESIGN_CUSUM_BASELINE_MONTHS",
    "Generated",
    "design_parameters",
    "expected_findings",
    "group_medians",
    "quiet_numbers",
]

#: CUSUM baseline the demo's change is designed for: two months before the change of a four-month
#: run (the review core's default of 6 months needs a longer history).
DESIGN_CUSUM_BASELINE_MONTHS = 2
_OUTLIER_TAG = "exam_above_investigation_level"
_PAEDIATRIC_TAG = "paediatric_above_level"


def design_parameters() -> dict[str, Any]:
    """The review settings the plants are designed against (review defaults, short baseline)."""
    defaults = ReviewParameters.for_month(2000, 1)  # any month: only the defaults are read
    return {
        "investigation_multiple": defaults.investigation_multiple,
        "dap_ratio_tolerance": defaults.dap_ratio_tolerance,
        "dap_ratio_min_events": defaults.dap_ratio_min_events,
        "di_range": list(defaults.di_range),
        "weight_window_kg": list(defaults.weight_window_kg),
        "basis": defaults.basis,
        "cusum_k": defaults.cusum_k,
        "cusum_h": defaults.cusum_h,
        "cusum_baseline_months": DESIGN_CUSUM_BASELINE_MONTHS,
        "minimum_samples": {"radiography": 20, "fluoroscopy": 20, "ct": 20},
        # the low-dose review at its defaults: the invented levels sit at about 1.5-1.7 times
        # the healthy medians, so only the planted group is far below one (the site's 25th
        # percentile needs more rooms than the demo has)
        "low_dose_fraction": defaults.low_dose_fraction,
        "low_dose_below_site_p25": defaults.low_dose_below_site_p25,
    }


@dataclass
class Generated:
    """The simulated studies of one run, by room key, and where their files went."""

    rooms: dict[str, RoomSpec]
    radiography: dict[str, list[RadiographStudy]] = field(default_factory=dict)
    ct: dict[str, list[CtStudy]] = field(default_factory=dict)
    fluoro: dict[str, list[FluoroStudy]] = field(default_factory=dict)
    mammography: dict[str, list[Any]] = field(default_factory=dict)  # MammoStudy
    paths: dict[str, str] = field(default_factory=dict)  # SOP Instance UID -> relative path


def _month(day: date) -> str:
    return f"{day.year:04d}-{day.month:02d}"


def _standard(patient: Patient, weight_recorded: bool) -> bool:
    """Inside the review's standard-size window, as the file records the weight (whole kg)."""
    low, high = design_parameters()["weight_window_kg"]
    return weight_recorded and low <= round(patient.weight_kg) <= high


@dataclass(frozen=True, slots=True)
class _Value:
    room: str
    exam_type: str
    day: date
    quantity: str
    value: float
    standard: bool
    outlier: str | None


def _outlier_key(planted: list[str]) -> str | None:
    return next((p for p in planted if p.startswith("outlier_")), None)


def _exam_values(gen: Generated) -> Iterator[_Value]:
    """Every reported value a review compares with a level: per view for radiography, per study
    for CT and fluoroscopy."""
    for key, studies in gen.radiography.items():
        for s in studies:
            if _PAEDIATRIC_TAG in s.planted:
                continue  # the children's own band group (_paediatric), never an adult group
            std = _standard(s.patient, s.weight_recorded)
            outlier = _outlier_key(s.planted)
            for v in s.views:
                if v.exam_type is not None and v.dose_recorded:
                    out = outlier if _OUTLIER_TAG in v.planted else None
                    day = v.acquired.date()
                    yield _Value(
                        key, v.exam_type, day, "dap_gy_cm2", v.dap_reported_gy_cm2, std, out
                    )
    for key, ct_studies in gen.ct.items():
        for c in ct_studies:
            std, out, day = (
                _standard(c.patient, c.weight_recorded),
                _outlier_key(c.planted),
                c.start.date(),
            )
            yield _Value(key, c.exam_type, day, "ctdivol_mgy", c.ctdivol_max_mgy, std, out)
            yield _Value(key, c.exam_type, day, "dlp_mgy_cm", c.dlp_total_mgy_cm, std, out)
    for key, fl_studies in gen.fluoro.items():
        for f in fl_studies:
            std, out, day = (
                _standard(f.patient, f.weight_recorded),
                _outlier_key(f.planted),
                f.start.date(),
            )
            yield _Value(key, f.exam_type, day, "dap_gy_cm2", f.dap_total_reported_gy_cm2, std, out)
            yield _Value(
                key,
                f.exam_type,
                day,
                "reference_point_air_kerma_mgy",
                f.rp_total_reported_mgy,
                std,
                out,
            )


def _median(values: list[float]) -> float | None:
    return round(statistics.median(values), 6) if values else None


def group_medians(gen: Generated, ctx: SimulationContext) -> list[dict[str, Any]]:
    """Per room, exam type, month and reported quantity: n, median and the shipped levels, for
    all patients and for standard-size ones."""
    groups: dict[tuple[str, str, str, str], list[_Value]] = defaultdict(list)
    for v in _exam_values(gen):
        groups[(v.room, v.exam_type, _month(v.day), v.quantity)].append(v)
    out = []
    for (room, exam, month, quantity), values in sorted(groups.items()):
        first = date(int(month[:4]), int(month[5:]), 1)
        levels = ctx.levels(exam, quantity, first)
        every = [v.value for v in values]
        standard = [v.value for v in values if v.standard]
        med, med_std = _median(every), _median(standard)
        out.append(
            {
                "room": gen.rooms[room].name,
                "room_key": room,
                "exam_type": exam,
                "month": month,
                "quantity": quantity,
                "n": len(every),
                "median": med,
                "n_standard": len(standard),
                "median_standard": med_std,
                "levels": levels,
                "median_to_level": {k: round(med / v, 4) for k, v in levels.items()} if med else {},
                "median_standard_to_level": (
                    {k: round(med_std / v, 4) for k, v in levels.items()} if med_std else {}
                ),
            }
        )
    return out


def _by_month(values: dict[str, list[float]]) -> dict[str, Any]:
    return {m: {"n": len(v), "median": _median(v)} for m, v in sorted(values.items())}


def _finding(gen: Generated, room_key: str | None, **fields_: Any) -> PlantedFinding:
    room = gen.rooms[room_key] if room_key else None
    return PlantedFinding(
        room=room.name if room else None,
        room_key=room_key,
        station_name=room.station_name if room else None,
        **fields_,
    )


@dataclass
class _MeterRoom:
    """The DAP meter room's records the fault is measured on: reported over delivered DAP of
    the views whose technique is recorded (before and from the fault's day, and by month), and
    the reported DAP of standard-size patients by exam type and month."""

    tolerance: float
    before: list[float] = field(default_factory=list)
    after: list[float] = field(default_factory=list)
    monthly: dict[str, list[float]] = field(default_factory=lambda: defaultdict(list))
    standard_dap: dict[tuple[str, str], list[float]] = field(
        default_factory=lambda: defaultdict(list)
    )

    def by_month(self) -> dict[str, Any]:
        return _by_month(self.monthly)

    def months_outside(self) -> list[str]:
        """Months whose median ratio is further from 1 than the review's tolerance."""
        return [m for m, r in self.by_month().items() if abs(r["median"] - 1.0) > self.tolerance]

    def exam_types_with_full_series(self) -> list[str]:
        """Exam types with enough standard-size patients in every month for a change-point."""
        minimum = design_parameters()["minimum_samples"]["radiography"]
        months = sorted(self.monthly)
        exam_types = sorted({e for e, _ in self.standard_dap})
        return [
            e
            for e in exam_types
            if all(len(self.standard_dap.get((e, m), [])) >= minimum for m in months)
        ]


def _meter_room(gen: Generated, dates: RadiographyPlan) -> _MeterRoom:
    """Reported over delivered DAP, ``DAP_reported / DAP_true``, of every dose-recorded view of
    the DAP meter room, and its standard-size reported DAP."""
    found = _MeterRoom(tolerance=design_parameters()["dap_ratio_tolerance"])
    for s in gen.radiography[dates.plan.dap_meter_room]:
        std = _standard(s.patient, s.weight_recorded)
        for v in s.views:
            if v.exam_type is None or not v.dose_recorded:
                continue
            month = _month(v.acquired.date())
            if std:
                found.standard_dap[(v.exam_type, month)].append(v.dap_reported_gy_cm2)
            if not v.technique_recorded:
                continue
            ratio = v.dap_reported_gy_cm2 / v.dap_true_gy_cm2
            (found.after if v.acquired.date() >= dates.meter_date else found.before).append(ratio)
            found.monthly[month].append(ratio)
    return found


def _dap_ratio(gen: Generated, dates: RadiographyPlan) -> list[PlantedFinding]:
    """The DAP meter fault, and the steps it makes in the room's monthly medians."""
    meter_room = _meter_room(gen, dates)
    return [
        _dap_meter_fault(gen, dates, meter_room),
        _dap_ratio_step(gen, dates, meter_room),
        _reported_dap_steps(gen, dates, meter_room),
    ]


def _dap_meter_fault(gen: Generated, dates: RadiographyPlan, found: _MeterRoom) -> PlantedFinding:
    """The fault itself: the room reports a constant multiple of the DAP it delivers."""
    plan = dates.plan
    room = gen.rooms[plan.dap_meter_room]
    return _finding(
        gen,
        room.key,
        id="dap_meter_fault",
        kind="dap_ratio_out_of_tolerance",
        exam_type=None,
        quantity="dap_gy_cm2",
        date=dates.meter_date.isoformat(),
        month=_month(dates.meter_date),
        description=(
            f"{room.name}'s DAP chamber was exchanged at the service visit of "
            f"{dates.meter_date:%d %B %Y} and its calibration factor was not entered: from that "
            f"day the room reports {plan.dap_meter_factor:.2f} times the DAP it delivers. "
            "Technique, tube output (the room's QA) and patients are unchanged, so beamaudit's "
            "reconstruction stays put while the reported DAP jumps."
        ),
        expected={
            "planted_factor": plan.dap_meter_factor,
            "tolerance": found.tolerance,
            "months_outside_tolerance": found.months_outside(),
            "reported_to_true_before": {"n": len(found.before), "median": _median(found.before)},
            "reported_to_true_after": {"n": len(found.after), "median": _median(found.after)},
            "reported_to_true_by_month": found.by_month(),
            "note": "true = the DAP the room delivered, what a calibrated reconstruction should "
            "find within the model's uncertainty; RAD 1's QA measurements must be loaded",
        },
    )


def _dap_ratio_step(gen: Generated, dates: RadiographyPlan, found: _MeterRoom) -> PlantedFinding:
    """The step of the monthly median DAP ratio, a change-point the review may find."""
    room = gen.rooms[dates.plan.dap_meter_room]
    outside = found.months_outside()
    return _finding(
        gen,
        room.key,
        id="dap_meter_fault_ratio_step",
        kind="changepoint",
        exam_type=None,
        quantity="dap_ratio",
        date=f"{outside[0]}-01" if outside else None,
        month=outside[0] if outside else None,
        description=f"the monthly median DAP ratio of {room.name} steps up by the meter fault",
        expected={"direction": "up", "by_month": found.by_month()},
        consequence_of="dap_meter_fault",
        # with one month before the fault, a CUSUM baseline of two months straddles the step and
        # may stay below its alarm; the fault itself is the required dap_ratio finding
        required=False,
    )


def _reported_dap_steps(
    gen: Generated, dates: RadiographyPlan, found: _MeterRoom
) -> PlantedFinding:
    """The step of the reported-DAP medians, a change-point the review may find where every
    month has enough standard-size patients."""
    room = gen.rooms[dates.plan.dap_meter_room]
    stepping = found.exam_types_with_full_series()
    return _finding(
        gen,
        room.key,
        id="dap_meter_fault_reported_dap_steps",
        kind="changepoint",
        exam_type=None,
        quantity="dap_gy_cm2",
        date=dates.meter_date.isoformat(),
        month=_month(dates.meter_date),
        description=(
            f"every reported-DAP median of {room.name} steps up by the meter factor (the "
            "reconstructed ESAK does not); a change-point may be found in the exam types whose "
            "every month has enough standard-size patients"
        ),
        expected={
            "direction": "up",
            "factor": dates.plan.dap_meter_factor,
            "exam_types_with_full_monthly_series": stepping,
            "monthly_standard_median_dap_gy_cm2": {
                f"{e} {m}": {"n": len(vs), "median": _median(vs)}
                for (e, m), vs in sorted(found.standard_dap.items())
                if e in stepping
            },
        },
        consequence_of="dap_meter_fault",
        required=False,
    )


def _changed_program_dap(
    gen: Generated, dates: RadiographyPlan
) -> tuple[RoomSpec, str, dict[str, list[float]], dict[str, list[float]]]:
    """The changed program's room and exam type, and its reported DAP by month: every patient,
    and standard-size ones (the planted outlier left out)."""
    plan = dates.plan
    room = gen.rooms[plan.change_room]
    assert room.programs is not None
    exam = room.programs[plan.change_program].exam_type
    every: dict[str, list[float]] = defaultdict(list)
    standard: dict[str, list[float]] = defaultdict(list)
    for s in gen.radiography[room.key]:
        std = _standard(s.patient, s.weight_recorded)
        for v in s.views:
            if (
                v.program == plan.change_program
                and v.dose_recorded
                and _OUTLIER_TAG not in v.planted
            ):
                every[_month(v.acquired.date())].append(v.dap_reported_gy_cm2)
                if std:
                    standard[_month(v.acquired.date())].append(v.dap_reported_gy_cm2)
    return room, exam, every, standard


def _change_point(gen: Generated, dates: RadiographyPlan, ctx: SimulationContext) -> PlantedFinding:
    plan = dates.plan
    room, exam, every, standard = _changed_program_dap(gen, dates)
    months = ctx.calendar.labels()
    first_changed = _month(dates.change_date)
    before = [x for m, vs in standard.items() if m < first_changed for x in vs]
    after = [x for m, vs in standard.items() if m >= first_changed for x in vs]
    level = ctx.reference_level(exam, "dap_gy_cm2", dates.change_date)
    assert level is not None
    return _finding(
        gen,
        room.key,
        id="aec_dose_doubled",
        kind="changepoint",
        exam_type=exam,
        quantity="dap_gy_cm2",
        date=dates.change_date.isoformat(),
        month=first_changed,
        description=(
            f"On {dates.change_date:%d %B %Y} a service engineer raised the AEC dose level of "
            f"{room.name}'s table bucky for the abdomen program (a complaint about image noise) "
            "and the program's target exposure index with it, so the deviation index stayed "
            f"near 0 and nobody noticed: from {first_changed} the tube charge, the DAP and the "
            f"ESAK of every abdomen AP in {room.name} are {plan.change_factor:g} times what they "
            "were. The new median stays below the level: no group_above_level."
        ),
        expected={
            "planted_factor": plan.change_factor,
            "direction": "up",
            "last_month_before": months[months.index(first_changed) - 1],
            "first_changed_month": first_changed,
            "quantities": ["dap_gy_cm2", "esak_mgy"],
            "monthly_median_dap_gy_cm2": _by_month(every),
            "monthly_standard_median_dap_gy_cm2": _by_month(standard),
            "standard_median_after_over_before": round(
                statistics.median(after) / statistics.median(before), 3
            ),
            "level": {"set": level[1], "value": level[0]},
            "standard_median_after_to_level": round(statistics.median(after) / level[0], 3),
        },
    )


def _low_dose(gen: Generated, dates: RadiographyPlan, ctx: SimulationContext) -> PlantedFinding:
    """RAD 2's abdomen AP before its dose was doubled: far below the level (image quality)."""
    plan = dates.plan
    room, exam, _, standard = _changed_program_dap(gen, dates)
    changed = _month(dates.change_date)  # the change comes on the first day of a month
    by_month = _by_month({m: v for m, v in standard.items() if m < changed})
    first_month = min(by_month)
    first = date(int(first_month[:4]), int(first_month[5:]), 1)
    level = ctx.reference_level(exam, "dap_gy_cm2", first)
    assert level is not None
    fraction = design_parameters()["low_dose_fraction"]
    ratios = {m: round(r["median"] / level[0], 3) for m, r in by_month.items() if r["median"]}
    assert all(r < fraction for r in ratios.values()), "the low-dose plant must be far below"
    return _finding(
        gen,
        room.key,
        id="abdomen_far_below_level",
        kind="low_dose_review",
        exam_type=exam,
        quantity="dap_gy_cm2",
        date=first.isoformat(),
        month=first_month,
        description=(
            f"Until {dates.change_date:%d %B %Y} {room.name}'s abdomen AP runs at about a third "
            "of the invented local level (DAP and ESAK), far below half of it: the low-dose "
            "review asks whether its images still answer the clinical question (the same noise "
            "the radiologists later complained of). It does not ask for more dose by itself; the "
            "doubling that followed (aec_dose_doubled) was made without that review."
        ),
        expected={
            "quantities": list(plan.low_dose_quantities),
            "low_dose_fraction": fraction,
            "months": sorted(by_month),
            "monthly_standard_median_dap_gy_cm2": by_month,
            "level": {"set": level[1], "value": level[0]},
            "standard_median_to_level": ratios,
        },
    )


def _strictest_ratio(
    ctx: SimulationContext, exam: str, quantity: str, day: date, value: float
) -> dict[str, Any]:
    levels = ctx.levels(exam, quantity, day)
    return {
        "value": round(value, 4),
        "levels": levels,
        "ratio_to_level": {k: round(value / v, 3) for k, v in levels.items()},
        "ratio_to_strictest": round(value / min(levels.values()), 3) if levels else None,
    }


@dataclass
class _OutlierStudy:
    """Where one planted outlier is and what it holds: its values against the levels, the
    details the manifest lists, and the findings that follow from it."""

    study_uid: str
    sop_uids: list[str]
    day: date
    values: dict[str, dict[str, Any]]
    details: dict[str, Any]
    consequences: list[PlantedFinding] = field(default_factory=list)


def _outlier(gen: Generated, outlier: OutlierPlan, ctx: SimulationContext) -> list[PlantedFinding]:
    """One planted outlier far above its levels, and what follows from it."""
    if outlier.room in gen.radiography:
        found = _outlier_radiograph(gen, outlier, ctx)
    elif outlier.room in gen.ct:
        found = _outlier_ct(gen, outlier, ctx)
    else:
        found = _outlier_fluoro(gen, outlier, ctx)
    multiple = design_parameters()["investigation_multiple"]
    numbers = {
        "target_ratio": outlier.target_ratio,
        **found.details,
        "values": found.values,
        "quantities_above_investigation_level": sorted(
            q
            for q, v in found.values.items()
            if v["ratio_to_strictest"] and v["ratio_to_strictest"] > multiple
        ),
    }
    main = _finding(
        gen,
        outlier.room,
        id=outlier.key,
        kind=_OUTLIER_TAG,
        exam_type=outlier.exam_type,
        quantity=outlier.quantity,
        date=found.day.isoformat(),
        month=_month(found.day),
        description=outlier.story,
        expected=numbers,
        study_instance_uids=[found.study_uid],
        sop_instance_uids=found.sop_uids,
        paths=[gen.paths[s] for s in found.sop_uids],
    )
    return [main, *found.consequences]


def _outlier_radiograph(
    gen: Generated, outlier: OutlierPlan, ctx: SimulationContext
) -> _OutlierStudy:
    """The overexposed view: its reported DAP and, as a lower bound of the reconstructed ESAK
    (the backscatter factor is above 1), its incident air kerma
    ``K_a,i = Y(kV) * mAs * (1000 mm / d_entrance)**2`` (inverse square law; ``Y`` in µGy/mAs
    at 1 m, ``K_a,i`` in mGy)."""
    study = next(s for s in gen.radiography[outlier.room] if outlier.key in s.planted)
    view = next(v for v in study.views if _OUTLIER_TAG in v.planted)
    day = view.acquired.date()
    kai = (
        view.output_ugy_per_mas_1m
        * view.exposure_mas
        * (1000.0 / view.source_to_entrance_mm) ** 2
        / 1000.0
    )
    values = {
        "dap_gy_cm2": _strictest_ratio(
            ctx, outlier.exam_type, "dap_gy_cm2", day, view.dap_reported_gy_cm2
        ),
        "esak_mgy": _strictest_ratio(ctx, outlier.exam_type, "esak_mgy", day, kai),
    }
    values["esak_mgy"]["note"] = "value = incident air kerma, a lower bound of the ESAK"
    return _OutlierStudy(
        study_uid=study.study_uid,
        sop_uids=[view.sop_uid],
        day=day,
        values=values,
        details={
            "accession": study.accession,
            "event_uid": view.event_uid,
            "exposure_mas": view.exposure_mas,
            "kvp_kv": view.kvp_kv,
        },
        consequences=[_outlier_deviation_index(gen, outlier, study, view)],
    )


def _outlier_deviation_index(
    gen: Generated, outlier: OutlierPlan, study: RadiographStudy, view: RadiographView
) -> PlantedFinding:
    """The outlier view's detector overexposure, a consequence of its charge."""
    day = view.acquired.date()
    di = round(view.deviation_index or 0.0, 1)
    return _finding(
        gen,
        outlier.room,
        id=f"{outlier.key}_deviation_index",
        kind="deviation_index_out_of_range",
        exam_type=outlier.exam_type,
        quantity=None,
        date=day.isoformat(),
        month=_month(day),
        description=f"the same exposure overexposed the detector: DI {di:+.1f}",
        expected={"deviation_index": di, "event_uid": view.event_uid},
        study_instance_uids=[study.study_uid],
        sop_instance_uids=[view.sop_uid],
        paths=[gen.paths[view.sop_uid]],
        consequence_of=outlier.key,
    )


def _outlier_ct(gen: Generated, outlier: OutlierPlan, ctx: SimulationContext) -> _OutlierStudy:
    """The CT study's total DLP and largest CTDIvol against their levels."""
    ct = next(s for s in gen.ct[outlier.room] if outlier.key in s.planted)
    day = ct.start.date()
    return _OutlierStudy(
        study_uid=ct.study_uid,
        sop_uids=[ct.report_sop_uid]
        + [a.image_sop_uid for a in ct.acquisitions if a.image_sop_uid],
        day=day,
        values={
            "dlp_mgy_cm": _strictest_ratio(
                ctx, outlier.exam_type, "dlp_mgy_cm", day, ct.dlp_total_mgy_cm
            ),
            "ctdivol_mgy": _strictest_ratio(
                ctx, outlier.exam_type, "ctdivol_mgy", day, ct.ctdivol_max_mgy
            ),
        },
        details={"accession": ct.accession, "acquisitions": len(ct.acquisitions)},
    )


def _outlier_fluoro(gen: Generated, outlier: OutlierPlan, ctx: SimulationContext) -> _OutlierStudy:
    """The fluoroscopy study's total DAP and reference-point air kerma against their levels."""
    fl = next(s for s in gen.fluoro[outlier.room] if outlier.key in s.planted)
    day = fl.start.date()
    fluoro_s = sum(e.duration_s for e in fl.events if e.fluoroscopy)
    return _OutlierStudy(
        study_uid=fl.study_uid,
        sop_uids=[fl.report_sop_uid],
        day=day,
        values={
            "dap_gy_cm2": _strictest_ratio(
                ctx, outlier.exam_type, "dap_gy_cm2", day, fl.dap_total_reported_gy_cm2
            ),
            "reference_point_air_kerma_mgy": _strictest_ratio(
                ctx,
                outlier.exam_type,
                "reference_point_air_kerma_mgy",
                day,
                fl.rp_total_reported_mgy,
            ),
        },
        details={"accession": fl.accession, "fluoro_time_s": round(fluoro_s, 1)},
    )


def _no_dose(gen: Generated, dates: RadiographyPlan) -> PlantedFinding:
    plan = dates.plan
    room = gen.rooms[plan.no_dose_room]
    studies = [s for s in gen.radiography[room.key] if "no_dose_data" in s.planted]
    sops = [v.sop_uid for s in studies for v in s.views]
    first = studies[0].start.date()
    return _finding(
        gen,
        room.key,
        id="dose_link_failed",
        kind="no_dose_data",
        exam_type=None,
        quantity=None,
        date=first.isoformat(),
        month=_month(first),
        description=(
            f"After a battery swap on {first:%d %B %Y} {room.name}'s detector ran unpaired from "
            f"the generator for {len(studies)} examinations: their images carry no kV, no mAs, "
            "no DAP, no geometry and no exposure index (one flag per study)."
        ),
        expected={
            "studies": len(studies),
            "events": len(sops),
            "exam_types": sorted({v.exam_type or "" for s in studies for v in s.views}),
            "accessions": [s.accession for s in studies],
        },
        study_instance_uids=[s.study_uid for s in studies],
        sop_instance_uids=sops,
        paths=[gen.paths[s] for s in sops],
    )


def _recurrent(gen: Generated, dates: RadiographyPlan) -> PlantedFinding:
    """The patient scanned again and again: the recurrent-exposure list must name them."""
    from beamaudit.model.effective_dose import ct_effective_dose_msv
    from beamaudit.model.recurrent import DEFAULT_LEVEL_MSV

    plan = dates.plan
    room = gen.rooms[plan.recurrent_room]
    studies = [s for s in gen.ct[room.key] if "recurrent_patient" in s.planted]
    patient = studies[0].patient
    ages = [(s.start.date() - patient.birth_date).days / 365.25 for s in studies]
    doses = ct_effective_dose_msv(
        [s.dlp_total_mgy_cm for s in studies], region="abdomen_pelvis", age_years=ages
    ).effective_dose_msv
    total = float(doses.sum())
    assert total >= DEFAULT_LEVEL_MSV, "the recurrent plant must reach the level"
    first = studies[0].start.date()
    return _finding(
        gen,
        room.key,
        id="recurrent_patient",
        kind="recurrent_exposure",
        exam_type="ct_abdomen_pelvis",
        quantity=None,
        date=first.isoformat(),
        month=_month(first),
        description=(
            f"One inpatient had {len(studies)} three-phase abdomen-pelvis CT examinations on "
            f"{room.name}, about one every twelve days: each within its levels, together about "
            f"{total:.0f} mSv of effective dose (population-average estimate), above the "
            f"{DEFAULT_LEVEL_MSV:.0f} mSv of the recurrent-imaging list."
        ),
        expected={
            "studies": len(studies),
            "cumulative_effective_dose_msv": round(total, 1),
            "level_msv": DEFAULT_LEVEL_MSV,
        },
        study_instance_uids=[s.study_uid for s in studies],
    )


def _unmapped(gen: Generated, dates: RadiographyPlan) -> PlantedFinding:
    plan = dates.plan
    room = gen.rooms[plan.unmapped_room]
    views = [
        (s, v)
        for s in gen.radiography[room.key]
        for v in s.views
        if "unmapped_protocol" in v.planted
    ]
    first = min(v.acquired.date() for _, v in views)
    assert room.programs is not None
    intended = sorted({room.programs[p].exam_type for p in plan.unmapped_programs})
    return _finding(
        gen,
        room.key,
        id="new_reader_menu",
        kind="unmapped_events",
        exam_type=None,
        quantity=None,
        date=first.isoformat(),
        month=_month(first),
        description=(
            f"From {first:%d %B %Y} the radiographers of {room.name} use a new reader menu entry, "
            f"'{plan.unmapped_protocol_name}', for knee series; it fills no Body Part Examined, "
            "so no mapping rule recognises the exposures (they are knee AP and lateral views). "
            "These are the only unmapped events of the demo."
        ),
        expected={
            "protocol_name": plan.unmapped_protocol_name,
            "body_part": None,
            "study_description": sorted({s.study_description for s, _ in views}),
            "view_positions": sorted({v.view_position for _, v in views}),
            "n_events": len(views),
            "n_combinations": len({(v.view_position, s.study_description) for s, v in views}),
            "studies": len({s.study_uid for s, _ in views}),
            "intended_exam_types": intended,
        },
    )


def expected_findings(
    gen: Generated, ctx: SimulationContext, dates: RadiographyPlan
) -> list[PlantedFinding]:
    """Every planted finding with its expected numbers (broken files are added by the writer)."""
    findings = [*_dap_ratio(gen, dates), _change_point(gen, dates, ctx), _low_dose(gen, dates, ctx)]
    for outlier in dates.plan.outliers:
        findings += _outlier(gen, outlier, ctx)
    findings += [_no_dose(gen, dates), _unmapped(gen, dates), _recurrent(gen, dates)]
    findings.append(_paediatric(gen, ctx, dates))
    if gen.mammography:
        findings.append(_mammography_band(gen, ctx))
    findings += _skin_dose_plants(gen)
    return findings


def _paediatric(gen: Generated, ctx: SimulationContext, dates: RadiographyPlan) -> PlantedFinding:
    """The children's chest PA group of one ICRP 135 / EC RP 185 weight band above its level."""
    from beamaudit.api.review.levels import applicable_levels, load_demo_local_levels

    plan = dates.plan
    room = gen.rooms[plan.paediatric_room]
    studies = [s for s in gen.radiography[room.key] if _PAEDIATRIC_TAG in s.planted]
    monthly: dict[str, list[float]] = defaultdict(list)
    for s in studies:
        if not s.weight_recorded:
            continue  # a review counts them apart and never guesses them into a band
        for v in s.views:
            if v.exam_type == plan.paediatric_exam_type and v.dose_recorded:
                monthly[_month(v.acquired.date())].append(v.dap_reported_gy_cm2)
    first = studies[0].start.date()
    found = applicable_levels(
        load_demo_local_levels(),
        plan.paediatric_exam_type,
        "dap_gy_cm2",
        first,
        patient_group=plan.paediatric_group,
    )
    assert found, "the invented local set must hold the band's level"
    level = found[0].value
    by_month = _by_month(monthly)
    low, high = plan.paediatric_weight_kg
    return _finding(
        gen,
        room.key,
        **{"date": first.isoformat(), "month": _month(first), "quantity": "dap_gy_cm2"},
        id="paediatric_chest_above_band_level",
        kind="group_above_level",
        exam_type=plan.paediatric_exam_type,
        description=(
            f"Children of {low:g}-{high:g} kg sent to {room.name} for a chest PA are exposed on "
            "the adult program (adult field and AEC dose level): every month the group of the "
            f"ICRP 135 / EC RP 185 weight band {plan.paediatric_group} is above the invented "
            "local paediatric level of that band."
        ),
        expected={
            "patient_group": plan.paediatric_group,
            "studies": len(studies),
            "weight_not_recorded": sum(not s.weight_recorded for s in studies),
            "levels": {found[0].set_name: level},
            "by_month": by_month,
            "median_to_level": {
                m: round(r["median"] / level, 3) for m, r in by_month.items() if r["median"]
            },
        },
    )


def _mammography_band(gen: Generated, ctx: SimulationContext) -> PlantedFinding:
    """The mammography room's CC views above the local level in the thickness band."""
    from beamaudit.api.demo.mammography import MAMMOGRAPHY_PLAN as plan

    room = gen.rooms[plan.room]
    low, high = plan.band_mm
    monthly: dict[str, list[float]] = defaultdict(list)
    for s in gen.mammography[room.key]:
        for v in s.views:
            if v.exam_type == plan.exam_type and low <= v.thickness_mm < high:
                monthly[_month(v.acquired.date())].append(v.mgd_mgy)
    first = gen.mammography[room.key][0].start.date()
    levels = ctx.levels(plan.exam_type, "mgd_mgy", first)
    median = _median([x for values in monthly.values() for x in values]) or 0.0
    return _finding(
        gen,
        room.key,
        id="mammography_cc_above_local_level",
        kind="group_above_level",
        exam_type=plan.exam_type,
        quantity="mgd_mgy",
        date=first.isoformat(),
        month=_month(first),
        description=(
            f"{room.name} (W/Rh) runs its CC views at about 1.2 times the local level in the "
            f"{low:g}-{high:g} mm compressed-thickness band, every month: the unit's AEC was set "
            "up for a higher dose level than the site agreed; its MLO views stay below theirs"
        ),
        expected={
            "patient_group": f"breast_{low:g}_{high:g}mm",
            "levels": levels,
            "by_month": _by_month(monthly),
            "median_to_level": {k: round(median / v, 3) for k, v in levels.items()},
        },
    )


def _is_skin_plant(planted: list[str]) -> bool:
    return any(p in INTERVENTIONAL_PLANTS for p in planted)


_SKIN_STORIES = {
    "skin_dose_overlapping": (
        "Two long runs from nearly the same direction (5 degrees LAO and RAO) overlap on one "
        "patch of the back: the peak skin dose passes NCRP 168's 3 Gy while K_a,r stays below its "
        "5 Gy. Only the skin-dose map finds this patient."
    ),
    "skin_dose_spread": (
        "Eight runs from eight directions around the patient: K_a,r passes NCRP 168's 5 Gy, but "
        "the dose is spread over the skin and the peak skin dose stays well below 3 Gy."
    ),
}


def _skin_dose_plants(gen: Generated) -> list[PlantedFinding]:
    """The interventional room's two procedures at an NCRP 168 level (``srdl_exceeded``)."""
    found = []
    for key, studies in gen.fluoro.items():
        for f in studies:
            plant = next((p for p in f.planted if p in INTERVENTIONAL_PLANTS), None)
            if plant is None:
                continue
            fluoro_s = sum(e.duration_s for e in f.events if e.fluoroscopy)
            found.append(
                _finding(
                    gen,
                    key,
                    id=plant,
                    kind="srdl_exceeded",
                    exam_type=f.exam_type,
                    quantity=None,
                    date=f.start.date().isoformat(),
                    month=_month(f.start.date()),
                    description=_SKIN_STORIES[plant],
                    expected={
                        "accession": f.accession,
                        "reference_point_air_kerma_mgy": round(f.rp_total_reported_mgy, 1),
                        "dap_gy_cm2": round(f.dap_total_reported_gy_cm2, 2),
                        "fluoro_time_s": round(fluoro_s, 1),
                        "events": len(f.events),
                        "peak_skin_dose_above_3gy": plant == "skin_dose_overlapping",
                    },
                    study_instance_uids=[f.study_uid],
                    sop_instance_uids=[f.report_sop_uid],
                    paths=[gen.paths[f.report_sop_uid]],
                )
            )
    return found


def _highest_healthy(gen: Generated, ctx: SimulationContext) -> dict[str, dict[str, Any]]:
    highest: dict[str, dict[str, Any]] = {}
    for v in _exam_values(gen):
        if v.outlier is not None:
            continue
        levels = ctx.levels(v.exam_type, v.quantity, v.day)
        if not levels:
            continue
        ratio = v.value / min(levels.values())
        if ratio > highest.get(v.quantity, {"ratio_to_strictest": 0.0})["ratio_to_strictest"]:
            highest[v.quantity] = {
                "ratio_to_strictest": round(ratio, 3),
                "room_key": v.room,
                "exam_type": v.exam_type,
                "date": v.day.isoformat(),
                "value": round(v.value, 4),
            }
    return highest


def quiet_numbers(
    gen: Generated,
    ctx: SimulationContext,
    medians: Iterable[dict[str, Any]],
    dates: RadiographyPlan,
) -> list[dict[str, Any]]:
    """The findings deliberately **not** planted, with the numbers that keep them quiet."""
    rows = list(medians)
    return [
        _quiet_group_above_level(gen, dates, rows),
        _quiet_low_dose(gen, ctx, dates, rows),
        {
            "kind": "exam_above_investigation_level",
            "reason": "only the planted outliers are far above their levels; the highest healthy "
            "reported value per quantity is listed against its strictest level (an investigation "
            "level must lie above these ratios; ESAK is reconstructed and not listed)",
            "highest_healthy_to_strictest": _highest_healthy(gen, ctx),
        },
        _quiet_srdl(gen),
        _quiet_deviation_index(gen),
        _quiet_dap_ratio(gen, dates),
        *([_quiet_mgd_ratio()] if gen.mammography else []),
        {
            "kind": "unknown_exam_type",
            "reason": "every mapped event's exam type is in the shipped catalogue",
        },
    ]


#: What the quiet numbers name of a group median row.
_GROUP_FIELDS = ("room_key", "exam_type", "month", "quantity", "n_standard")


def _quiet_group_above_level(
    gen: Generated, dates: RadiographyPlan, rows: list[dict[str, Any]]
) -> dict[str, Any]:
    """The highest standard-size median of any group, per level set, against its level."""
    top: dict[str, dict[str, Any]] = {}
    for row in rows:
        for set_name, ratio in row["median_standard_to_level"].items():
            if ratio > top.get(set_name, {"ratio": 0.0})["ratio"]:
                top[set_name] = {"ratio": ratio, **{f: row[f] for f in _GROUP_FIELDS}}
    return {
        "kind": "group_above_level",
        "reason": "no group is planted above a level but the mammography room's CC views "
        "in the thickness band and the children's chest PA of one weight band: every "
        "monthly median of every adult radiography, CT and fluoroscopy room and exam type "
        "stays below each shipped level (the doubled abdomen AP of "
        f"{gen.rooms[dates.plan.change_room].name} included)",
        "highest_standard_median_to_level": top,
    }


def _quiet_low_dose(
    gen: Generated, ctx: SimulationContext, dates: RadiographyPlan, rows: list[dict[str, Any]]
) -> dict[str, Any]:
    """The lowest judged standard-size median against its strictest level (the largest of its
    ratios to the levels), the planted low-dose group left out: the changed program before its
    change."""
    changed = gen.rooms[dates.plan.change_room]
    assert changed.programs is not None
    planted_low = {
        (changed.key, changed.programs[dates.plan.change_program].exam_type, m)
        for m in ctx.calendar.labels()
        if m < _month(dates.change_date)
    }
    minimum = design_parameters()["minimum_samples"].get("radiography", 20)
    lowest: dict[str, Any] = {}
    for row in rows:
        strictest = max(row["median_standard_to_level"].values(), default=None)
        if (
            strictest is not None
            and row["n_standard"] >= minimum
            and (row["room_key"], row["exam_type"], row["month"]) not in planted_low
            and strictest < lowest.get("ratio_to_strictest", float("inf"))
        ):
            lowest = {"ratio_to_strictest": strictest, **{f: row[f] for f in _GROUP_FIELDS}}
    return {
        "kind": "low_dose_review",
        "reason": "no judged group is far below its strictest level but "
        f"{changed.name}'s abdomen AP before its doubling (planted): the lowest other "
        "standard-size median is listed "
        "against its strictest level (the review flags below "
        f"{design_parameters()['low_dose_fraction']} of it)",
        "lowest_standard_median_to_strictest": lowest,
    }


def _quiet_srdl(gen: Generated) -> dict[str, Any]:
    """The largest total DAP, K_a,r and fluoroscopy time of any fluoroscopy study but the
    interventional room's two planted procedures (findings, not quiet numbers)."""
    quiet_fluoro = [f for ss in gen.fluoro.values() for f in ss if not _is_skin_plant(f.planted)]
    fluoro_max = {
        "dap_gy_cm2": max(f.dap_total_reported_gy_cm2 for f in quiet_fluoro),
        "reference_point_air_kerma_mgy": max(f.rp_total_reported_mgy for f in quiet_fluoro),
        "fluoro_time_s": max(
            sum(e.duration_s for e in f.events if e.fluoroscopy) for f in quiet_fluoro
        ),
    }
    return {
        "kind": "srdl_exceeded",
        "reason": "no fluoroscopy study reaches an NCRP 168 substantial radiation dose level "
        "(500 Gy.cm2, 5000 mGy, 60 min), the planted enema included, but the two planted "
        "interventional procedures",
        "largest_study": {k: round(v, 2) for k, v in fluoro_max.items()},
    }


def _quiet_deviation_index(gen: Generated) -> dict[str, Any]:
    """How the deviation indices of the healthy radiographs spread about 0."""
    di = [
        v.deviation_index
        for ss in gen.radiography.values()
        for s in ss
        for v in s.views
        if v.deviation_index is not None and _OUTLIER_TAG not in v.planted
    ]
    return {
        "kind": "deviation_index_out_of_range",
        "reason": "deviation indices of healthy radiographs stay near 0 (AEC, or the "
        "radiographer's judgement on the R10 mAs scale); only the two radiography outliers "
        "are outside -3 to +3",
        "within_plus_minus_1": round(sum(abs(x) <= 1.0 for x in di) / len(di), 4),
        "largest_absolute": round(max(abs(x) for x in di), 2),
    }


def _quiet_mgd_ratio() -> dict[str, Any]:
    """The mammography room's AGD ratio: the unit's method is a constant factor on ours."""
    from beamaudit.api.demo.mammography import VENDOR_FACTOR

    return {
        "kind": "mgd_ratio_off_baseline",
        "reason": "the mammography unit's AGD is the Dance-method D_G times a constant factor "
        "(its own method, in 5 mm thickness steps) in every month, so the room's monthly median "
        "ratio stays at its usual value",
        "vendor_factor": VENDOR_FACTOR,
    }


def _quiet_dap_ratio(gen: Generated, dates: RadiographyPlan) -> dict[str, Any]:
    """Median reported over delivered DAP of every radiography room but the faulty meter's."""
    meter_ratios = {
        key: _median(
            [
                v.dap_reported_gy_cm2 / v.dap_true_gy_cm2
                for s in studies
                for v in s.views
                if v.dose_recorded and v.technique_recorded
            ]
        )
        for key, studies in gen.radiography.items()
        if key != dates.plan.dap_meter_room
    }
    return {
        "kind": "dap_ratio_out_of_tolerance",
        "reason": "the other radiography rooms' DAP meters read within a few percent of the "
        "delivered DAP (reported / true, median over the period)",
        "reported_to_true_median": meter_ratios,
    }
