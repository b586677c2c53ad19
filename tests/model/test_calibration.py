"""Room calibration: recover a known room from its own (model-generated) QA data."""

from __future__ import annotations

import pytest

from beamaudit.model import (
    BeamSpec,
    FilterSpec,
    ModelError,
    QAMeasurement,
    RoomCalibration,
    calibrate_room,
    compute_beam,
    default_calibration,
)

TRUE_SCALE = 0.8
TRUE_INHERENT_MM_AL = 1.7


def _room_measurement(
    kv: float, added: tuple[FilterSpec, ...], distance_mm: float, hvl: bool
) -> QAMeasurement:
    """What a room with TRUE_SCALE and TRUE_INHERENT_MM_AL would measure (invented room)."""
    reference = RoomCalibration(
        output_scale=TRUE_SCALE, inherent_filtration_mm_al=TRUE_INHERENT_MM_AL
    )
    r = compute_beam(BeamSpec(kv, added, air_path_mm=distance_mm), calibration=reference)
    return QAMeasurement(
        kv=kv,
        filters=added,
        distance_mm=distance_mm,
        measured_output_ugy_per_mas=r.output_ugy_per_mas_1m * (1000.0 / distance_mm) ** 2,
        measured_hvl_mm_al=r.hvl1_mm_al if hvl else None,
    )


@pytest.fixture(scope="module")
def measurements() -> list[QAMeasurement]:
    return [
        _room_measurement(60.0, (), 1000.0, True),
        _room_measurement(80.0, (), 800.0, True),
        _room_measurement(100.0, (FilterSpec("Cu", 0.1),), 1000.0, True),
        _room_measurement(120.0, (), 1200.0, False),
    ]


def test_fit_recovers_scale_and_inherent_filtration(measurements: list[QAMeasurement]) -> None:
    cal = calibrate_room(measurements)
    assert cal.calibrated
    assert cal.output_scale == pytest.approx(TRUE_SCALE, rel=1e-3)
    assert cal.inherent_filtration_mm_al == pytest.approx(TRUE_INHERENT_MM_AL, abs=0.01)
    assert len(cal.residuals) == 7  # four outputs, three HVLs
    assert all(abs(r.relative_residual) < 1e-3 for r in cal.residuals)
    assert cal.output_scale_uncertainty_rel > 0.0
    assert cal.inherent_filtration_uncertainty_mm_al is not None


def test_calibrated_beam_is_marked_and_uses_inherent_filtration(
    measurements: list[QAMeasurement],
) -> None:
    cal = calibrate_room(measurements)
    r = compute_beam(BeamSpec(80.0, ()), calibration=cal)
    assert r.calibrated
    assert not r.filtration_assumed
    assert r.filters[0].material == "Al"
    assert r.filters[0].thickness_mm == pytest.approx(TRUE_INHERENT_MM_AL, abs=0.01)
    assert r.uncertainty["hvl1_mm_al"] > 0.0  # from the fitted inherent filtration


def test_outputs_only_fit_the_scale(measurements: list[QAMeasurement]) -> None:
    # without HVLs the filters are the total filtration, nothing else is fitted
    total = (FilterSpec("Al", 3.0),)
    reference = RoomCalibration(output_scale=1.25, inherent_filtration_mm_al=None)
    qa = []
    for kv in (70.0, 90.0):
        r = compute_beam(BeamSpec(kv, total), calibration=reference)
        qa.append(QAMeasurement(kv, total, 1000.0, r.output_ugy_per_mas_1m))
    cal = calibrate_room(qa)
    assert cal.inherent_filtration_mm_al is None
    assert cal.output_scale == pytest.approx(1.25, rel=1e-6)
    assert len(cal.residuals) == 2


def test_residuals_report_a_bad_measurement() -> None:
    total = (FilterSpec("Al", 3.0),)
    good = compute_beam(BeamSpec(80.0, total)).output_ugy_per_mas_1m
    qa = [QAMeasurement(80.0, total, 1000.0, good), QAMeasurement(80.0, total, 1000.0, 1.5 * good)]
    cal = calibrate_room(qa)
    assert cal.residuals[1].relative_residual > 0.1 > cal.residuals[0].relative_residual
    assert cal.output_scale_uncertainty_rel > 0.1  # Birge ratio widens it


def test_default_calibration_is_uncalibrated_and_documented() -> None:
    cal = default_calibration()
    assert not cal.calibrated
    assert cal.output_scale_uncertainty_rel == pytest.approx(0.4)
    assert "typical output" in cal.source
    assert len(cal.residuals) == 6
    # the model follows the published kV dependence within 15 % over 60-120 kV
    assert all(abs(r.relative_residual) < 0.15 for r in cal.residuals)


def test_calibration_for_another_tube_is_rejected(measurements: list[QAMeasurement]) -> None:
    cal = calibrate_room(measurements, anode_angle_deg=16.0)
    with pytest.raises(ModelError, match="another tube"):
        compute_beam(BeamSpec(80.0), calibration=cal)


@pytest.mark.parametrize(
    ("kwargs", "match"),
    [
        (
            {"kv": 80.0, "filters": None, "distance_mm": 0.0, "measured_output_ugy_per_mas": 50.0},
            "distance_mm",
        ),
        (
            {
                "kv": 80.0,
                "filters": None,
                "distance_mm": 1000.0,
                "measured_output_ugy_per_mas": -5.0,
            },
            "measured_output",
        ),
        (
            {
                "kv": 80.0,
                "filters": None,
                "distance_mm": 1000.0,
                "measured_output_ugy_per_mas": 5.0,
                "measured_hvl_mm_al": 0.0,
            },
            "hvl",
        ),
    ],
)
def test_bad_measurements_rejected(kwargs: dict[str, object], match: str) -> None:
    with pytest.raises(ModelError, match=match):
        QAMeasurement(**kwargs)


def test_no_measurements_rejected() -> None:
    with pytest.raises(ModelError, match="at least one"):
        calibrate_room([])
