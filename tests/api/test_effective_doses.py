"""Effective dose per stored event, and the recurrent-exposure list on the store.

The k factors are AAPM Report 96 (2008) Table 4 values (from memory, as the shipped table says);
the cumulative sum is worked by hand on an invented patient history.
"""

from __future__ import annotations

import math
from datetime import UTC, date, datetime
from typing import Any

import pandas as pd
import pytest
from stored_rows import add_event

from beamaudit.api.intake.effective_doses import effective_dose_values
from beamaudit.api.runs.recurrent import recurrent_exposure
from beamaudit.api.store import models as m


def _ct(**values: Any) -> dict[str, Any]:
    return {"exam_type": "ct_head", "modality": "CT", "dlp_mgy_cm": 800.0,
            "patient_age_years": 45.0, **values}  # fmt: skip


def test_ct_head_of_an_adult_is_k_times_dlp() -> None:
    # AAPM Report 96 Table 4, head, adult: k = 0.0021 mSv/(mGy.cm) (from memory): 800 -> 1.68 mSv
    (value,) = effective_dose_values([_ct()])
    assert value["effective_dose_msv"] == pytest.approx(1.68)
    assert "AAPM Report 96" in value["effective_dose_source"]
    assert "phantom not recorded" in value["effective_dose_source"]
    assert value["effective_dose_reason"] is None


def test_the_region_comes_from_the_exam_type_and_k_from_the_age() -> None:
    # AAPM Report 96 Table 4, chest, 5 years: k = 0.018 (from memory); CTPA is a chest CT
    (value,) = effective_dose_values(
        [
            _ct(
                exam_type="ct_pulmonary_angiogram",
                dlp_mgy_cm=100.0,
                patient_age_years=4.0,
                ct_phantom_diameter_cm=16.0,
            )
        ]
    )
    assert value["effective_dose_msv"] == pytest.approx(1.8)
    assert "phantom not recorded" not in value["effective_dose_source"]


@pytest.mark.parametrize(
    ("row", "reason"),
    [
        (_ct(patient_age_years=None), "age not recorded"),
        (_ct(dlp_mgy_cm=None), "DLP not recorded"),
        (_ct(ct_phantom_diameter_cm=32.0), "the DLP refers to the 32 cm phantom"),
        (_ct(exam_type=None), "no exam type"),
        (_ct(exam_type="ct_local_thing"), "no CT region for exam type 'ct_local_thing'"),
        ({"exam_type": "chest_pa", "modality": "DX", "dap_gy_cm2": 0.1},
         "no sourced effective-dose coefficient for exam type 'chest_pa'"),
    ],
)  # fmt: skip
def test_no_estimate_without_a_sourced_coefficient_and_the_reason_is_kept(row, reason) -> None:
    (value,) = effective_dose_values([row])
    assert value["effective_dose_msv"] is None
    assert value["effective_dose_source"] is None
    assert reason in value["effective_dose_reason"]


def _exam(sessions: Any, n: int, key: str | None, when: datetime, dose: float | None) -> None:
    """One stored study of one CT event with an effective-dose estimate (invented)."""
    with sessions.begin() as s:
        add_event(s, n, study_uid=f"2.25.91{n}", modality="CT", exam_type="ct_abdomen_pelvis",
                  event_datetime=when, patient_pseudo_id=key, effective_dose_msv=dose)  # fmt: skip


def test_the_recurrent_list_sums_a_hand_made_history(store) -> None:
    sessions = store.session_factory
    at = lambda y, mo: datetime(y, mo, 10, 9, tzinfo=UTC)  # noqa: E731
    # patient A: 40 + 35 + 30 = 105 mSv from 2021 on; a 2019 exam falls outside 5 years
    _exam(sessions, 1, "PSEUDO-A", at(2019, 6), 60.0)
    _exam(sessions, 2, "PSEUDO-A", at(2021, 2), 40.0)
    _exam(sessions, 3, "PSEUDO-A", at(2023, 8), 35.0)
    _exam(sessions, 4, "PSEUDO-A", at(2025, 11), 30.0)
    # patient B: 50 mSv and one exam without an estimate; one study without a patient key
    _exam(sessions, 5, "PSEUDO-B", at(2025, 1), 50.0)
    _exam(sessions, 6, "PSEUDO-B", at(2025, 3), None)
    _exam(sessions, 7, None, at(2025, 4), 20.0)
    with sessions() as session:
        found = recurrent_exposure(session, as_of=date(2025, 12, 31))
    # the window of 5 calendar years ending 31 December 2025 starts on 1 January 2021; the worst
    # window, ending with the August 2023 exam, holds 60 + 40 + 35 = 135 mSv
    assert found.patients == [
        {"patient_key": "PSEUDO-A", "n_exams": 4, "n_exams_in_window": 3,
         "n_without_estimate": 0, "cumulative_dose_msv": 105.0,
         "peak_window_dose_msv": 135.0},
    ]  # fmt: skip
    assert (found.n_patients, found.n_exams) == (2, 6)
    assert (found.n_exams_without_estimate, found.n_exams_without_patient) == (1, 1)
    assert "must never decide" in found.caution
    with sessions() as session:
        lower = recurrent_exposure(session, as_of=date(2025, 12, 31), level_msv=50.0)
    assert [p["patient_key"] for p in lower.patients] == ["PSEUDO-A", "PSEUDO-B"]
    assert not math.isnan(lower.patients[1]["cumulative_dose_msv"])


def test_the_review_read_hands_over_age_and_indication(store) -> None:
    from beamaudit.api.runs.reviews import review_events

    _exam(store.session_factory, 1, "PSEUDO-A", datetime(2026, 3, 2, tzinfo=UTC), 2.0)
    _exam(store.session_factory, 2, "PSEUDO-B", datetime(2026, 3, 3, tzinfo=UTC), 2.0)
    with store.session_factory.begin() as s:
        s.execute(
            m.ExposureEventRow.__table__.update()  # type: ignore[attr-defined]
            .where(m.ExposureEventRow.id == 2)
            .values(patient_age_years=4.5, clinical_indication="acute_stroke")
        )
    with store.session_factory() as session:
        frame = review_events(session, start=date(2026, 3, 1), end=date(2026, 4, 1))
    indication = frame["clinical_indication"]
    assert pd.isna(indication.iloc[0])
    assert indication.iloc[1] == "acute_stroke"
    assert math.isnan(frame["patient_age_years"].iloc[0])
    assert frame["patient_age_years"].iloc[1] == 4.5
