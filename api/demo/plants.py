"""The findings the demo plants in its invented scenario, for the reviews to surface.

Every date is relative to the generated months (month indices count from 0, negative ones from
the end; days move to the next weekday), so that any ``--months`` and ``--end-month`` work. The
generated ``README.md`` and ``manifest.json`` list each finding with the numbers measured on the
files actually written (:mod:`beamaudit.api.demo.expected`). Everything here is invented.

Planted, by review flag kind:

* ``dap_ratio``: RAD 1 (the calibrated room) reports 1.35 times the DAP it delivers from the 15th
  of the second month (a DAP chamber exchanged without its calibration factor);
* ``low_dose_review``: before that change, RAD 2's abdomen AP runs at about a third of the
  invented local level (DAP and ESAK), far below half of it: an image-quality review is due;
* ``change_point``: RAD 2's abdomen AP doubles its tube charge, DAP and ESAK from the first day
  of the second-to-last month (AEC dose level and target EI raised together, so the deviation
  index does not show it); its median stays below the level, so no ``group_above_level``;
* ``exam_above_investigation_level``: five single exams at 6.5-9 times their level (two
  radiographs, two CT examinations by DLP, one barium enema);
* ``group_above_level`` of a paediatric band: RAD 2's chest PA of children of 15-<30 kg, run on
  the adult program, above the invented local level of that band;
* ``no_dose_data``: six mobile examinations without kV, mAs, DAP or geometry;
* ``unmapped_protocol``: CR 1's knee series under a new menu name with no body part;
* ingest errors for three broken files (written by :mod:`beamaudit.api.demo.writer`).
"""

from __future__ import annotations

from dataclasses import dataclass

__all__ = ["PLANTED", "OutlierPlan", "PlantedPlan"]


@dataclass(frozen=True, slots=True)
class OutlierPlan:
    """One exam planted far above its reference level.

    ``month_index`` counts the generated months from 0 (negative: from the end); ``day`` is the
    day of that month (moved to the next weekday). ``target_ratio`` is the planted ratio of the
    flagged quantity to its reference level (the local level where the shipped local set has one,
    else the national one).
    """

    key: str
    room: str
    exam_type: str
    quantity: str
    month_index: int
    day: int
    target_ratio: float
    story: str


@dataclass(frozen=True, slots=True)
class PlantedPlan:
    """Every finding the demo plants (see the README the generator writes).

    Month indices count the generated months from 0 (negative: from the end); days are moved to
    the next weekday. ``change_month_index`` -2: the last two months run at the changed dose.
    """

    dap_meter_room: str = "rad1"
    dap_meter_factor: float = 1.35
    dap_meter_month_index: int = 1
    dap_meter_day: int = 15
    change_room: str = "rad2"
    change_program: str = "abdomen_ap"
    change_factor: float = 2.0
    change_month_index: int = -2
    #: the same room and program run far below the level before the change (``low_dose_review``)
    low_dose_quantities: tuple[str, ...] = ("dap_gy_cm2", "esak_mgy")
    no_dose_room: str = "mobile1"
    no_dose_exams: int = 6
    no_dose_month_index: int = -2
    no_dose_day: int = 9
    unmapped_room: str = "cr1"
    unmapped_programs: tuple[str, ...] = ("knee_ap", "knee_lat")  # program keys = exam types
    unmapped_protocol_name: str = "USER PROGRAM 14"
    unmapped_month_index: int = 1
    unmapped_day: int = 5
    #: one invented patient scanned again and again (three-phase abdomen-pelvis CT about every
    #: twelve days): a cumulative effective dose above 100 mSv within the demo's months, for the
    #: recurrent-exposure list. Each study stays well within its levels (DLP ~1.3 x the strictest)
    recurrent_room: str = "ct1"
    recurrent_exams: int = 10
    recurrent_phases: int = 3
    recurrent_ctdivol_mgy: float = 5.9
    recurrent_length_mm: float = 400.0
    #: children of one ICRP 135 / EC RP 185 weight band sent to RAD 2 for a chest PA, exposed on
    #: the adult program (adult field and AEC dose level): the band's monthly group runs above the
    #: invented local paediatric level. Drawn from streams of their own, after the room's adults
    paediatric_room: str = "rad2"
    paediatric_procedure: str = "chest"
    paediatric_exam_type: str = "chest_pa"
    paediatric_group: str = "weight_15_30kg"
    paediatric_weight_kg: tuple[float, float] = (17.0, 28.0)
    paediatric_age_y: tuple[float, float] = (4.0, 10.0)
    paediatric_per_weekday: float = 1.6
    outliers: tuple[OutlierPlan, ...] = (
        OutlierPlan(
            key="outlier_rad2_lspine_lat",
            room="rad2",
            exam_type="lumbar_spine_lat",
            quantity="dap_gy_cm2",
            month_index=0,
            day=12,
            target_ratio=8.0,
            story="a manual bariatric program selected for an average patient (AEC off, many "
            "times the charge); the image was burnt out and the deviation index very high",
        ),
        OutlierPlan(
            key="outlier_rad1_pelvis",
            room="rad1",
            exam_type="pelvis_ap",
            quantity="dap_gy_cm2",
            month_index=0,
            day=20,
            target_ratio=9.0,
            story="the AEC chamber under a hip prosthesis: the exposure ran to the back-up time",
        ),
        OutlierPlan(
            key="outlier_ct_abdomen_pelvis",
            room="ct1",
            exam_type="ct_abdomen_pelvis",
            quantity="dlp_mgy_cm",
            month_index=1,
            day=9,
            target_ratio=7.0,
            story="a five-phase liver protocol run on a routine abdomen-pelvis request",
        ),
        OutlierPlan(
            key="outlier_ct_chest",
            room="ct1",
            exam_type="ct_chest",
            quantity="dlp_mgy_cm",
            month_index=2,
            day=17,
            target_ratio=6.5,
            story="tube-current modulation off and the chest scanned three times (breathing "
            "motion)",
        ),
        OutlierPlan(
            key="outlier_fluoro_enema",
            room="fluoro1",
            exam_type="fluoro_barium_enema",
            quantity="dap_gy_cm2",
            month_index=-1,
            day=6,
            target_ratio=8.5,
            story="a difficult enema: 27 minutes of screening and 30 spot images on a large "
            "patient",
        ),
    )


PLANTED = PlantedPlan()
