"""Unit conversions between the units DICOM uses for dose quantities and beamaudit's units."""

from __future__ import annotations

import numpy as np
import pytest

from beamaudit.model import units


# DICOM PS3.3 C.8.7.8: Image and Fluoroscopy Area Dose Product (0018,115E) is in dGy·cm².
# SI prefixes (BIPM SI Brochure, 9th ed.): 1 dGy·cm² = 0.1 Gy·cm².
def test_dgy_cm2_to_gy_cm2() -> None:
    assert units.dgy_cm2_to_gy_cm2(1.0) == pytest.approx(0.1, rel=1e-15)
    assert units.gy_cm2_to_dgy_cm2(0.1) == pytest.approx(1.0, rel=1e-15)


# DICOM PS3.16 TID 10003 / 10002: (122130, DCM) Dose Area Product and (113722, DCM) Dose Area
# Product Total are in Gy·m²; 1 m² = 10⁴ cm² (SI).
def test_gy_m2_to_gy_cm2() -> None:
    assert units.gy_m2_to_gy_cm2(1.0) == pytest.approx(1.0e4, rel=1e-15)
    assert units.gy_cm2_to_gy_m2(1.0e4) == pytest.approx(1.0, rel=1e-15)


# The chain written out in the team's DICOM notes (from PS3.3 and PS3.16 units):
# 1 dGy·cm² = 1e-5 Gy·m² = 0.1 Gy·cm² = 100 mGy·cm².
def test_dicom_header_and_dose_report_units_agree() -> None:
    one_dgy_cm2_in_gy_cm2 = units.dgy_cm2_to_gy_cm2(1.0)
    assert units.gy_cm2_to_gy_m2(one_dgy_cm2_in_gy_cm2) == pytest.approx(1e-5, rel=1e-12)
    assert units.mgy_cm2_to_gy_cm2(100.0) == pytest.approx(one_dgy_cm2_in_gy_cm2, rel=1e-12)
    assert units.gy_m2_to_gy_cm2(1e-5) == pytest.approx(one_dgy_cm2_in_gy_cm2, rel=1e-12)


# A typical chest PA radiograph, 0.1 Gy·cm² (UK NDRL order of magnitude, PUBLISHED-VALUES f),
# as a header (1 dGy·cm²) and as a dose report (1e-5 Gy·m²) gives the same stored value.
def test_same_exposure_two_encodings() -> None:
    from_header = units.dgy_cm2_to_gy_cm2(1.0)
    from_report = units.gy_m2_to_gy_cm2(1.0e-5)
    assert from_header == pytest.approx(from_report, rel=1e-12)


# Meter displays (SI prefixes): 1 cGy·cm² = 0.01 Gy·cm²; 1 µGy·m² = 1e-6 Gy · 1e4 cm² = 0.01 Gy·cm².
def test_meter_display_units() -> None:
    assert units.cgy_cm2_to_gy_cm2(1.0) == pytest.approx(0.01, rel=1e-15)
    assert units.ugy_m2_to_gy_cm2(1.0) == pytest.approx(0.01, rel=1e-15)


# DICOM PS3.3: Entrance Dose (0040,0302) in dGy; PS3.16: (113738, DCM) Dose (RP) in Gy;
# (113790, DCM) Collimated Field Area in m².
@pytest.mark.parametrize(
    ("function", "value", "expected"),
    [
        (units.dgy_to_mgy, 1.0, 100.0),
        (units.gy_to_mgy, 1.0, 1000.0),
        (units.mgy_to_gy, 1000.0, 1.0),
        (units.m2_to_cm2, 0.1505, 1505.0),
        (units.mm2_to_cm2, 350.0 * 430.0, 1505.0),
        (units.s_to_min, 90.0, 1.5),
    ],
)
def test_dose_and_area_units(function, value, expected) -> None:
    assert function(value) == pytest.approx(expected, rel=1e-12)


def test_vectorised() -> None:
    values = np.array([1.0, 2.5, 10.0])
    np.testing.assert_allclose(units.dgy_cm2_to_gy_cm2(values), [0.1, 0.25, 1.0], rtol=1e-15)
    np.testing.assert_allclose(units.gy_m2_to_gy_cm2(values), [1e4, 2.5e4, 1e5], rtol=1e-15)


def test_round_trips() -> None:
    x = 3.7
    assert units.gy_cm2_to_dgy_cm2(units.dgy_cm2_to_gy_cm2(x)) == pytest.approx(x, rel=1e-15)
    assert units.gy_cm2_to_gy_m2(units.gy_m2_to_gy_cm2(x)) == pytest.approx(x, rel=1e-15)
    assert units.mgy_to_gy(units.gy_to_mgy(x)) == pytest.approx(x, rel=1e-15)
