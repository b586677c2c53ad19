"""The numbers the reviews should find, computed from the generated records themselves.

Every expected figure of the manifest (planted ratios, monthly medians, the highest healthy
values that keep unplanted flags quiet) is measured on the very exposures that were written, so
the manifest never promises what the files do not hold.
"""

from __future__ import annotations

import statistics
from collections import defaultdict
from collections.abc import Iterable
from dataclasses import dataclass, field
from datetime import date
from typing import Any

from beamaudit.api.demo.context import SimulationContext
from beamaudit.api.demo.manifest import PlantedFinding
from beamaudit.api.demo.plants import OutlierPlan
from beamaudit.api.demo.radiography import RadiographyPlan
from beamaudit.api.demo.records import CtStudy, FluoroStudy, RadiographStudy
from beamaudit.api.demo.scenario import RoomSpec

__all__ = ["Generated", "expected_findings", "group_medians", "quiet_numbers"]

_LOCAL_KIND = "local"


@dataclass
class Generated:
    """The simulated studies of one run, by room key, and where their files went."""

    rooms: dict[str, RoomSpec]
    radiography: dict[str, list[RadiographStudy]] = field(default_factory=dict)
    ct: dict[str, list[CtStudy]] = field(default_factory=dict)
    fluoro: dict[str, list[FluoroStudy]] = field(default_factory=dict)
    paths: dict[str, str] = field(default_factory=dict)  # SOP Instance UID -> relative path


def _month(day: date) -> str:
    return f"{day.year:04d}-{day.month:02d}"


def _exam_values(gen: Generated) -> Iterable[tuple[str, str, date, str, float, str | None]]:
    """(room, exam type, date, quantity, reported value, planted outlier key) of every value a
    review compares with a level: per view for radiography, per study for CT and fluoroscopy."""
    for key, studies in gen.radiography.items():
        for s in studies:
            outlier = next((p for p in s.planted if p.startswith("outlier_")), None)
            for v in s.views:
                if v.exam_type is not None and v.dose_recorded:
                    is_out = outlier if "exam_above_investigation_level" in v.planted else None
                    yield (
                        key,
                        v.exam_type,
                        v.acquired.date(),
                        "dap_gy_cm2",
                        v.dap_reported_gy_cm2,
                        is_out,
                    )
    for key, ct_studies in gen.ct.items():
        for c in ct_studies:
            outlier = next((p for p in c.planted if p.startswith("outlier_")), None)
            day = c.start.date()
            yield key, c.exam_type, day, "ctdivol_mgy", c.ctdivol_max_mgy, outlier
            yield key, c.exam_type, day, "dlp_mgy_cm", c.dlp_total_mgy_cm, outlier
    for key, fl_studies in gen.fluoro.items():
        for f in fl_studies:
            outlier = next((p for p in f.planted if p.startswith("outlier_")), None)
            day = f.start.date()
            yield key, f.exam_type, day, "dap_gy_cm2", f.dap_total_reported_gy_cm2, outlier
            yield key, f.exam_type, day, "ref_point_air_kerma_mgy", f.rp_total_reported_mgy, outlier


def group_medians(gen: Generated, ctx: SimulationContext) -> list[dict[str, Any]]:
    """Per room, exam type, month and reported quantity: n, median and the shipped levels."""
    groups: dict[tuple[str, str, str, str], list[float]] = defaultdict(list)
    for room, exam, day, quantity, value, _ in _exam_values(gen):
        groups[(room, exam, _month(day), quantity)].append(value)
    out = []
    for (room, exam, month, quantity), values in sorted(groups.items()):
        first = date(int(month[:4]), int(month[5:]), 1)
        levels = ctx.levels(exam, quantity, first)
        median = statistics.median(values)
        out.append(
            {
                "room": gen.rooms[room].name,
                "room_key": room,
                "exam_type": exam,
                "month": month,
                "quantity": quantity,
                "n": len(values),
                "median": round(median, 6),
                "levels": levels,
                "median_to_level": {k: round(median / v, 4) for k, v in levels.items()},
            }
        )
    return out


def _ratio_of_medians(values: dict[str, list[float]]) -> dict[str, Any]:
    return {m: {"n": len(v), "median": round(statistics.median(v), 4)} for m, v in values.items()}


def _dap_ratio(gen: Generated, dates: RadiographyPlan, ctx: SimulationContext) -> PlantedFinding:
    plan = dates.plan
    room = gen.rooms[plan.dap_meter_room]
    before: list[float] = []
    after: list[float] = []
    monthly: dict[str, list[float]] = defaultdict(list)
    for s in gen.radiography[room.key]:
        for v in s.views:
            if not (v.dose_recorded and v.technique_recorded) or v.exam_type is None:
                continue
            ratio = v.dap_reported_gy_cm2 / v.dap_true_gy_cm2
            (after if v.acquired.date() >= dates.meter_date else before).append(ratio)
            monthly[_month(v.acquired.date())].append(ratio)
    return PlantedFinding(
        id="dap_meter_fault",
        kind="dap_ratio",
        room=room.name,
        room_key=room.key,
        station_name=room.station_name,
        exam_type=None,
        quantity="dap_gy_cm2",
        date=dates.meter_date.isoformat(),
        month=_month(dates.meter_date),
        description=(
            f"{room.name}'s DAP chamber was exchanged at the service visit of "
            f"{dates.meter_date:%d %B %Y} and its calibration factor was not entered: from that "
            f"day the room reports {plan.dap_meter_factor:.2f} times the DAP it delivers. "
            "Technique, tube output (the room's QA) and patients are unchanged, so beamaudit's "
            "reconstruction stays put while the reported DAP jumps. Side effect, by design: every "
            f"reported-DAP median of {room.name} steps up by the same factor on that day (the "
            "reconstructed ESAK does not)."
        ),
        expected={
            "planted_factor": plan.dap_meter_factor,
            "reported_to_true_before": {
                "n": len(before),
                "median": round(statistics.median(before), 4),
            },
            "reported_to_true_after": {
                "n": len(after),
                "median": round(statistics.median(after), 4),
            },
            "reported_to_true_by_month": _ratio_of_medians(monthly),
            "note": "true = the DAP the room delivered (what a calibrated reconstruction should "
            "find, within the model's uncertainty)",
        },
    )


def _change_point(gen: Generated, dates: RadiographyPlan, ctx: SimulationContext) -> PlantedFinding:
    plan = dates.plan
    room = gen.rooms[plan.change_room]
    assert room.programs is not None
    exam = room.programs[plan.change_program].exam_type
    monthly: dict[str, list[float]] = defaultdict(list)
    for s in gen.radiography[room.key]:
        for v in s.views:
            if (
                v.program == plan.change_program
                and v.dose_recorded
                and "exam_above_investigation_level" not in v.planted
            ):
                monthly[_month(v.acquired.date())].append(v.dap_reported_gy_cm2)
    months = ctx.calendar.labels()
    first_changed = _month(dates.change_date)
    before = [x for m, vs in monthly.items() if m < first_changed for x in vs]
    after = [x for m, vs in monthly.items() if m >= first_changed for x in vs]
    level = ctx.reference_level(exam, "dap_gy_cm2", dates.change_date)
    assert level is not None
    return PlantedFinding(
        id="aec_dose_doubled",
        kind="change_point",
        room=room.name,
        room_key=room.key,
        station_name=room.station_name,
        exam_type=exam,
        quantity="dap_gy_cm2",
        date=dates.change_date.isoformat(),
        month=first_changed,
        description=(
            f"On {dates.change_date:%d %B %Y} a service engineer raised the AEC dose level of "
            f"{room.name}'s table bucky for the abdomen program (a complaint about image noise) "
            "and "
            f"the program's target exposure index with it, so the deviation index stayed near 0 "
            f"and nobody noticed: from {first_changed} the tube charge, the DAP and the ESAK of "
            f"every abdomen AP in {room.name} are {plan.change_factor:g} times what they were."
        ),
        expected={
            "planted_factor": plan.change_factor,
            "last_month_before": months[months.index(first_changed) - 1],
            "first_changed_month": first_changed,
            "quantities": ["dap_gy_cm2", "esak_mgy"],
            "monthly_median_dap_gy_cm2": _ratio_of_medians(monthly),
            "median_after_over_before": round(
                statistics.median(after) / statistics.median(before), 3
            ),
            "level": {"set": level[1], "value": level[0]},
            "median_after_to_level": round(statistics.median(after) / level[0], 3),
        },
    )


def _outlier_finding(
    gen: Generated, outlier: OutlierPlan, ctx: SimulationContext
) -> PlantedFinding:
    room = gen.rooms[outlier.room]
    numbers: dict[str, Any] = {"target_ratio": outlier.target_ratio}
    study_uid, sops, day = "", [], None
    if outlier.room in gen.radiography:
        study = next(s for s in gen.radiography[outlier.room] if outlier.key in s.planted)
        view = next(v for v in study.views if "exam_above_investigation_level" in v.planted)
        study_uid, sops, day = study.study_uid, [view.sop_uid], view.acquired.date()
        values = {"dap_gy_cm2": view.dap_reported_gy_cm2}
        numbers.update(
            accession=study.accession,
            event_uid=view.event_uid,
            exposure_mas=view.exposure_mas,
            kvp_kv=view.kvp_kv,
            deviation_index=round(view.deviation_index or 0.0, 1),
        )
    elif outlier.room in gen.ct:
        ct = next(s for s in gen.ct[outlier.room] if outlier.key in s.planted)
        study_uid, day = ct.study_uid, ct.start.date()
        sops = [ct.report_sop_uid] + [a.image_sop_uid for a in ct.acquisitions if a.image_sop_uid]
        values = {"dlp_mgy_cm": ct.dlp_total_mgy_cm, "ctdivol_mgy": ct.ctdivol_max_mgy}
        numbers.update(accession=ct.accession, acquisitions=len(ct.acquisitions))
    else:
        fl = next(s for s in gen.fluoro[outlier.room] if outlier.key in s.planted)
        study_uid, day, sops = fl.study_uid, fl.start.date(), [fl.report_sop_uid]
        values = {
            "dap_gy_cm2": fl.dap_total_reported_gy_cm2,
            "ref_point_air_kerma_mgy": fl.rp_total_reported_mgy,
        }
        numbers.update(
            accession=fl.accession,
            fluoro_time_s=round(sum(e.duration_s for e in fl.events if e.fluoroscopy), 1),
        )
    numbers["values"] = {}
    for quantity, value in values.items():
        levels = ctx.levels(outlier.exam_type, quantity, day)
        numbers["values"][quantity] = {
            "value": round(value, 4),
            "levels": levels,
            "ratio_to_level": {k: round(value / v, 3) for k, v in levels.items()},
        }
    return PlantedFinding(
        id=outlier.key,
        kind="exam_above_investigation_level",
        room=room.name,
        room_key=room.key,
        station_name=room.station_name,
        exam_type=outlier.exam_type,
        quantity=outlier.quantity,
        date=day.isoformat(),
        month=_month(day),
        description=outlier.story,
        expected=numbers,
        study_instance_uids=[study_uid],
        sop_instance_uids=sops,
        paths=[gen.paths[s] for s in sops],
    )


def _no_dose(gen: Generated, dates: RadiographyPlan) -> PlantedFinding:
    plan = dates.plan
    room = gen.rooms[plan.no_dose_room]
    studies = [s for s in gen.radiography[room.key] if "no_dose_data" in s.planted]
    sops = [v.sop_uid for s in studies for v in s.views]
    first = studies[0].start.date()
    return PlantedFinding(
        id="dose_link_failed",
        kind="no_dose_data",
        room=room.name,
        room_key=room.key,
        station_name=room.station_name,
        exam_type=None,
        quantity=None,
        date=first.isoformat(),
        month=_month(first),
        description=(
            f"After a battery swap on {first:%d %B %Y} {room.name}'s detector ran unpaired from "
            f"the generator for {len(studies)} examinations: their images carry no kV, no mAs, "
            "no DAP, no geometry and no exposure index."
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
    return PlantedFinding(
        id="new_reader_menu",
        kind="unmapped_protocol",
        room=room.name,
        room_key=room.key,
        station_name=room.station_name,
        exam_type=None,
        quantity=None,
        date=first.isoformat(),
        month=_month(first),
        description=(
            f"From {first:%d %B %Y} the radiographers of {room.name} use a new reader menu entry, "
            f"'{plan.unmapped_protocol_name}', for knee series; it fills no Body Part Examined, "
            "so no mapping rule recognises the exposures (they are knee AP and lateral views)."
        ),
        expected={
            "protocol_name": plan.unmapped_protocol_name,
            "body_part": None,
            "study_description": sorted({s.study_description for s, _ in views}),
            "view_positions": sorted({v.view_position for _, v in views}),
            "events": len(views),
            "studies": len({s.study_uid for s, _ in views}),
            "intended_exam_types": intended,
        },
    )


def expected_findings(
    gen: Generated, ctx: SimulationContext, dates: RadiographyPlan
) -> list[PlantedFinding]:
    """Every planted finding with its expected numbers (broken files are added by the writer)."""
    findings = [
        _dap_ratio(gen, dates, ctx),
        _change_point(gen, dates, ctx),
        *(_outlier_finding(gen, o, ctx) for o in dates.plan.outliers),
        _no_dose(gen, dates),
        _unmapped(gen, dates),
    ]
    return findings


def quiet_numbers(
    gen: Generated, ctx: SimulationContext, medians: list[dict[str, Any]], dates: RadiographyPlan
) -> list[dict[str, Any]]:
    """The findings deliberately **not** planted, with the numbers that keep them quiet."""
    top: dict[str, tuple[float, dict[str, Any]]] = {}
    for row in medians:
        for set_name, ratio in row["median_to_level"].items():
            if ratio > top.get(set_name, (0.0, {}))[0]:
                top[set_name] = (ratio, row)
    highest_exam: dict[str, dict[str, Any]] = {}
    for room, exam, day, quantity, value, outlier in _exam_values(gen):
        if outlier is not None:
            continue
        for set_name, level in ctx.levels(exam, quantity, day).items():
            ratio = value / level
            key = f"{set_name} / {quantity}"
            if ratio > highest_exam.get(key, {"ratio": 0.0})["ratio"]:
                highest_exam[key] = {
                    "ratio": round(ratio, 3),
                    "room_key": room,
                    "exam_type": exam,
                    "date": day.isoformat(),
                    "value": round(value, 4),
                    "level": level,
                }
    di = [
        v.deviation_index
        for ss in gen.radiography.values()
        for s in ss
        for v in s.views
        if v.deviation_index is not None and "exam_above_investigation_level" not in v.planted
    ]
    meter_ratios = {
        key: round(
            statistics.median(
                v.dap_reported_gy_cm2 / v.dap_true_gy_cm2
                for s in studies
                for v in s.views
                if v.dose_recorded and v.technique_recorded
            ),
            4,
        )
        for key, studies in gen.radiography.items()
        if key != dates.plan.dap_meter_room
    }
    return [
        {
            "kind": "group_above_level",
            "reason": "no group is planted above a level: every monthly median of every room and "
            "exam type stays below each shipped level (the doubled abdomen AP of "
            f"{gen.rooms[dates.plan.change_room].name} included)",
            "highest_median_to_level": {
                k: {
                    "ratio": v[0],
                    **{f: v[1][f] for f in ("room_key", "exam_type", "month", "quantity", "n")},
                }
                for k, v in top.items()
            },
        },
        {
            "kind": "exam_above_investigation_level",
            "reason": "only the planted outliers are far above their levels; the highest healthy "
            "single value per level set and quantity is listed, so an investigation level must "
            "lie above these ratios",
            "highest_healthy_exam_to_level": highest_exam,
        },
        {
            "kind": "deviation_index",
            "reason": "deviation indices of healthy radiographs stay near 0 (AEC, or the "
            "radiographer's judgement on the R10 mAs scale)",
            "within_plus_minus_1": round(sum(abs(x) <= 1.0 for x in di) / len(di), 4),
            "largest_absolute": round(max(abs(x) for x in di), 2),
        },
        {
            "kind": "dap_ratio",
            "reason": "the other radiography rooms' DAP meters read within a few percent of the "
            "delivered DAP (reported / true, median over the period)",
            "reported_to_true_median": meter_ratios,
        },
        {
            "kind": "unmapped_protocol",
            "reason": "every other protocol, body part and view maps to an exam type with the "
            "shipped mapping rules",
        },
    ]
