"""The invented interventional room (ANGIO 1): a C-arm whose dose reports carry the beam and
table geometry of every event (PS3.16 TID 10003C), so that beamaudit can map the skin dose.

Its procedures are few: one ordinary aorto-iliac angiography a month, and two planted ones that
make the difference between the reference-point air kerma and the skin dose plain:

- ``skin_dose_overlapping`` (second month): two long runs from nearly the same direction
  (5 degrees LAO and RAO), 2.2 Gy of K_a,r each. K_a,r 4.4 Gy stays below NCRP 168's 5 Gy, but
  the fields overlap on one patch of the back and the peak skin dose passes 3 Gy.
- ``skin_dose_spread`` (third month): eight runs of 0.7 Gy from eight directions around the
  patient. K_a,r 5.6 Gy passes NCRP 168's 5 Gy, but no skin gets near 3 Gy.

Geometry (invented, of the usual size for a C-arm): focus 750 mm from the isocentre, receptor at
1100 mm, the IEC 60601-2-43 reference point 150 mm from the isocentre toward the focus, fields
of 160 mm square at the receptor, the patient lying supine and head first, centred on the
isocentre, the table not moved during a procedure. The reported DAP and K_a,r follow from the
room's tube output like those of the fluoroscopy room (:mod:`beamaudit.api.demo.ct_fluoro`).
"""

from __future__ import annotations

from datetime import timedelta

from beamaudit.api.demo.context import SimulationContext, at
from beamaudit.api.demo.physics import TubeOutput, exposure_dap_gy_cm2
from beamaudit.api.demo.records import CArmGeometry, FluoroEvent, FluoroStudy
from beamaudit.api.demo.scenario import RoomSpec

__all__ = ["INTERVENTIONAL_PLANTS", "simulate_interventional"]

_SOD_MM = 750.0
_SID_MM = 1100.0
_RP_MM = _SOD_MM - 150.0  # IEC 60601-2-43 reference point
_TABLE_MM = _SOD_MM - 100.0  # tabletop under a 20 cm deep patient centred on the isocentre
_FIELD_MM = (160.0, 160.0)
_KV = 85.0
_MA = 400.0
_PULSE_MS = 8.0
_PULSE_RATE = 15.0
EXAM_TYPE = "xa_lower_limb_angiography"
_DESCRIPTION = "Aorto-iliac angiography, lower limb run-off"
_PROTOCOL = "Lower limb run-off"
_ABDOMEN = ("818981001", "SCT", "Abdomen")

#: plant id -> (month index, day, [(primary angle, K_a,r mGy), ...])
INTERVENTIONAL_PLANTS: dict[str, tuple[int, int, list[tuple[float, float]]]] = {
    "skin_dose_overlapping": (1, 12, [(-5.0, 2200.0), (5.0, 2200.0)]),
    "skin_dose_spread": (2, 14, [(a, 700.0) for a in (-135, -90, -45, 0, 45, 90, 135, 180)]),
}
_ORDINARY = [(0.0, 250.0), (-25.0, 150.0), (30.0, 120.0)]


def _study(
    room: RoomSpec,
    ctx: SimulationContext,
    tube: TubeOutput,
    month_index: int,
    day_of_month: int,
    seq: int,
    runs: list[tuple[float, float]],
) -> FluoroStudy:
    day = ctx.calendar.weekday_on_or_after(month_index, day_of_month)
    patient = ctx.patients.patient(day, age_mean_y=room.age_mean_y, age_sd_y=room.age_sd_y)
    accession = f"HB{day:%Y%m%d}7{seq:02d}"
    study_uid = ctx.uids.uid("study", room.key, accession)
    start = at(day, 9.0 + seq)
    output = float(tube.output_ugy_per_mas_1m(_KV))
    clock = start + timedelta(minutes=5)
    events = []
    for index, (angle, rp_mgy) in enumerate(runs):
        mas = rp_mgy * 1000.0 / (output * (1000.0 / _RP_MM) ** 2)
        time_ms = mas / _MA * 1000.0
        pulses = max(1, round(time_ms / _PULSE_MS))
        duration_s = pulses / _PULSE_RATE
        dap = float(
            exposure_dap_gy_cm2(
                output_ugy_per_mas_1m=output,
                exposure_mas=mas,
                sid_mm=_SID_MM,
                field_area_cm2=_FIELD_MM[0] * _FIELD_MM[1] / 100.0,
            )
        )
        events.append(
            FluoroEvent(
                event_uid=ctx.uids.uid("event", study_uid, index),
                started=clock,
                fluoroscopy=True,
                kvp_kv=_KV,
                tube_current_ma=_MA,
                exposure_mas=mas,
                exposure_time_ms=time_ms,
                duration_s=round(duration_s, 2),
                pulse_rate_per_s=_PULSE_RATE,
                number_of_pulses=pulses,
                pulse_width_ms=_PULSE_MS,
                filters=room.added_filters,
                field_width_mm=_FIELD_MM[0],
                field_height_mm=_FIELD_MM[1],
                sid_mm=_SID_MM,
                source_to_table_mm=_TABLE_MM,
                source_to_rp_mm=_RP_MM,
                output_ugy_per_mas_1m=output,
                dap_true_gy_cm2=dap,
                dap_reported_gy_cm2=dap * room.dap_meter_factor,
                dose_rp_reported_mgy=rp_mgy * room.dap_meter_factor,
                geometry=CArmGeometry(
                    primary_angle_deg=angle,
                    secondary_angle_deg=0.0,
                    source_to_isocenter_mm=_SOD_MM,
                    table_longitudinal_mm=0.0,
                    table_lateral_mm=0.0,
                    table_height_mm=0.0,
                ),
            )
        )
        clock += timedelta(seconds=duration_s + 60.0)
    return FluoroStudy(
        room=room.key,
        study_uid=study_uid,
        accession=accession,
        patient=patient,
        start=start,
        end=clock + timedelta(minutes=5),
        exam_type=EXAM_TYPE,
        study_description=_DESCRIPTION,
        protocol_name=_PROTOCOL,
        target_region=_ABDOMEN,
        weight_recorded=True,
        report_sop_uid=ctx.uids.uid("report", study_uid),
        report_series_uid=ctx.uids.uid("report-series", study_uid),
        events=events,
    )


def simulate_interventional(room: RoomSpec, ctx: SimulationContext) -> list[FluoroStudy]:
    """The interventional room's procedures: one ordinary a month and the two planted ones."""
    tube = TubeOutput(
        filters=(("Al", room.inherent_al_mm), *room.added_filters),
        anode_angle_deg=room.anode_angle_deg,
    )
    studies = [
        _study(room, ctx, tube, month, 5, 0, _ORDINARY)
        for month in range(len(ctx.calendar.labels()))
    ]
    for seq, (key, (month, day, runs)) in enumerate(INTERVENTIONAL_PLANTS.items(), start=1):
        study = _study(room, ctx, tube, month, day, seq, runs)
        study.planted.append(key)
        studies.append(study)
    studies.sort(key=lambda s: s.start)
    return studies
