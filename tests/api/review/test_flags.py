"""Each flag kind on constructed tables where the answer is known by hand, and silent where it
should be."""

from __future__ import annotations

import json
import math

import numpy as np
import pandas as pd
import pytest

from beamaudit.api.review import flags as fl


def groups_frame(**overrides: list[object]) -> pd.DataFrame:
    base: dict[str, list[object]] = {
        "site": ["S1"],
        "room": ["R1"],
        "device": [None],
        "exam_type": ["chest_pa"],
        "quantity": ["dap_gy_cm2"],
        "basis": ["standard"],
        "n_used": [30],
        "median": [0.15],
        "ci_low": [0.12],
        "ci_high": [0.18],
        "ci_coverage": [0.957],
        "reference_level": [0.10],
        "ratio_to_level": [1.5],
        "level_set": ["Local"],
        "level_kind": ["local"],
        "level_version": ["2025"],
        "status": ["above_level"],
    }
    base.update(overrides)
    return pd.DataFrame(base)


# ------------------------------------------------------------------------------ group above level
def test_group_above_level_certain_is_an_action() -> None:
    (flag,) = fl.groups_above_level(groups_frame())
    assert (flag.kind, flag.severity) == ("group_above_level", "action")
    assert flag.reason == (
        "Median DAP 0.15 Gy·cm² of chest_pa in room R1, site S1 (30 standard-size patients) is "
        "1.5 × the local level 0.1 Gy·cm² (Local, version 2025); the 96% confidence interval of "
        "the median, 0.12 to 0.18 Gy·cm², lies above the level."
    )
    assert flag.numbers["ratio_to_level"] == 1.5
    assert flag.concerns() == {
        "site": "S1",
        "room": "R1",
        "exam_type": "chest_pa",
        "quantity": "dap_gy_cm2",
    }


def test_group_possibly_above_is_a_warning_that_says_it_is_uncertain() -> None:
    (flag,) = fl.groups_above_level(
        groups_frame(
            status=["possibly_above"], median=[0.105], ci_low=[0.095], ratio_to_level=[1.05]
        )
    )
    assert flag.severity == "warning"
    assert "includes the level, so the excess is not certain" in flag.reason


def test_no_group_flag_below_level_insufficient_or_without_level() -> None:
    frame = pd.concat([groups_frame()] * 3, ignore_index=True)
    frame["status"] = ["below_level", "insufficient_sample", "no_level"]
    assert fl.groups_above_level(frame) == []


def test_close_numbers_get_enough_digits_to_differ() -> None:
    (flag,) = fl.groups_above_level(
        groups_frame(median=[0.1006], ci_low=[0.1001], ci_high=[0.1011], ratio_to_level=[1.006])
    )
    assert "0.1001 to 0.1011" in flag.reason and "level 0.1 Gy·cm²" in flag.reason


# -------------------------------------------------------------------------- single examinations
def units_frame(values: list[float], level: float = 1.0, pct: float = 1.8) -> pd.DataFrame:
    n = len(values)
    return pd.DataFrame(
        {
            "unit_kind": ["event"] * n,
            "event_id": pd.array(range(1, n + 1), dtype="Int64"),
            "study_uid": [f"st{i}" for i in range(n)],
            "site": ["S1"] * n,
            "room": ["R1"] * n,
            "device": ["D1"] * n,
            "exam_type": ["chest_pa"] * n,
            "quantity": ["dap_gy_cm2"] * n,
            "value": values,
            "patient_weight_kg": [70.0] * (n - 1) + [math.nan],
            "level_value": [level] * n,
            "level_set": ["Local"] * n,
            "level_version": ["1"] * n,
            "percentile_value": [pct] * n,
            "percentile": [95.0] * n,
        }
    )


def test_exam_above_a_multiple_of_the_level() -> None:
    flags = fl.exams_above_investigation_level(
        units_frame([1.0, 1.9, 2.0, 2.5, 3.0]), multiple=2.0, above_percentile=False
    )
    # 2.0 is not above 2 x 1.0; 2.5 and 3.0 are
    assert [f.event_id for f in flags] == [4, 5]
    assert flags[0].reason == (
        "DAP 2.5 Gy·cm² of exposure 4 (chest_pa in room R1, device D1, site S1; patient weight "
        "70 kg) is 2.50 × the level 1 Gy·cm² (Local, version 1), above the investigation level "
        "of 2 ×."
    )
    assert "weight not recorded" in flags[1].reason


def test_exam_above_the_group_percentile() -> None:
    flags = fl.exams_above_investigation_level(
        units_frame([1.0, 1.9, 1.7]), multiple=None, above_percentile=True
    )
    assert [f.event_id for f in flags] == [2]
    assert "above the group's 95th percentile 1.8 Gy·cm²" in flags[0].reason


def test_no_exam_flag_without_a_level_or_with_rules_off() -> None:
    frame = units_frame([5.0, 6.0], level=math.nan, pct=math.nan)
    assert fl.exams_above_investigation_level(frame, multiple=2.0, above_percentile=True) == []
    frame = units_frame([5.0, 6.0])
    assert fl.exams_above_investigation_level(frame, multiple=None, above_percentile=False) == []


def test_study_units_are_named_by_study() -> None:
    frame = units_frame([3.0])
    frame["event_id"] = pd.array([pd.NA], dtype="Int64")
    (flag,) = fl.exams_above_investigation_level(frame, multiple=2.0, above_percentile=False)
    assert flag.event_id is None and flag.study_uid == "st0"
    assert "of study st0" in flag.reason


def test_per_group_limit_keeps_the_highest_and_counts_the_rest() -> None:
    values = [3.0, 9.0, 4.0, 8.0, 5.0]
    flags = fl.exams_above_investigation_level(
        units_frame(values), multiple=2.0, above_percentile=False, max_per_group=2
    )
    counted = [f for f in flags if f.event_id is None]
    listed = [f for f in flags if f.event_id is not None]
    assert sorted(f.event_id for f in listed) == [2, 4]  # 9.0 and 8.0
    (summary,) = counted
    assert summary.numbers == {"n_exceeding": 5, "n_listed": 2}
    assert summary.reason.startswith("5 examinations of chest_pa in room R1")


# ------------------------------------------------------------------------------------------ SRDL
def studies_frame(**columns: list[float]) -> pd.DataFrame:
    n = len(next(iter(columns.values())))
    frame = pd.DataFrame(
        {
            "study_uid": [f"st{i}" for i in range(n)],
            "site": ["S1"] * n,
            "room": ["Cath 1"] * n,
            "device": [None] * n,
            "exam_type": ["xa_pci"] * n,
        }
    )
    for c in fl.NCRP168_SRDL:
        frame[c] = columns.get(c, [math.nan] * n)
    return frame


def test_srdl_values_are_ncrp_168() -> None:
    # NCRP Report 168 (2010): K_a,r 5 Gy, P_KA 500 Gy·cm², fluoroscopy time 60 min (from memory,
    # PUBLISHED-VALUES h, high)
    assert fl.NCRP168_SRDL["reference_point_air_kerma_mgy"] == 5000.0
    assert fl.NCRP168_SRDL["dap_gy_cm2"] == 500.0
    assert fl.NCRP168_SRDL["fluoro_time_s"] == 3600.0


def test_srdl_exceeded_by_each_trigger_and_not_at_or_below() -> None:
    frame = studies_frame(
        reference_point_air_kerma_mgy=[5200.0, 5000.0, 100.0, math.nan],
        dap_gy_cm2=[100.0, 499.0, 510.0, math.nan],
        fluoro_time_s=[600.0, 3600.0, 3700.0, math.nan],
    )
    flags = fl.srdl_exceeded(frame, thresholds=fl.NCRP168_SRDL)
    assert [f.study_uid for f in flags] == ["st0", "st2"]
    assert flags[0].numbers == {
        "reference_point_air_kerma_mgy": 5200.0,
        "reference_point_air_kerma_mgy_srdl": 5000.0,
    }
    assert "K_a,r 5200 mGy > 5000 mGy" in flags[0].reason
    assert "DAP 510 Gy·cm² > 500 Gy·cm²" in flags[1].reason
    assert "fluoroscopy time 3700 s > 3600 s" in flags[1].reason
    assert all(f.severity == "action" for f in flags)


def test_srdl_on_nothing() -> None:
    assert fl.srdl_exceeded(studies_frame(dap_gy_cm2=[]), thresholds=fl.NCRP168_SRDL) == []


# ------------------------------------------------------------------------------------- DAP ratio
def ratios_frame(n: list[int], median: list[float], **more: list[object]) -> pd.DataFrame:
    """One month (2025-03) of rooms R1, R2... of site S1, with their ``n`` and ``median``."""
    rooms = len(n)
    return pd.DataFrame(
        {"site": ["S1"] * rooms, "room": [f"R{i + 1}" for i in range(rooms)],
         "device": [None] * rooms, "month": ["2025-03"] * rooms, "n": n, "median": median,
         **more}
    )  # fmt: skip


def test_dap_ratio_outside_tolerance() -> None:
    ratios = ratios_frame([40, 40, 40, 5], [1.30, 1.20, 0.70, 2.0])
    flags = fl.dap_ratio_out_of_tolerance(ratios, tolerance=0.25, min_events=20)
    assert [(f.room, f.numbers["median_ratio"]) for f in flags] == [("R1", 1.3), ("R3", 0.7)]
    assert flags[0].date == "2025-03"
    assert "reported DAP is higher than the beam model predicts" in flags[0].reason
    assert "lower" in flags[1].reason


# ------------------------------------------------------------------------------------- MGD ratio
def test_mgd_ratio_is_judged_against_the_rooms_usual_ratio_not_one() -> None:
    # invented rooms: R1's unit reads 1.10 x the Dance D_G as a rule and 1.45 x this month; R2's
    # reads 0.80 x as a rule (its own method: no finding); R3 too few views; R4 no baseline yet
    ratios = ratios_frame(
        [40, 40, 5, 40],
        [1.45, 0.80, 2.0, 3.0],
        baseline=[1.10, 0.80, 1.0, np.nan],
        baseline_months=[6, 6, 6, 2],
    )
    (flag,) = fl.mgd_ratio_off_baseline(ratios, tolerance=0.2, min_events=20)
    assert (flag.room, flag.quantity, flag.date) == ("R1", fl.MGD_RATIO_QUANTITY, "2025-03")
    assert flag.numbers == {
        "median_ratio": 1.45, "n": 40, "tolerance": 0.2, "baseline_ratio": 1.1,
        "baseline_months": 6,
    }  # fmt: skip
    assert "above the room's usual 1.10 (median of its 6 preceding months)" in flag.reason


def test_mgd_ratio_within_the_tolerance_of_its_baseline_is_quiet() -> None:
    ratios = pd.DataFrame(
        {"room": ["R1", "R1"], "month": ["2025-03", "2025-04"], "n": [40, 40],
         "median": [1.31, 0.89], "baseline": [1.10, 1.10], "baseline_months": [6, 6]}
    )  # fmt: skip
    # |1.31 / 1.10 - 1| = 0.19 and |0.89 / 1.10 - 1| = 0.19: inside 20 %
    assert fl.mgd_ratio_off_baseline(ratios, tolerance=0.2, min_events=20) == []
    below = fl.mgd_ratio_off_baseline(ratios, tolerance=0.15, min_events=20)
    assert [f.date for f in below] == ["2025-03", "2025-04"]
    assert "below the room's usual" in below[1].reason


# ---------------------------------------------------------------------------------- change-points
def monthly(values: list[float], quantity: str = "dap_gy_cm2") -> pd.DataFrame:
    months = [f"{2024 + (i // 12)}-{i % 12 + 1:02d}" for i in range(len(values))]
    return pd.DataFrame(
        {
            "site": "S1",
            "room": "R1",
            "device": None,
            "exam_type": None if quantity == fl.DAP_RATIO_QUANTITY else "chest_pa",
            "quantity": quantity,
            "month": months,
            "median": values,
        }
    )


KEYS = ["site", "room", "device", "exam_type", "quantity"]
BASE = [0.10, 0.102, 0.098, 0.10, 0.101, 0.099, 0.102, 0.10]


def test_changepoint_in_a_monthly_median_with_its_date() -> None:
    series = monthly([*BASE, 0.14, 0.142, 0.138])
    (flag,) = fl.changepoints(series, series_keys=KEYS, k=0.5, h=5.0, baseline_points=6)
    assert flag.date == "2024-09"
    assert flag.numbers["alarm_month"] == "2024-09"
    assert flag.numbers["before"] == pytest.approx(0.10)
    assert flag.numbers["after"] == pytest.approx(0.14)
    assert flag.reason.startswith(
        "The monthly median DAP of chest_pa in room R1, site S1 shifted up from about 0.1 Gy·cm² "
        "to about 0.14 Gy·cm² starting 2024-09"
    )


def test_changepoint_in_the_dap_ratio_and_none_without_a_change() -> None:
    ratio = monthly([1.0, 1.01, 0.99, 1.0, 1.02, 0.98, 1.0, 0.7, 0.71], fl.DAP_RATIO_QUANTITY)
    (flag,) = fl.changepoints(ratio, series_keys=KEYS, k=0.5, h=5.0, baseline_points=6)
    assert flag.exam_type is None and flag.date == "2024-08"
    assert "ratio of reported to reconstructed DAP" in flag.reason
    assert (
        fl.changepoints(monthly(BASE * 2), series_keys=KEYS, k=0.5, h=5.0, baseline_points=6) == []
    )


def test_changepoint_in_the_mgd_ratio_is_worded_as_the_agd_ratio() -> None:
    ratio = monthly([1.1, 1.11, 1.09, 1.1, 1.12, 1.08, 1.1, 1.5, 1.51], fl.MGD_RATIO_QUANTITY)
    ratio["exam_type"] = None
    (flag,) = fl.changepoints(ratio, series_keys=KEYS, k=0.5, h=5.0, baseline_points=6)
    assert (flag.quantity, flag.date) == (fl.MGD_RATIO_QUANTITY, "2024-08")
    assert "ratio of the device's AGD to the reconstructed D_G" in flag.reason


def test_changepoint_series_are_kept_apart() -> None:
    a = monthly([*BASE, 0.2, 0.2])
    b = monthly(BASE + BASE[:2])
    b["room"] = "R2"
    flags = fl.changepoints(
        pd.concat([b, a]).sample(frac=1.0, random_state=1),
        series_keys=KEYS,
        k=0.5,
        h=5.0,
        baseline_points=6,
    )
    assert [(f.room, f.date) for f in flags] == [("R1", "2024-09")]


# ------------------------------------------------------------------------------ deviation index
def events_frame(di: list[float]) -> pd.DataFrame:
    n = len(di)
    return pd.DataFrame(
        {
            "event_id": range(1, n + 1),
            "study_uid": [f"st{i}" for i in range(n)],
            "site": ["S1"] * n,
            "room": ["R1"] * n,
            "device": [None] * n,
            "exam_type": ["chest_pa"] * n,
            "deviation_index": di,
        }
    )


def test_deviation_index_out_of_range() -> None:
    flags = fl.deviation_index_out_of_range(
        events_frame([0.0, 2.9, 3.0, 3.5, -3.2, math.nan]), di_range=fl.TG116_DI_RANGE
    )
    assert [f.event_id for f in flags] == [4, 5]
    # DI = 10 log10(EI / EI_T) (IEC 62494-1): +3.5 is 10**0.35 = 2.24 x the target exposure
    assert flags[0].numbers["exposure_ratio_to_target"] == pytest.approx(10**0.35)
    assert "deviation index +3.5, outside -3 to +3" in flags[0].reason
    assert "overexposure" in flags[0].reason and "underexposure" in flags[1].reason


def test_deviation_index_limit_per_group() -> None:
    flags = fl.deviation_index_out_of_range(
        events_frame([4.0, 5.0, -6.0, 3.5]), di_range=(-3.0, 3.0), max_per_group=2
    )
    assert sorted(f.event_id for f in flags if f.event_id is not None) == [2, 3]
    assert [f.numbers["n_exceeding"] for f in flags if f.event_id is None] == [4]


# --------------------------------------------------------------- no dose, unknown, unmapped, misc
def test_no_dose_data() -> None:
    studies = pd.DataFrame(
        {
            "study_uid": ["a", "b"],
            "site": ["S1", "S1"],
            "room": ["R1", "R1"],
            "device": [None, None],
            "modality": ["DX", "CT"],
            "exam_type": [None, "ct_head"],
            "n_events": [2, 3],
            "has_dose": [False, True],
        }
    )
    (flag,) = fl.no_dose_data(studies)
    assert flag.study_uid == "a"
    assert "has 2 event(s) and no dose value at all" in flag.reason


def test_unknown_exam_types_and_unmapped() -> None:
    events = pd.DataFrame({"exam_type": ["chest_pa", "chest_xray", "chest_xray", None]})
    (flag,) = fl.unknown_exam_types(events, {"chest_pa"})
    assert flag.exam_type == "chest_xray" and flag.numbers == {"n_events": 2}
    summary = pd.DataFrame({"modality": ["DX", "CT"], "n_events": [5, 2]})
    (flag,) = fl.unmapped_events(summary)
    assert flag.numbers == {"n_events": 7, "n_combinations": 2}
    assert fl.unmapped_events(summary.iloc[:0]) == []


def test_flag_json_is_plain_and_sorting_is_stable() -> None:
    flag = fl.Flag("no_dose_data", "warning", "x", {"a": math.nan, "b": 1}, study_uid="s")
    data = flag.to_json_dict()
    assert data == {
        "kind": "no_dose_data",
        "severity": "warning",
        "reason": "x",
        "numbers": {"a": None, "b": 1},
        "concerns": {"study_uid": "s"},
    }
    json.dumps(data, allow_nan=False)
    other = fl.Flag("group_above_level", "action", "y", room="R1")
    assert fl.sort_flags([flag, other]) == [other, flag]
    assert fl.FLAG_KINDS[0] == "group_above_level"
    assert np.all([k in fl.FLAG_KINDS for k in ("changepoint", "srdl_exceeded")])


# ---------------------------------------------------------------- names a person reads (issue #23)
#: exam type code -> the catalogue's name, as api/data/exam_types.csv has them
NAMES = {"chest_pa": "Chest PA", "xa_pci": "Percutaneous coronary intervention"}


def test_reasons_name_the_exam_by_its_catalogue_name_and_keep_the_code_in_concerns() -> None:
    (group,) = fl.groups_above_level(groups_frame(), exam_names=NAMES)
    assert group.reason.startswith("Median DAP 0.15 Gy·cm² of Chest PA in room R1, site S1 (")
    assert group.exam_type == "chest_pa" and group.concerns()["exam_type"] == "chest_pa"
    (exam,) = fl.exams_above_investigation_level(
        units_frame([3.0]), multiple=2.0, above_percentile=False, exam_names=NAMES
    )
    assert "of exposure 1 (Chest PA in room R1, device D1, site S1;" in exam.reason
    (srdl,) = fl.srdl_exceeded(
        studies_frame(dap_gy_cm2=[510.0]), thresholds=fl.NCRP168_SRDL, exam_names=NAMES
    )
    assert srdl.reason.startswith("Study st0 (Percutaneous coronary intervention in room Cath 1,")
    (di,) = fl.deviation_index_out_of_range(
        events_frame([4.0]), di_range=(-3.0, 3.0), exam_names=NAMES
    )
    assert "(Chest PA in room R1, site S1)" in di.reason
    for flag in (group, exam, srdl, di):
        assert "chest_pa" not in flag.reason and "xa_pci" not in flag.reason
        assert flag.to_json_dict()["concerns"]["exam_type"] in NAMES


def test_a_code_the_names_lack_is_shown_as_it_is() -> None:
    (group,) = fl.groups_above_level(groups_frame(exam_type=["local_exam"]), exam_names=NAMES)
    assert " of local_exam in room R1" in group.reason


def test_indication_and_patient_group_in_words() -> None:
    frame = groups_frame(
        clinical_indication=["acute_stroke"],
        patient_group=["age_1_6y"],
        patient_group_label=["children 1-<6 years"],
    )
    (group,) = fl.groups_above_level(frame, exam_names=NAMES)
    assert " of Chest PA (acute stroke; children 1-<6 years) in room R1" in group.reason
    assert group.concerns()["clinical_indication"] == "acute_stroke"
    assert group.concerns()["patient_group"] == "age_1_6y"


def test_unmapped_examinations_say_so_in_words() -> None:
    (di,) = fl.deviation_index_out_of_range(
        events_frame([4.0]).assign(exam_type=[None]), di_range=(-3.0, 3.0), exam_names=NAMES
    )
    assert "(exam type not mapped in room R1, site S1)" in di.reason
    assert "unmapped" not in di.reason
    over = fl.deviation_index_out_of_range(
        events_frame([4.0, 5.0]).assign(exam_type=[None, None]),
        di_range=(-3.0, 3.0),
        max_per_group=1,
    )
    (summary,) = [f for f in over if f.event_id is None]
    assert summary.reason.startswith("2 examinations without an exam type in room R1, site S1 ")
