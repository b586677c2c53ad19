"""The review's ICRP 135 level-setting figures end to end: paediatric groups, clinical indications,
sample-size and standard-patient checks on each group, typical values and proposed local DRLs over
a site's rooms (worked by hand), and the low-dose review."""

from __future__ import annotations

import json
import math
from datetime import date
from typing import Any

import pandas as pd
import pytest

from beamaudit.api.review import ReviewParameters, load_default_rules, review
from beamaudit.api.review.bands import OUTSIDE_BANDS, WEIGHT_NOT_RECORDED
from beamaudit.api.review.levels import LevelEntry, ReferenceLevelSet
from beamaudit.api.review.stats import quantile_ci

MARCH = ReviewParameters.for_month(2025, 3)


def level_set(*entries: LevelEntry, kind: str = "local") -> list[ReferenceLevelSet]:
    """An invented set for the tests (not a published level)."""
    return [ReferenceLevelSet("Test set (INVENTED)", kind, "1", date(2025, 1, 1), "tests", entries)]  # type: ignore[arg-type]


def dap(value: float, **extra: Any) -> dict[str, Any]:
    return {"exam_type": "chest_pa", "dap_gy_cm2": value, **extra}


def rows_of(group: pd.DataFrame, **keys: Any) -> pd.DataFrame:
    for k, v in keys.items():
        group = group[group[k].isna()] if v is None else group[group[k] == v]
    return group.reset_index(drop=True)


# --------------------------------------------------------------------------- paediatric groups
def test_children_are_grouped_by_weight_band_and_never_guessed(make_events) -> None:
    rows = (
        [dap(0.02, patient_age_years=4.0, patient_weight_kg=17.0)] * 20  # 15-<30 kg
        + [dap(0.01, patient_age_years=0.5, patient_weight_kg=7.0)] * 3  # 5-<15 kg
        + [dap(0.03, patient_age_years=8.0)] * 4  # a child without weight
        + [dap(0.5, patient_age_years=16.0, patient_weight_kg=95.0)] * 2  # above the top band
        + [dap(0.09, patient_age_years=40.0, patient_weight_kg=70.0)] * 20  # adults
        + [dap(0.09, patient_weight_kg=70.0)] * 5  # age not recorded: the main group
    )
    levels = level_set(
        LevelEntry("chest_pa", "dap_gy_cm2", 0.1, "Gy.cm2"),
        LevelEntry("chest_pa", "dap_gy_cm2", 0.015, "Gy.cm2", patient_group="weight_15_30kg"),
    )
    groups = review(make_events(rows), levels=levels, params=MARCH).groups_df
    groups = groups[groups["quantity"] == "dap_gy_cm2"]
    band = rows_of(groups, patient_group="weight_15_30kg").iloc[0]
    assert (band["n_used"], band["basis"], band["reference_level"]) == (20, "band", 0.015)
    assert band["status"] == "above_level" and band["patient_group_label"] == "children 15-<30 kg"
    assert band["mean_weight_check"] == "not_applicable"
    small = rows_of(groups, patient_group="weight_5_15kg").iloc[0]
    assert (small["n"], small["status"]) == (3, "no_level")  # no level for that band
    unknown = rows_of(groups, patient_group=WEIGHT_NOT_RECORDED).iloc[0]
    assert (unknown["n"], unknown["n_no_weight"], unknown["status"]) == (4, 4, "no_level")
    outside = rows_of(groups, patient_group=OUTSIDE_BANDS).iloc[0]
    assert outside["n"] == 2
    adults = rows_of(groups, patient_group=None).iloc[0]
    assert (adults["n"], adults["n_no_age"], adults["reference_level"]) == (25, 5, 0.1)
    assert adults["median"] == pytest.approx(0.09)  # no child in the adults' median
    assert groups["n"].sum() == len(rows)  # every patient counted exactly once


def test_head_exams_are_banded_by_age(make_events) -> None:
    rows = [
        {"exam_type": "ct_head", "modality": "CT", "dlp_mgy_cm": d, "patient_age_years": a}
        for d, a in [(300.0, 0.2), (350.0, 0.25), (400.0, 3.0), (600.0, 7.0)]
    ]
    groups = review(make_events(rows), levels=[], params=MARCH).groups_df
    dlp = groups[groups["quantity"] == "dlp_mgy_cm"]
    # bands in their natural (file) order
    assert dlp["patient_group"].tolist() == ["age_0_3m", "age_3m_1y", "age_1_6y", "age_6y_up"]


# ------------------------------------------------------------------------- clinical indications
def test_a_level_for_an_indication_applies_to_its_groups_only(make_events) -> None:
    head = {"exam_type": "ct_head", "modality": "CT", "patient_weight_kg": 70.0}
    rows = [{**head, "dlp_mgy_cm": 700.0, "clinical_indication": "acute_stroke"}] * 20
    rows += [{**head, "dlp_mgy_cm": 850.0}] * 20
    levels = level_set(
        LevelEntry("ct_head", "dlp_mgy_cm", 900.0, "mGy.cm"),
        LevelEntry("ct_head", "dlp_mgy_cm", 600.0, "mGy.cm", clinical_indication="acute_stroke"),
    )
    result = review(make_events(rows), levels=levels, params=MARCH)
    dlp = result.groups_df[result.groups_df["quantity"] == "dlp_mgy_cm"]
    stroke = rows_of(dlp, clinical_indication="acute_stroke").iloc[0]
    plain = rows_of(dlp, clinical_indication=None).iloc[0]
    assert (stroke["reference_level"], stroke["level_clinical_indication"]) == (
        600.0,
        "acute_stroke",
    )
    assert (plain["reference_level"], plain["level_clinical_indication"]) == (900.0, None)
    (flag,) = [f for f in result.flags if f.kind == "group_above_level"]
    assert flag.clinical_indication == "acute_stroke"
    assert flag.concerns()["clinical_indication"] == "acute_stroke"
    assert "CT head (acute stroke)" in flag.reason  # the catalogue's name, the indication in words


def test_rules_set_the_indication_of_unmapped_events(make_events) -> None:
    rows = [{"modality": "CT", "study_description": "CT HEAD STROKE", "dlp_mgy_cm": 700.0}] * 3
    rows += [{"modality": "CT", "study_description": "CT HEAD", "dlp_mgy_cm": 800.0}] * 2
    result = review(make_events(rows), levels=[], params=MARCH, rules=load_default_rules())
    dlp = result.groups_df[result.groups_df["quantity"] == "dlp_mgy_cm"]
    assert set(dlp["clinical_indication"].tolist()) == {"acute_stroke", None}
    assert rows_of(dlp, clinical_indication="acute_stroke").loc[0, "n"] == 3


# -------------------------------------------------------------- sample and standard-patient rules
@pytest.mark.parametrize(
    ("n", "check"), [(19, "below_minimum"), (25, "below_preferred"), (30, "ok")]
)
def test_icrp_135_sample_rule_on_each_group(make_events, n: int, check: str) -> None:
    # ICRP 135: at least 20, preferably 30 patients per room (radiography; from memory, medium)
    groups = review(make_events([dap(0.05, patient_weight_kg=70.0)] * n), levels=[], params=MARCH)
    row = rows_of(groups.groups_df, quantity="dap_gy_cm2").iloc[0]
    assert (row["n_minimum"], row["n_preferred"], row["sample_check"]) == (20, 30, check)


@pytest.mark.parametrize(
    ("weights", "check"),
    [
        ([60.0] * 20, "ok"),  # 70 - 10 kg: the edge of ICRP 135's 70 ± 10 kg
        ([80.0] * 20, "ok"),
        ([85.0] * 20, "outside_tolerance"),
        ([math.nan] * 20, "not_recorded"),
    ],
)
def test_mean_weight_of_the_sample_near_the_standard_patient(make_events, weights, check) -> None:
    rows = [dap(0.05, patient_weight_kg=w) for w in weights]
    params = ReviewParameters.for_month(2025, 3, basis="all")
    groups = review(make_events(rows), levels=[], params=params).groups_df
    assert rows_of(groups, quantity="dap_gy_cm2").loc[0, "mean_weight_check"] == check


# --------------------------------------------------------------- typical values, proposed LDRLs
ROOM_MEDIANS = [0.06, 0.07, 0.08, 0.09, 0.10, 0.11, 0.12, 0.13, 0.14, 0.15]


def rooms_events(make_events, medians: list[float], n: int = 20) -> pd.DataFrame:
    rows = [
        dap(m, room=f"X{i:02d}", patient_weight_kg=70.0)
        for i, m in enumerate(medians)
        for _ in range(n)
    ]
    return make_events(rows)


def test_typical_value_and_proposed_local_drl_worked_by_hand(make_events) -> None:
    # ICRP 135 (PUBLISHED-VALUES e, high): typical value = median of the room medians; local DRL =
    # 75th percentile of the room medians. Ten rooms of 20 patients, each room's values all equal
    # to its median 0.06, 0.07, ..., 0.15 Gy·cm². By hand: median = (0.10 + 0.11) / 2 = 0.105;
    # 75th percentile (Hyndman & Fan 7): h = 9 x 0.75 = 6.75, x_(7) + 0.75 (x_(8) - x_(7))
    # = 0.12 + 0.75 x 0.01 = 0.1275. 95 % order-statistic intervals: median, Binomial(10, 1/2):
    # P(B <= 1) = 0.0107 <= 0.025 < P(B <= 2) = 0.0547, ranks 2 and 9: [0.07, 0.14];
    # 75th percentile, Binomial(10, 3/4): lower rank 5 (P(B <= 4) = 0.0197), no upper rank
    # (0.75^10 = 0.056 > 0.025): [0.10, not bounded).
    result = review(rooms_events(make_events, ROOM_MEDIANS), levels=[], params=MARCH)
    (row,) = rows_of(result.site_values_df, quantity="dap_gy_cm2").to_dict("records")
    assert (row["n_rooms"], row["n_patients"], row["proposal_status"]) == (10, 200, "proposed")
    assert row["typical_value"] == pytest.approx(0.105)
    assert (row["typical_ci_low"], row["typical_ci_high"]) == (0.07, 0.14)
    assert row["typical_ci_coverage"] == pytest.approx(1 - 2 * 11 / 1024)
    assert row["proposed_local_drl"] == pytest.approx(0.1275)
    assert row["proposed_ci_low"] == 0.10 and math.isnan(row["proposed_ci_high"])
    assert row["room_median_p25"] == pytest.approx(0.06 + 2.25 * 0.01)  # h = 2.25


def test_too_few_rooms_give_a_typical_value_only(make_events) -> None:
    # nine rooms: below the default ten (ICRP 135: 10-20 rooms for a local DRL)
    medians = ROOM_MEDIANS[:9]
    rows = [dap(m, room=f"X{i:02d}", patient_weight_kg=70.0) for i, m in enumerate(medians)
            for _ in range(20)]  # fmt: skip
    events = make_events(rows + [dap(0.5, room="Y", patient_weight_kg=70.0)] * 5)
    result = review(events, levels=[], params=MARCH)
    (row,) = rows_of(result.site_values_df, quantity="dap_gy_cm2").to_dict("records")
    assert row["proposal_status"] == "too_few_rooms" and math.isnan(row["proposed_local_drl"])
    assert row["typical_value"] == pytest.approx(0.10)
    assert row["n_rooms"] == 9 and row["n_rooms_too_few_patients"] == 1  # 5 patients: left out
    assert row["typical_value"] == quantile_ci(medians, 0.5).value
    params = ReviewParameters.for_month(2025, 3, min_rooms_for_local_level=9)
    again = review(events, levels=[], params=params).site_values_df
    assert rows_of(again, quantity="dap_gy_cm2").loc[0, "proposal_status"] == "proposed"


def test_current_levels_stand_beside_the_proposal(make_events) -> None:
    levels = level_set(LevelEntry("chest_pa", "dap_gy_cm2", 0.15, "Gy.cm2"))
    result = review(rooms_events(make_events, ROOM_MEDIANS), levels=levels, params=MARCH)
    row = rows_of(result.site_values_df, quantity="dap_gy_cm2").iloc[0]
    assert (row["local_level"], row["local_level_set"]) == (0.15, "Test set (INVENTED)")
    assert row["proposed_to_local_ratio"] == pytest.approx(0.1275 / 0.15)
    assert math.isnan(row["national_level"])
    json.dumps(result.to_json_dict(), allow_nan=False)


# --------------------------------------------------------------------------------- low-dose review
def test_low_dose_groups_are_flagged_for_image_quality_review(make_events) -> None:
    levels = level_set(LevelEntry("chest_pa", "dap_gy_cm2", 0.3, "Gy.cm2"))
    result = review(rooms_events(make_events, ROOM_MEDIANS), levels=levels, params=MARCH)
    low = [f for f in result.flags if f.kind == "low_dose_review"]
    # below 0.5 x 0.3 = 0.15: every room but the one at 0.15; below the site's P25 0.0825 too:
    # the rooms at 0.06, 0.07 and 0.08
    assert len(low) == 9 and all(f.severity == "info" for f in low)
    both = [f for f in low if "25th percentile" in f.reason]
    assert sorted(f.room for f in both) == ["X00", "X01", "X02"]  # type: ignore[type-var]
    text = " ".join(f.reason for f in low).lower()
    assert "image quality" in text and "not a fault in itself" in text
    for word in ("increase", "raise", "higher dose"):
        assert word not in text  # optimisation both ways: no nudge to raise the dose


def test_low_dose_rules_are_parameters(make_events) -> None:
    levels = level_set(LevelEntry("chest_pa", "dap_gy_cm2", 0.3, "Gy.cm2"))
    params = ReviewParameters.for_month(
        2025, 3, low_dose_fraction=None, low_dose_below_site_p25=False
    )
    result = review(rooms_events(make_events, ROOM_MEDIANS), levels=levels, params=params)
    assert not [f for f in result.flags if f.kind == "low_dose_review"]


def test_no_low_dose_verdict_below_the_minimum_sample(make_events) -> None:
    levels = level_set(LevelEntry("chest_pa", "dap_gy_cm2", 0.3, "Gy.cm2"))
    result = review(rooms_events(make_events, [0.01], n=10), levels=levels, params=MARCH)
    assert not [f for f in result.flags if f.kind == "low_dose_review"]


def test_new_parameters_round_trip_and_are_checked() -> None:
    params = ReviewParameters.for_month(
        2025, 3, paediatric_age_limit_years=16, low_dose_fraction=0.4
    )
    again = ReviewParameters.from_json_dict(json.loads(json.dumps(params.to_json_dict())))
    assert again == params
    bad_values: list[dict[str, Any]] = [
        {"low_dose_fraction": 1.5},
        {"min_rooms_for_local_level": 1},
        {"preferred_samples": {"dental": 3}},
        {"paediatric_age_limit_years": 0},
    ]
    for bad in bad_values:
        with pytest.raises(ValueError, match="bad review parameters"):
            ReviewParameters.for_month(2025, 3, **bad)


def test_the_strictest_level_decides_the_low_dose_rule(make_events) -> None:
    # far below an old high national level (0.3) but near the local one (0.07): not flagged
    levels = level_set(LevelEntry("chest_pa", "dap_gy_cm2", 0.3, "Gy.cm2"), kind="national")
    levels += [
        ReferenceLevelSet(
            "Local (INVENTED)", "local", "1", date(2025, 1, 1), "tests",
            (LevelEntry("chest_pa", "dap_gy_cm2", 0.07, "Gy.cm2"),),
        )
    ]  # fmt: skip
    result = review(rooms_events(make_events, [0.06]), levels=levels, params=MARCH)
    assert not [f for f in result.flags if f.kind == "low_dose_review"]
