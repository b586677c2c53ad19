"""Paediatric patient groups: the ICRP 135 / EC RP 185 bands, their edges, and that nothing is
guessed into a band."""

from __future__ import annotations

import io
import math

import numpy as np
import pytest

from beamaudit.api.review import CsvFormatError, ReviewError
from beamaudit.api.review.bands import (
    OUTSIDE_BANDS,
    WEIGHT_NOT_RECORDED,
    PatientGroup,
    PatientGroups,
    assign_patient_groups,
    load_default_patient_groups,
    read_patient_groups_csv,
    write_patient_groups_csv,
)
from beamaudit.api.review.examtypes import load_default_catalogue

BANDS = load_default_patient_groups()


def assign(banding: str, *, age: float = math.nan, weight: float = math.nan) -> object:
    out = assign_patient_groups(
        BANDS,
        banding=np.array([banding], dtype=object),
        age_years=np.array([age]),
        weight_kg=np.array([weight]),
        paediatric_age_limit_years=18.0,
    )
    return out[0]


def test_shipped_bands_are_those_of_icrp_135_and_ec_rp_185() -> None:
    # ICRP 135 (2017); EC RP 185 (2018): body by weight < 5, 5-<15, 15-<30, 30-<50, 50-<80 kg;
    # head by age 0-<3 months, 3 months-<1 year, 1-<6 years, >= 6 years (PUBLISHED-VALUES n, high)
    weight = [g.bounds for g in BANDS if g.banding == "weight"]
    age = [g.bounds for g in BANDS if g.banding == "age"]
    assert weight == [(0, 5), (5, 15), (15, 30), (30, 50), (50, 80)]
    assert age == [(0, 0.25), (0.25, 1), (1, 6), (6, math.inf)]
    assert all("RP 185" in g.source and "ICRP 135" in g.source for g in BANDS)


@pytest.mark.parametrize(
    ("weight", "expected"),
    [
        (0.8, "weight_0_5kg"),
        (4.999, "weight_0_5kg"),
        (5.0, "weight_5_15kg"),  # the lower edge belongs to the band: 5-<15 kg
        (14.99, "weight_5_15kg"),
        (15.0, "weight_15_30kg"),
        (30.0, "weight_30_50kg"),
        (50.0, "weight_50_80kg"),
        (79.9, "weight_50_80kg"),
        (80.0, OUTSIDE_BANDS),  # above the top band: counted, not put in a band
        (math.nan, WEIGHT_NOT_RECORDED),  # never guessed into a band
    ],
)
def test_weight_band_edges(weight: float, expected: str) -> None:
    assert assign("weight", age=10.0, weight=weight) == expected


@pytest.mark.parametrize(
    ("age_years", "expected"),
    [
        (1 / 365.2425, "age_0_3m"),
        (90 / 365.2425, "age_0_3m"),  # Age String 090D: 0.246 years
        (0.25, "age_3m_1y"),  # 003M = 3/12 year exactly: the 3-month edge
        (11 / 12, "age_3m_1y"),
        (1.0, "age_1_6y"),  # 001Y / 012M
        (5.99, "age_1_6y"),
        (6.0, "age_6y_up"),
        (17.9, "age_6y_up"),
    ],
)
def test_age_band_edges(age_years: float, expected: str) -> None:
    assert assign("age", age=age_years, weight=20.0) == expected


def test_adults_unknown_ages_and_unbanded_exam_types_are_not_banded() -> None:
    assert assign("weight", age=18.0, weight=20.0) is None  # age limit reached: an adult
    assert assign("weight", age=math.nan, weight=20.0) is None  # not known to be a child
    assert assign("age", age=math.nan, weight=20.0) is None
    assert assign("", age=3.0, weight=15.0) is None  # exam type without paediatric bands


def test_the_age_limit_is_a_parameter() -> None:
    out = assign_patient_groups(
        BANDS,
        banding=np.array(["weight", "weight"], dtype=object),
        age_years=np.array([15.0, 16.0]),
        weight_kg=np.array([55.0, 55.0]),
        paediatric_age_limit_years=16.0,
    )
    assert out.tolist() == ["weight_50_80kg", None]


def test_shipped_catalogue_bands_head_exams_by_age_and_body_exams_by_weight() -> None:
    catalogue = load_default_catalogue()
    by = {t.exam_type: t.paediatric_bands for t in catalogue}
    assert by["ct_head"] == by["skull_ap_pa"] == "age"
    assert by["chest_pa"] == by["ct_abdomen_pelvis"] == by["fluoro_mcug"] == "weight"
    assert by["mammo_cc"] == ""


def test_round_trip_and_fingerprint() -> None:
    text = write_patient_groups_csv(BANDS)
    assert isinstance(text, str)
    again = read_patient_groups_csv(io.StringIO(text))
    assert again.groups == BANDS.groups and again.fingerprint() == BANDS.fingerprint()
    assert len(BANDS.fingerprint()) == 64


@pytest.mark.parametrize(
    ("row", "message"),
    [
        ("w1,weight,0,5,year,x,", "not a unit of weight"),
        ("w1,height,0,5,kg,x,", "banding must be weight or age"),
        ("w1,weight,5,5,kg,x,", "0 <= low < high"),
        ("w1,weight,-1,5,kg,x,", "0 <= low < high"),
        ("W1,weight,0,5,kg,x,", "lower-case"),
        (f"{WEIGHT_NOT_RECORDED},weight,0,5,kg,x,", "not one of"),
        ("w1,weight,zero,5,kg,x,", "must be numbers"),
    ],
)
def test_bad_bands_are_refused_with_their_line(row: str, message: str) -> None:
    text = "patient_group,banding,low,high,unit,label,source\n" + row + "\n"
    with pytest.raises(CsvFormatError, match=f"line 2: .*{message}"):
        read_patient_groups_csv(io.StringIO(text))


def test_overlapping_bands_are_refused() -> None:
    a = PatientGroup("a", "weight", 0, 10, "kg", "a")
    b = PatientGroup("b", "weight", 5, 15, "kg", "b")
    with pytest.raises(ReviewError, match="overlap"):
        PatientGroups((a, b))
    PatientGroups((a, PatientGroup("c", "age", 5, 15, "year", "c")))  # other banding: fine
