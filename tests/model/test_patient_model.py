"""The elliptical-cylinder patient: size from height and mass, landmarks, skin cells."""

from __future__ import annotations

import math

import numpy as np
import pytest

from beamaudit.model import ModelError
from beamaudit.model.patient_model import (
    body_landmark_fraction,
    landmark_for_region,
    patient_model,
    skin_default,
    skin_grid,
)


def test_reference_adult_is_the_mird_trunk() -> None:
    # MIRD adult phantom trunk: elliptical cylinder 40 cm x 20 cm (Snyder et al. 1978; Cristy &
    # Eckerman 1987; from memory), 70 kg (the ICRP 135 standard-size adult)
    p = patient_model()
    assert (p.half_width_mm, p.half_thickness_mm) == (200.0, 100.0)
    assert (p.height_mm, p.mass_kg, p.size_basis) == (1740.0, 70.0, "reference_adult")
    assert any("not recorded" in a for a in p.assumptions)


def test_cross_section_scales_with_mass_per_height() -> None:
    # hand-worked: sqrt((100 kg / 1.75 m) / (70 kg / 1.74 m)) = sqrt(57.1429 / 40.2299) = 1.19181
    p = patient_model(height_m=1.75, mass_kg=100.0)
    scale = math.sqrt((100.0 / 1750.0) / (70.0 / 1740.0))
    assert p.half_width_mm == pytest.approx(200.0 * scale, rel=1e-12)
    assert p.half_thickness_mm == pytest.approx(100.0 * scale, rel=1e-12)
    assert scale == pytest.approx(1.19181, abs=1e-5)
    assert p.size_basis == "height_and_mass"
    assert not any("not recorded" in a for a in p.assumptions)


@pytest.mark.parametrize(
    ("sex", "height_mm", "mass_kg"),
    # ICRP Publication 89 (2002) reference adults (from memory, high confidence)
    [("M", 1760.0, 73.0), ("F", 1630.0, 60.0)],
)
def test_missing_size_takes_the_icrp_89_reference_of_the_sex(
    sex: str, height_mm: float, mass_kg: float
) -> None:
    p = patient_model(sex=sex)
    assert (p.height_mm, p.mass_kg) == (height_mm, mass_kg)


def test_one_missing_value_keeps_the_other() -> None:
    p = patient_model(mass_kg=95.0, sex="M")
    assert (p.height_mm, p.mass_kg, p.size_basis) == (1760.0, 95.0, "mass")


def test_child_is_noted() -> None:
    assert any("child" in a for a in patient_model(age_years=9).assumptions)


@pytest.mark.parametrize("kwargs", [{"height_m": 0.2}, {"mass_kg": 900.0}, {"height_m": math.nan}])
def test_impossible_sizes_are_refused(kwargs: dict[str, float]) -> None:
    with pytest.raises(ModelError, match="outside"):
        patient_model(**kwargs)


def test_perimeter_matches_ramanujans_ellipse_formula() -> None:
    # Ramanujan (1914): P ~ pi [3(a+b) - sqrt((3a+b)(a+3b))], within 1e-5 relative at a/b = 2
    a, b = 200.0, 100.0
    expected = math.pi * (3 * (a + b) - math.sqrt((3 * a + b) * (a + 3 * b)))
    assert patient_model().perimeter_mm == pytest.approx(expected, rel=2e-5)


def test_grid_halves_are_back_and_front_and_side_lines_a_quarter_round() -> None:
    grid = skin_grid(patient_model(), cell_mm=10.0)
    n_along, n_around = grid.shape
    assert n_around % 4 == 0 and n_along == 174
    assert grid.cell_area_cm2 == pytest.approx(grid.cell_around_mm * grid.cell_along_mm / 100)
    points, normals = grid.surface_points(grid.around_mm)
    back, front = points[: n_around // 2], points[n_around // 2 :]
    assert np.all(back[:, 1] < 0) and np.all(front[:, 1] > 0)  # posterior a < 0
    # the side lines: a quarter perimeter from the spine lies on the widest point
    side, side_normal = grid.surface_points(np.array([grid.perimeter_mm / 4.0]))
    assert side[0] == pytest.approx([200.0, 0.0], abs=1e-6)
    assert side_normal[0] == pytest.approx([1.0, 0.0], abs=1e-6)
    assert np.allclose(np.linalg.norm(normals, axis=1), 1.0)
    # cells are of equal arc length: consecutive centres one cell apart along the surface
    steps = np.hypot(*np.diff(points, axis=0).T)
    assert steps == pytest.approx(grid.cell_around_mm, rel=2e-3)


def test_landmarks_and_target_regions() -> None:
    # Drillis & Contini (1966) via Winter (2009) fig. 4.1: nipple line 0.720 H above the floor
    assert body_landmark_fraction("chest") == pytest.approx(1 - 0.720)
    assert landmark_for_region("HEART") == "chest"
    assert landmark_for_region("Abdomen") == "abdomen"
    assert landmark_for_region("ENTIRE BODY") is None
    with pytest.raises(ModelError, match="unknown body landmark"):
        body_landmark_fraction("elbow")


def test_every_default_row_names_a_source() -> None:
    for key in (
        "source_to_isocenter_mm",
        "table_al_equivalent_mm",
        "kar_relative_uncertainty_uncalibrated",
    ):
        assert skin_default(key).source
    # IEC 60601-2-43's +-35 % as a rectangular distribution: 0.35 / sqrt(3) = 0.202
    assert skin_default("kar_relative_uncertainty_uncalibrated").value == pytest.approx(
        0.35 / math.sqrt(3), abs=0.005
    )
