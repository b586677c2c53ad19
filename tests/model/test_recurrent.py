"""Recurrent exposure: the cumulative sum on a hand-made patient history, the window, the list
above a level, and that nothing in the output identifies a patient."""

from __future__ import annotations

import json
import math
from datetime import UTC, date, datetime, timedelta, timezone

import numpy as np
import pytest

from beamaudit.model.errors import ModelError
from beamaudit.model.recurrent import (
    DEFAULT_LEVEL_MSV,
    DEFAULT_WINDOW_YEARS,
    RECURRENT_EXPOSURE_CAUTION,
    cumulative_effective_dose,
)

# A hand-made history of two invented pseudonymised patients (keys as ingest's keyed hash writes
# them: 32 hex characters). Doses in mSv, as effective_dose would give them.
P1 = "3f2a9c0d5e6b7a8c9d0e1f2a3b4c5d6e"
P2 = "a1b2c3d4e5f60718293a4b5c6d7e8f90"
HISTORY = [
    (P1, "2019-01-10T09:00", 40.0),  # CT chest-abdomen-pelvis, staging
    (P1, "2021-06-01T10:30", 30.0),
    (P1, "2023-03-01T08:15", 35.0),
    (P1, "2024-12-31T23:00", 20.0),
    (P2, "2024-01-01T12:00", 5.0),
    (P2, "2024-02-01T12:00", math.nan),  # radiograph: no sourced coefficient, no estimate
]


def history() -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    keys = np.array([h[0] for h in HISTORY], dtype=object)
    when = np.array([h[1] for h in HISTORY], dtype="datetime64[ns]")
    dose = np.array([h[2] for h in HISTORY])
    return keys, when, dose


def test_defaults_follow_the_iaea_recurrent_imaging_studies() -> None:
    # 100 mSv cumulative effective dose (PUBLISHED-VALUES n, high); windows of up to 5 years
    assert (DEFAULT_LEVEL_MSV, DEFAULT_WINDOW_YEARS) == (100.0, 5.0)


def test_cumulative_sum_over_five_years_worked_by_hand() -> None:
    # window ending 31 Dec 2024, five calendar years: the exams after 31 Dec 2019.
    # P1: 30 + 35 + 20 = 85 mSv in the window (the 2019 exam is outside); worst five-year window
    # ends 1 Mar 2023 and holds 40 + 30 + 35 = 105 mSv. P2: 5 mSv and one exam without estimate.
    result = cumulative_effective_dose(*history(), as_of=date(2024, 12, 31))
    first, second = result.to_records()
    assert first == {
        "patient_key": P1,
        "n_exams": 4,
        "n_exams_in_window": 3,
        "n_without_estimate": 0,
        "cumulative_dose_msv": 85.0,
        "peak_window_dose_msv": 105.0,
    }
    assert (second["patient_key"], second["cumulative_dose_msv"]) == (P2, 5.0)
    assert (second["n_without_estimate"], second["n_exams_in_window"]) == (1, 2)
    assert result.window_start == datetime(2019, 12, 31, 23, 59, 59, 999999)


def test_the_worst_window_holds_for_a_registry_of_many_patients() -> None:
    # a site's CT registry has thousands of patients: the hand-made history of P1 among 2,000
    # other invented ones (one 4 mSv exam each) keeps its worst window of 105 mSv
    keys, when, dose = history()
    others = np.array([f"{k:032x}" for k in range(2000)], dtype=object)
    keys = np.concatenate([others, keys])
    when = np.concatenate([np.full(2000, np.datetime64("2022-05-05T10:00", "ns")), when])
    dose = np.concatenate([np.full(2000, 4.0), dose])
    result = cumulative_effective_dose(keys, when, dose, as_of=date(2024, 12, 31))
    records = {r["patient_key"]: r for r in result.to_records()}
    assert records[P1]["peak_window_dose_msv"] == 105.0
    assert records[f"{1999:032x}"]["peak_window_dose_msv"] == 4.0


def test_the_list_above_a_level() -> None:
    result = cumulative_effective_dose(*history(), as_of=date(2024, 12, 31))
    assert len(result.above()) == 0  # 85 mSv in the window ending today
    assert result.above(peak=True).patient_key.tolist() == [P1]  # 105 mSv in its worst window
    assert result.above(80.0).patient_key.tolist() == [P1]
    with pytest.raises(ModelError, match="positive"):
        result.above(0.0)


def test_window_and_as_of_are_parameters() -> None:
    keys, when, dose = history()
    ten = cumulative_effective_dose(keys, when, dose, window_years=10, as_of=date(2024, 12, 31))
    assert ten.to_records()[0]["cumulative_dose_msv"] == 125.0
    earlier = cumulative_effective_dose(keys, when, dose, as_of=date(2023, 3, 1))
    assert earlier.to_records()[0]["cumulative_dose_msv"] == 105.0  # 2019 to 2023 inclusive
    aware = datetime(2024, 12, 31, 23, 30, tzinfo=timezone(timedelta(hours=1)))
    late = cumulative_effective_dose(keys, when, dose, as_of=aware)  # 22:30 UTC: before 23:00
    assert late.to_records()[0]["cumulative_dose_msv"] == 65.0
    half = cumulative_effective_dose(keys, when, dose, window_years=0.5, as_of=date(2024, 12, 31))
    assert half.to_records()[0]["n_exams_in_window"] == 1


def test_default_as_of_is_the_latest_exam() -> None:
    result = cumulative_effective_dose(*history())
    assert result.as_of == datetime(2024, 12, 31, 23, 0)
    assert result.to_records()[0]["cumulative_dose_msv"] == 85.0


def test_nothing_identifies_a_patient_in_the_output() -> None:
    result = cumulative_effective_dose(*history(), as_of=date(2024, 12, 31))
    records = result.to_records()
    allowed = {
        "patient_key", "n_exams", "n_exams_in_window", "n_without_estimate",
        "cumulative_dose_msv", "peak_window_dose_msv",
    }  # fmt: skip
    assert all(set(r) == allowed for r in records)
    text = json.dumps(records)
    for exam_time in ("2019-01-10", "2021-06-01", "2023-03-01", "2024-01-01", "2024-02-01"):
        assert exam_time not in text  # no exam date per patient
    assert {r["patient_key"] for r in records} == {P1, P2}  # only the pseudonyms given


def test_the_caution_goes_with_the_result() -> None:
    result = cumulative_effective_dose(*history())
    assert result.caution == RECURRENT_EXPOSURE_CAUTION
    assert "must never decide whether a justified examination is done" in result.caution
    assert "population-average" in result.caution


@pytest.mark.parametrize(
    ("change", "message"),
    [
        (lambda k, w, d: ([*k[:-1], ""], w, d), "pseudonymised patient key"),
        (lambda k, w, d: (k, w, [*d[:-1], -1.0]), "must not be negative"),
        (lambda k, w, d: (k[:2], w, d), "aligned"),
        (lambda k, w, d: (k, np.array([*w[:-1], np.datetime64("NaT")]), d), "date and time"),
    ],
)
def test_bad_input_is_refused(change, message: str) -> None:
    keys, when, dose = history()
    with pytest.raises(ModelError, match=message):
        cumulative_effective_dose(*change(list(keys), when, list(dose)))
    with pytest.raises(ModelError, match="window_years"):
        cumulative_effective_dose(keys, when, dose, window_years=0)


def test_an_empty_history_gives_an_empty_list() -> None:
    empty = cumulative_effective_dose(
        [], np.array([], "datetime64[ns]"), [], as_of=datetime.now(UTC)
    )
    assert len(empty) == 0 and empty.to_records() == []
