"""Water-equivalent diameter from CT localizers (IEC 62985:2019's localizer method) on
phantoms of known size.

The localizers are drawn from the exact chord lengths of water ellipses (ct_phantoms.py); for
parallel rays the sum of the water-equivalent path lengths across a row is the section's
water-equivalent area, so Dw = 2 sqrt(Aw / pi) is known exactly (AAPM Report 220, eq. 2-3).
The detector's response includes beam hardening (a two-energy beam), so only a calibration
that follows it gives the right size: the known calibration (the forward model's own points)
and one measured on water cylinders, then verified on other phantoms, as IEC 62985 verifies
a size method on phantoms.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from ct_phantoms import detector_signal, row_profile, signal_calibration_points

from beamaudit.model.ct_localizer import (
    LocalizerCalibration,
    PhantomLocalizer,
    calibration_from_phantoms,
    localizer_sizes,
)
from beamaudit.model.errors import ModelError

N = 640
SPACING_MM = 0.8  # a 51 cm wide localizer
KNOWN = LocalizerCalibration(*signal_calibration_points(), source="forward model (test)")


def _localizer(parts: list[tuple[float, float, float]], rows: int = 4) -> np.ndarray:
    return np.tile(detector_signal(row_profile(N, SPACING_MM, parts)), (rows, 1))


def test_linear_calibration_of_a_linear_detector() -> None:
    # an ideal detector: P = 100 + 2 t (t in mm of water); ellipse a = 170, b = 110 mm
    t = row_profile(N, SPACING_MM, [(170.0, 110.0, 0.0)])
    calibration = LocalizerCalibration.linear(air_value=100.0, value_per_mm_water=2.0, source="x")
    sizes = localizer_sizes(100.0 + 2.0 * t, column_spacing_mm=SPACING_MM, calibration=calibration)
    assert sizes.water_equivalent_diameter_cm[0] == pytest.approx(
        2 * math.sqrt(170 * 110) / 10, rel=1e-4
    )


@pytest.mark.parametrize(("a_mm", "b_mm"), [(100.0, 100.0), (170.0, 110.0), (160.0, 160.0)])
def test_known_calibration_with_beam_hardening(a_mm: float, b_mm: float) -> None:
    sizes = localizer_sizes(
        _localizer([(a_mm, b_mm, 12.0)]), column_spacing_mm=SPACING_MM, calibration=KNOWN
    )
    expected = 2 * math.sqrt(a_mm * b_mm) / 10  # Dw of a water ellipse
    np.testing.assert_allclose(sizes.water_equivalent_diameter_cm, expected, rtol=2e-4)
    assert not sizes.truncated.any()
    assert sizes.width_cm[0] == pytest.approx(2 * a_mm / 10, abs=0.6)


def test_a_linear_calibration_misreads_a_hardening_beam() -> None:
    # the calibration matters: a straight line through the 16 cm point underestimates 32 cm
    p16 = float(detector_signal(np.array([160.0]))[0])
    linear = LocalizerCalibration.linear(air_value=0.0, value_per_mm_water=p16 / 160.0, source="x")
    sizes = localizer_sizes(
        _localizer([(160.0, 160.0, 0.0)]), column_spacing_mm=SPACING_MM, calibration=linear
    )
    assert sizes.water_equivalent_diameter_cm[0] < 0.99 * 32.0


def test_calibration_measured_on_water_cylinders_verified_on_other_phantoms() -> None:
    # calibrate on 16 cm and 32 cm water cylinders; verify on a 24 cm cylinder and an ellipse
    phantoms = [
        PhantomLocalizer(_localizer([(d / 2, d / 2, 7.0)], rows=2), SPACING_MM, d)
        for d in (160.0, 320.0)
    ]
    calibration = calibration_from_phantoms(phantoms, air_value=0.0, source="water 16 + 32 cm")
    assert calibration.water_thickness_mm[0] == 0.0
    for parts, expected_cm in (
        ([(120.0, 120.0, -20.0)], 24.0),
        ([(150.0, 100.0, 0.0)], 2 * math.sqrt(150 * 100) / 10),
    ):
        sizes = localizer_sizes(
            _localizer(parts), column_spacing_mm=SPACING_MM, calibration=calibration
        )
        assert sizes.water_equivalent_diameter_cm[0] == pytest.approx(expected_cm, rel=5e-3)


def test_two_legs_are_both_counted() -> None:
    sizes = localizer_sizes(
        _localizer([(65.0, 70.0, -80.0), (65.0, 70.0, 80.0)]),
        column_spacing_mm=SPACING_MM,
        calibration=KNOWN,
    )
    assert sizes.water_equivalent_diameter_cm[0] == pytest.approx(
        2 * math.sqrt(2 * 65 * 70) / 10, rel=2e-4
    )


def _lateral_with_table(gap_mm: float) -> tuple[np.ndarray, np.ndarray]:
    """A lateral localizer (columns from anterior to posterior) of a water ellipse with a
    15 mm thick table plate seen edge-on ``gap_mm`` behind it (a 450 mm wide plate of
    1.5 water-equivalent density: 675 mm of water along each ray through it)."""
    x = (np.arange(N) + 0.5) * SPACING_MM - N * SPACING_MM / 2
    body = row_profile(N, SPACING_MM, [(110.0, 170.0, 0.0)])
    plate = np.where((x >= 110.0 + gap_mm) & (x < 110.0 + gap_mm + 15.0), 675.0, 0.0)
    return np.tile(detector_signal(body + plate), (3, 1)), detector_signal(plate)


def test_table_edge_on_behind_a_mattress_is_too_thin_to_be_patient() -> None:
    values, _ = _lateral_with_table(40.0)
    sizes = localizer_sizes(values, column_spacing_mm=SPACING_MM, calibration=KNOWN)
    assert sizes.water_equivalent_diameter_cm[0] == pytest.approx(
        2 * math.sqrt(110 * 170) / 10, rel=2e-4
    )


def test_table_touching_the_patient_is_removed_by_its_empty_profile() -> None:
    values, empty_table = _lateral_with_table(0.0)
    profile = KNOWN.water_thickness_of(empty_table)
    with_profile = localizer_sizes(
        values, column_spacing_mm=SPACING_MM, calibration=KNOWN, table_profile_mm=profile
    )
    without = localizer_sizes(values, column_spacing_mm=SPACING_MM, calibration=KNOWN)
    expected = 2 * math.sqrt(110 * 170) / 10
    assert with_profile.water_equivalent_diameter_cm[0] == pytest.approx(expected, rel=2e-4)
    assert with_profile.table_removed == "empty-table profile subtracted"
    assert without.water_equivalent_diameter_cm[0] > 1.05 * expected  # the plate counted


def test_patient_beyond_the_localizer_is_truncated() -> None:
    sizes = localizer_sizes(
        _localizer([(240.0, 120.0, 60.0)]), column_spacing_mm=SPACING_MM, calibration=KNOWN
    )
    assert sizes.truncated.all()


def test_rows_without_patient_are_nan() -> None:
    values = np.vstack([np.zeros((2, N)), _localizer([(100.0, 100.0, 0.0)], rows=1)])
    sizes = localizer_sizes(values, column_spacing_mm=SPACING_MM, calibration=KNOWN)
    assert np.isnan(sizes.water_equivalent_diameter_cm[:2]).all()
    assert sizes.water_equivalent_diameter_cm[2] == pytest.approx(20.0, rel=2e-4)


def test_calibration_extrapolates_from_its_end_segments() -> None:
    calibration = LocalizerCalibration((0.0, 10.0, 30.0), (0.0, 5.0, 10.0), source="x")
    np.testing.assert_allclose(
        calibration.water_thickness_of([-10.0, 20.0, 50.0]), [-5.0, 7.5, 15.0]
    )


@pytest.mark.parametrize(
    ("values", "thickness", "source", "message"),
    [
        ((0.0,), (0.0,), "x", "two or more"),
        ((0.0, 10.0, 5.0), (0.0, 1.0, 2.0), "x", "must increase"),
        ((0.0, 10.0), (5.0, 1.0), "x", "must not"),
        ((0.0, float("inf")), (0.0, 1.0), "x", "finite"),
        ((0.0, 10.0), (0.0, 1.0), "", "where it comes from"),
    ],
)
def test_calibration_is_checked(
    values: tuple[float, ...], thickness: tuple[float, ...], source: str, message: str
) -> None:
    with pytest.raises(ModelError, match=message):
        LocalizerCalibration(values, thickness, source)


def test_bad_localizer_inputs_are_refused() -> None:
    with pytest.raises(ModelError, match="column spacing"):
        localizer_sizes(np.zeros((2, 4)), column_spacing_mm=0.0, calibration=KNOWN)
    with pytest.raises(ModelError, match="table profile"):
        localizer_sizes(
            np.zeros((2, 4)), column_spacing_mm=1.0, calibration=KNOWN, table_profile_mm=[0.0]
        )
