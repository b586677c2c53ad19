"""Dose quantities: worked examples by hand from the published formulas, and the laws they obey.

Formulas: IAEA TRS 457 (2007) §7 and ICRU Report 74 (2005): K(d) = Y(1 m)·P_It·(1 m/d)²,
P_KA = K(d)·A(d), K_a,e = K_a,i·B, D = K_a,e·(μen/ρ)_tissue,air. Uncertainty combination:
JCGM 100:2008 (GUM) eq. 12.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from beamaudit.model.dose import (
    air_kerma_at_distance_mgy,
    compare_reported,
    dap_gy_cm2,
    entrance_surface_air_kerma_mgy,
    entrance_surface_dose_mgy,
    incident_air_kerma_mgy,
    inverse_square_air_kerma_mgy,
    relative_uncertainty_of_product,
)
from beamaudit.model.errors import ModelError
from beamaudit.model.geometry import field_area_at_distance_cm2


def test_worked_example_abdomen_ap() -> None:
    # By hand (TRS 457 §7 chain): Y = 50 µGy/mAs at 1 m, 10 mAs, FSD 750 mm
    # K_a,i = 50 · 10 · (1000/750)² µGy = 500 · 1.77778 = 888.89 µGy = 0.88889 mGy
    # K_a,e = 0.88889 · 1.35 = 1.20000 mGy; D = 1.2 · 1.06 = 1.27200 mGy
    k_i = float(incident_air_kerma_mgy(output_ugy_per_mas_1m=50.0, exposure_mas=10.0, fsd_mm=750.0))
    assert k_i == pytest.approx(0.888889, rel=1e-6)
    k_e = float(entrance_surface_air_kerma_mgy(incident_air_kerma_mgy=k_i, backscatter_factor=1.35))
    assert k_e == pytest.approx(1.2, rel=1e-9)
    d = float(
        entrance_surface_dose_mgy(entrance_surface_air_kerma_mgy=k_e, tissue_to_air_ratio=1.06)
    )
    assert d == pytest.approx(1.272, rel=1e-9)


def test_worked_example_chest_pa_dap() -> None:
    # By hand: Y = 40 µGy/mAs at 1 m, 4 mAs, field 35 x 43 cm = 1505 cm² at the SID of 1800 mm
    # K(1800) = 160 µGy / 1.8² = 49.383 µGy = 0.049383 mGy; P_KA = 0.049383 · 1505 / 1000
    # = 0.074321 Gy·cm²
    k_sid = air_kerma_at_distance_mgy(
        output_ugy_per_mas_1m=40.0, exposure_mas=4.0, distance_mm=1800
    )
    assert float(k_sid) == pytest.approx(0.0493827, rel=1e-6)
    assert float(dap_gy_cm2(air_kerma_mgy=k_sid, field_area_cm2=1505.0)) == pytest.approx(
        0.0743210, rel=1e-6
    )


def test_unit_of_dap() -> None:
    # 1 mGy over 1000 cm² = 1000 mGy·cm² = 1 Gy·cm² (SI prefixes)
    assert float(dap_gy_cm2(air_kerma_mgy=1.0, field_area_cm2=1000.0)) == pytest.approx(1.0)


@pytest.mark.parametrize("distance_mm", [300.0, 500.0, 750.0, 1000.0, 1530.0, 1800.0])
def test_dap_independent_of_plane(distance_mm: float) -> None:
    # ICRU 74: P_KA is the same in every plane normal to the beam axis (K ∝ d⁻², A ∝ d²)
    ref_area = field_area_at_distance_cm2(
        field_area_cm2=1505.0, from_distance_mm=1800.0, to_distance_mm=1000.0
    )
    reference = float(
        dap_gy_cm2(
            air_kerma_mgy=air_kerma_at_distance_mgy(
                output_ugy_per_mas_1m=45.0, exposure_mas=8.0, distance_mm=1000.0
            ),
            field_area_cm2=ref_area,
        )
    )
    area = field_area_at_distance_cm2(
        field_area_cm2=1505.0, from_distance_mm=1800.0, to_distance_mm=distance_mm
    )
    kerma = air_kerma_at_distance_mgy(
        output_ugy_per_mas_1m=45.0, exposure_mas=8.0, distance_mm=distance_mm
    )
    assert float(dap_gy_cm2(air_kerma_mgy=kerma, field_area_cm2=area)) == pytest.approx(
        reference, rel=1e-12
    )


def test_inverse_square_law() -> None:
    # inverse-square law: doubling the distance quarters the kerma; 1 m -> 0.5 m quadruples it
    k1 = air_kerma_at_distance_mgy(output_ugy_per_mas_1m=60.0, exposure_mas=1.0, distance_mm=1000)
    k2 = air_kerma_at_distance_mgy(output_ugy_per_mas_1m=60.0, exposure_mas=1.0, distance_mm=2000)
    assert float(k1) == pytest.approx(0.060)
    assert float(k2) == pytest.approx(float(k1) / 4.0)
    moved = inverse_square_air_kerma_mgy(
        air_kerma_mgy=k1, from_distance_mm=1000.0, to_distance_mm=500.0
    )
    assert float(moved) == pytest.approx(4.0 * float(k1))
    # PUBLISHED-VALUES j (derived): factor from 61 cm to 100 cm is (61/100)² = 0.372
    assert float(
        inverse_square_air_kerma_mgy(air_kerma_mgy=1.0, from_distance_mm=610, to_distance_mm=1000)
    ) == pytest.approx(0.3721)


def test_linear_in_mas_and_output() -> None:
    base = air_kerma_at_distance_mgy(output_ugy_per_mas_1m=50.0, exposure_mas=5.0, distance_mm=800)
    assert float(
        air_kerma_at_distance_mgy(output_ugy_per_mas_1m=50.0, exposure_mas=10.0, distance_mm=800)
    ) == pytest.approx(2 * float(base))
    assert float(
        air_kerma_at_distance_mgy(output_ugy_per_mas_1m=100.0, exposure_mas=5.0, distance_mm=800)
    ) == pytest.approx(2 * float(base))


def test_vectorised_over_distances() -> None:
    k = air_kerma_at_distance_mgy(
        output_ugy_per_mas_1m=50.0, exposure_mas=10.0, distance_mm=np.array([500.0, 1000.0, 2000.0])
    )
    np.testing.assert_allclose(k, [2.0, 0.5, 0.125], rtol=1e-12)


def test_zero_mas_gives_zero_kerma() -> None:
    assert (
        float(
            air_kerma_at_distance_mgy(
                output_ugy_per_mas_1m=50.0, exposure_mas=0.0, distance_mm=1000
            )
        )
        == 0.0
    )


@pytest.mark.parametrize(
    ("kwargs", "match"),
    [
        ({"output_ugy_per_mas_1m": -1.0, "exposure_mas": 1.0, "distance_mm": 1000.0}, "output"),
        ({"output_ugy_per_mas_1m": 50.0, "exposure_mas": -1.0, "distance_mm": 1000.0}, "mas"),
        ({"output_ugy_per_mas_1m": 50.0, "exposure_mas": 1.0, "distance_mm": 0.0}, "distance"),
        ({"output_ugy_per_mas_1m": math.nan, "exposure_mas": 1.0, "distance_mm": 1.0}, "output"),
    ],
)
def test_bad_inputs_are_refused(kwargs: dict[str, float], match: str) -> None:
    with pytest.raises(ModelError, match=match):
        air_kerma_at_distance_mgy(**kwargs)


def test_backscatter_below_one_is_refused() -> None:
    with pytest.raises(ModelError, match="at least 1"):
        entrance_surface_air_kerma_mgy(incident_air_kerma_mgy=1.0, backscatter_factor=0.9)


def test_zero_field_area_is_refused() -> None:
    with pytest.raises(ModelError, match="field_area_cm2"):
        dap_gy_cm2(air_kerma_mgy=1.0, field_area_cm2=0.0)


def test_relative_uncertainty_of_product() -> None:
    # GUM eq. 12, by hand: y = Y · P · d⁻², u(Y)/Y = 0.05, u(d)/d = 0.01
    # -> sqrt(0.05² + (2 · 0.01)²) = sqrt(0.0025 + 0.0004) = 0.053852
    assert relative_uncertainty_of_product((0.05, 1), (0.0, 1), (0.01, -2)) == pytest.approx(
        0.0538516, rel=1e-6
    )
    assert relative_uncertainty_of_product() == 0.0
    with pytest.raises(ModelError):
        relative_uncertainty_of_product((-0.1, 1))


def test_compare_reported_keeps_both_and_the_ratio() -> None:
    cmp = compare_reported(
        quantity="dap_gy_cm2",
        unit="Gy·cm²",
        reported=1.1,
        reconstructed=1.0,
        reconstructed_relative_uncertainty=0.1,
        reported_source="(0018,115E)",
    )
    assert (cmp.reported, cmp.reconstructed) == (1.1, 1.0)
    assert cmp.ratio == pytest.approx(1.1)
    assert cmp.ratio_standard_uncertainty == pytest.approx(0.11)
    assert cmp.as_dict()["reported_source"] == "(0018,115E)"
    with pytest.raises(ModelError, match="reported dap"):
        compare_reported(quantity="dap", unit="Gy·cm²", reported=0.0, reconstructed=1.0)


# -- the field's mean kerma over its axis kerma (off-axis inverse-square law) ------------------
# P_KA is the integral of the air kerma over the beam area (ICRU Report 74); a point focus gives
# a point (x, y) of the plane at distance d the axis kerma times d^2 / (d^2 + x^2 + y^2). Checked
# against scipy's adaptive two-dimensional quadrature of that definition.
@pytest.mark.parametrize(
    ("width_cm", "height_cm", "distance_mm"),
    [(35.0, 43.0, 1000.0), (35.0, 43.0, 1150.0), (35.0, 43.0, 1800.0), (10.0, 10.0, 1000.0),
     (24.0, 30.0, 650.0), (40.0, 40.0, 1000.0), (1.0, 60.0, 1000.0)],
)  # fmt: skip
def test_off_axis_factor_by_quadrature(
    width_cm: float, height_cm: float, distance_mm: float
) -> None:
    from scipy.integrate import dblquad

    from beamaudit.model.dose import off_axis_factor

    d2 = (distance_mm / 10.0) ** 2
    a, b = width_cm / 2, height_cm / 2
    integral, _ = dblquad(lambda y, x: d2 / (d2 + x * x + y * y), -a, a, -b, b, epsabs=1e-12)
    expected = integral / (width_cm * height_cm)
    got = off_axis_factor(
        field_width_cm=width_cm, field_height_cm=height_cm, distance_mm=distance_mm
    )
    assert float(got) == pytest.approx(expected, rel=1e-9)


def test_off_axis_factor_is_below_one_and_tends_to_one_for_small_fields() -> None:
    from beamaudit.model.dose import off_axis_factor

    f = off_axis_factor(field_width_cm=[0.1, 10.0, 35.0], field_height_cm=[0.1, 10.0, 43.0],
                        distance_mm=1000.0)  # fmt: skip
    assert f[0] == pytest.approx(1.0, abs=1e-6)
    assert 1.0 > f[1] > f[2] > 0.97
