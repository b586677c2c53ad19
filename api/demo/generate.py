"""Generate the invented demo scenario as DICOM files, with its manifest, README and truth table.

:func:`generate_scenario` simulates every room of :mod:`beamaudit.api.demo.scenario` over the
requested months and writes, under ``output_dir``:

* ``folder/<room>/<YYYY-MM>/*.dcm``: rooms delivered by the folder scan (RAD 1, CR 1, CT 1);
* ``cstore/<room>/<YYYY-MM>/*.dcm``: rooms whose objects are sent over C-STORE (RAD 2,
  MOBILE 1, FLUORO 1);
* ``broken/``: three files ingest must reject (truncated, not DICOM, kVp out of range);
* ``manifest.json`` (:class:`~beamaudit.api.demo.manifest.ScenarioManifest`), ``README.md`` and
  ``truth_events.csv`` (every irradiation event with its true and reported dose).

The same ``seed``, ``months`` and ``end_month`` give the same files byte for byte. Everything is
invented; see the README the generator writes.
"""

from __future__ import annotations

import shutil
from datetime import date, timedelta
from pathlib import Path
from typing import Any

import numpy as np

import beamaudit
from beamaudit.api.demo.context import Calendar, SimulationContext, UidFactory, parse_month
from beamaudit.api.demo.ct_fluoro import simulate_ct, simulate_fluoro
from beamaudit.api.demo.ct_pixels import localizer_calibration_points
from beamaudit.api.demo.dicom_objects import CR_IMAGE, CT_IMAGE, DX_PRESENTATION, XRAY_DOSE_SR
from beamaudit.api.demo.errors import DemoError
from beamaudit.api.demo.expected import (
    Generated,
    design_parameters,
    expected_findings,
    group_medians,
    quiet_numbers,
)
from beamaudit.api.demo.interventional import simulate_interventional
from beamaudit.api.demo.mammography import MAMMOGRAPHY_IMAGE, simulate_mammography
from beamaudit.api.demo.manifest import FORMAT, QARecord, RoomEntry, ScenarioManifest
from beamaudit.api.demo.physics import TubeOutput
from beamaudit.api.demo.plants import PLANTED
from beamaudit.api.demo.radiography import RECEPTOR_GAP_MM, RadiographyPlan, simulate_radiography
from beamaudit.api.demo.readme import render_readme
from beamaudit.api.demo.scenario import INSTITUTION, INVENTED_NOTICE, ROOMS, RoomSpec
from beamaudit.api.demo.writer import Writer

__all__ = ["MAX_MONTHS", "MIN_MONTHS", "default_end_month", "generate_scenario"]

MIN_MONTHS = 3  # a baseline month, the planted changes, and a month after them
MAX_MONTHS = 24
_OWNED = ("folder", "cstore", "broken", "manifest.json", "README.md", "truth_events.csv")
_MATERIALS = {"Al": "aluminium", "Cu": "copper", "Rh": "rhodium"}
_QA_KV = (60.0, 70.0, 80.0, 90.0, 100.0, 110.0, 120.0)
_SOP_CLASSES = {
    "radiography": [DX_PRESENTATION],
    "mobile": [DX_PRESENTATION],
    "cr": [CR_IMAGE],
    "fluoroscopy": [XRAY_DOSE_SR],
    "interventional": [XRAY_DOSE_SR],
    "ct": [XRAY_DOSE_SR, CT_IMAGE],
    "mammography": [MAMMOGRAPHY_IMAGE],
}


def default_end_month(today: date | None = None) -> str:
    """The last complete calendar month before ``today`` (default: today), ``YYYY-MM``."""
    today = today or date.today()
    last = today.replace(day=1) - timedelta(days=1)
    return f"{last.year:04d}-{last.month:02d}"


def _layers(layers: tuple[tuple[str, float], ...]) -> list[dict[str, Any]]:
    return [{"material": _MATERIALS[m], "thickness_mm": t} for m, t in layers]


def _prepare_output(output_dir: Path) -> None:
    if output_dir.exists() and not output_dir.is_dir():
        raise DemoError(f"{output_dir} exists and is not a folder")
    if output_dir.is_dir() and any(output_dir.iterdir()):
        manifest = output_dir / "manifest.json"
        if not manifest.is_file() or FORMAT not in manifest.read_text("utf-8", errors="replace"):
            raise DemoError(
                f"{output_dir} is not empty and holds no earlier demo; choose an empty folder"
            )
        for name in _OWNED:  # an earlier demo: replace exactly what the generator wrote
            path = output_dir / name
            if path.is_dir():
                shutil.rmtree(path)
            elif path.exists():
                path.unlink()
    output_dir.mkdir(parents=True, exist_ok=True)


def _qa_records(room: RoomSpec, ctx: SimulationContext) -> list[QARecord]:
    """The invented QA of a calibrated room: output and HVL at 60-120 kV, 41 days before."""
    if not room.calibrated:
        return []
    rng = ctx.rng(f"qa:{room.key}")
    tube = TubeOutput(
        filters=room.filtration,
        anode_angle_deg=room.anode_angle_deg,
        efficiency=room.output_efficiency,
    )
    measured_on = (ctx.calendar.start - timedelta(days=41)).isoformat()
    records = []
    for kv in _QA_KV:
        # dosimeter reproducibility 1.5 %, HVL reading +/- 0.02 mm Al (invented)
        output = float(tube.output_ugy_per_mas_1m(kv)) * float(np.exp(rng.normal(0.0, 0.015)))
        hvl = float(tube.hvl1_mm_al(kv)) + float(rng.normal(0.0, 0.02))
        records.append(
            QARecord(
                measured_on=measured_on,
                kvp_kv=kv,
                filtration=_layers(room.added_filters),
                distance_mm=1000.0,
                output_ugy_per_mas=round(output, 2),
                hvl_mm_al=round(hvl, 2),
                note="INVENTED annual QA: solid-state dosimeter on the central axis at 1 m, "
                "the room's added filter in place",
            )
        )
    return records


def _room_entry(
    room: RoomSpec, ctx: SimulationContext, gen: Generated, writer: Writer
) -> RoomEntry:
    studies = (
        gen.radiography.get(room.key)
        or gen.ct.get(room.key)
        or gen.fluoro.get(room.key)
        or gen.mammography.get(room.key)
        or []
    )
    table_gap = RECEPTOR_GAP_MM["table_bucky"] if room.kind in ("radiography", "cr") else None
    return RoomEntry(
        key=room.key,
        site=INSTITUTION,
        name=room.name,
        station_name=room.station_name,
        manufacturer=room.manufacturer,
        model_name=room.model_name,
        serial_number=room.serial_number,
        device_observer_uid=UidFactory.device_uid(room.key),
        modality=room.modality,
        kind=room.kind,
        delivery=room.delivery,
        path=f"{room.delivery}/{room.key}",
        anode_material="tungsten",
        anode_angle_deg=room.anode_angle_deg,
        ripple_percent=0.0,
        inherent_filtration=_layers((("Al", room.inherent_al_mm),)) if room.inherent_al_mm else [],
        added_filtration=_layers(room.added_filters),
        filtration=_layers(room.filtration),
        table_to_detector_mm=table_gap,
        calibrated=room.calibrated,
        qa_measurements=_qa_records(room, ctx),
        studies=len(studies),
        files=writer.files.get(room.key, 0),
        events=writer.events.get(room.key, 0),
        sop_classes=_SOP_CLASSES[room.kind],
        ct_localizer_calibration=_localizer_calibration(room, ctx),
    )


def _localizer_calibration(room: RoomSpec, ctx: SimulationContext) -> dict[str, Any] | None:
    """The invented calibration of the CT scanner's frontal localizer at 120 kV, measured with
    water cylinders on the table 41 days before the first month (as the QA of the X-ray rooms)."""
    if room.kind != "ct":
        return None
    values, water = localizer_calibration_points()
    return {
        "kvp_kv": 120.0,
        "view": "frontal",
        "pixel_values": values,
        "water_thickness_mm": water,
        "measured_on": (ctx.calendar.start - timedelta(days=41)).isoformat(),
        "source": "INVENTED: water cylinders of 10-50 cm on the table, frontal localizer, 120 kV",
    }


def _check_arguments(months: int, seed: int, end_month: str | None) -> str:
    if isinstance(months, bool) or not isinstance(months, int):
        raise DemoError(f"months must be a whole number, not {months!r}")
    if not MIN_MONTHS <= months <= MAX_MONTHS:
        raise DemoError(
            f"months must be {MIN_MONTHS}-{MAX_MONTHS} (a baseline, the planted changes and a "
            f"month after them), not {months}"
        )
    if isinstance(seed, bool) or not isinstance(seed, int) or seed < 0:
        raise DemoError(f"seed must be a whole number of 0 or more, not {seed!r}")
    end = end_month or default_end_month()
    try:
        parse_month(end)
    except ValueError as exc:
        raise DemoError(str(exc)) from None
    return end


def generate_scenario(
    output_dir: Path, *, months: int = 4, seed: int = 0, end_month: str | None = None
) -> ScenarioManifest:
    """Write the invented demo scenario under ``output_dir`` and return its manifest.

    Parameters
    ----------
    output_dir : Path
        An empty (or not yet existing) folder, or one holding an earlier demo, which is replaced.
    months : int
        Calendar months to generate, 3-24.
    seed : int
        Seed of every random draw (0 or more).
    end_month : str, optional
        Last generated month, ``YYYY-MM``; default the last complete month before today (pass
        it explicitly for output that does not depend on the day it is made).

    Returns
    -------
    ScenarioManifest
        Also written to ``output_dir/manifest.json``.

    Raises
    ------
    DemoError
        Bad ``months``, ``seed`` or ``end_month``, or an output folder holding other files.
    """
    end = _check_arguments(months, seed, end_month)
    output_dir = Path(output_dir)
    _prepare_output(output_dir)
    ctx = SimulationContext(seed=seed, calendar=Calendar.ending(end, months))
    cal, plan = ctx.calendar, PLANTED
    dates = RadiographyPlan(
        plan=plan,
        meter_date=cal.weekday_on_or_after(plan.dap_meter_month_index, plan.dap_meter_day),
        change_date=cal.first_day(plan.change_month_index),
        no_dose_date=cal.weekday_on_or_after(plan.no_dose_month_index, plan.no_dose_day),
        unmapped_date=cal.weekday_on_or_after(plan.unmapped_month_index, plan.unmapped_day),
    )
    gen = Generated(rooms={r.key: r for r in ROOMS})
    for room in ROOMS:
        if room.kind == "ct":
            gen.ct[room.key] = simulate_ct(room, ctx, plan)
        elif room.kind == "fluoroscopy":
            gen.fluoro[room.key] = simulate_fluoro(room, ctx, plan)
        elif room.kind == "mammography":
            gen.mammography[room.key] = simulate_mammography(room, ctx)
        elif room.kind == "interventional":
            gen.fluoro[room.key] = simulate_interventional(room, ctx)
        else:
            gen.radiography[room.key] = simulate_radiography(room, ctx, dates)
    writer = Writer(output_dir, gen)
    for room in ROOMS:
        if room.kind == "ct":
            writer.ct(room, UidFactory.device_uid(room.key))
        elif room.kind in ("fluoroscopy", "interventional"):
            writer.fluoro(room, UidFactory.device_uid(room.key))
        elif room.kind == "mammography":
            writer.mammography(room)
        else:
            writer.radiography(room)
    model_room = gen.rooms[plan.dap_meter_room]
    findings = expected_findings(gen, ctx, dates)
    findings += writer.broken(model_room, gen.radiography[model_room.key][0], ctx)
    medians = group_medians(gen, ctx)
    rooms = [_room_entry(r, ctx, gen, writer) for r in ROOMS]
    by_delivery: dict[str, int] = {}
    for entry in rooms:
        by_delivery[entry.delivery] = by_delivery.get(entry.delivery, 0) + entry.files
    manifest = ScenarioManifest(
        seed=seed,
        months=cal.labels(),
        start_date=cal.start.isoformat(),
        end_date=cal.end.isoformat(),
        institution=INSTITUTION,
        notice=INVENTED_NOTICE,
        rooms=rooms,
        counts={
            "studies": sum(r.studies for r in rooms),
            "files": sum(r.files for r in rooms),
            "events": sum(r.events for r in rooms),
            "files_by_delivery": by_delivery,
            "broken_files": 3,
        },
        planted_findings=findings,
        not_planted=quiet_numbers(gen, ctx, medians, dates),
        group_medians=medians,
        files={"readme": "README.md", "truth_events": "truth_events.csv"},
        review_parameters=design_parameters(),
        software_version=beamaudit.__version__,
    )
    writer.truth_table(output_dir / "truth_events.csv")
    manifest.write(output_dir / "manifest.json")
    (output_dir / "README.md").write_text(render_readme(manifest), encoding="utf-8")
    return manifest
