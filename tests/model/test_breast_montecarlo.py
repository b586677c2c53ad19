"""The breast Monte Carlo on answers known without it: pure absorber, thin slab, energy balance."""

from __future__ import annotations

import math

import numpy as np
import pytest

from beamaudit.model.attenuation import (
    mass_attenuation_cm2_g,
    mass_energy_absorption_cm2_g,
    material,
)
from beamaudit.model.breast_montecarlo import (
    BreastModel,
    breast_tissue,
    simulate_glandular_dose,
)
from beamaudit.model.errors import ModelError


def _gauss(n: int, a: float, b: float) -> tuple[np.ndarray, np.ndarray]:
    x, w = np.polynomial.legendre.leggauss(n)
    return 0.5 * (b - a) * x + 0.5 * (b + a), 0.5 * (b - a) * w


def primary_dgn(model: BreastModel, energy_kev: float) -> float:
    """D_G/K of the primary photons alone, by quadrature over the central region.

    A ray from the focus (above the chest-wall edge) to a point of the central region at
    radius rho and height z enters through the upper face and crosses the upper shell (s) and
    the central region above the point (T - s - z), each divided by the ray's cosine; the
    fluence falls as 1/r² (inverse-square law). Relative to the air kerma at the reference
    point r_ref: D/K = (mu_en/rho)_g / (mu_en/rho)_air x mean over the region of
    (r_ref²/r²) exp(-path attenuation).
    """
    e = np.array([energy_kev])
    mix = breast_tissue(model.glandularity)
    adipose = material("breast_adipose")
    mu_mix = float(mass_attenuation_cm2_g(mix, e)[0]) * mix.density_g_cm3 / 10.0
    mu_adipose = float(mass_attenuation_cm2_g(adipose, e)[0]) * adipose.density_g_cm3 / 10.0
    f, t, s = model.focus_to_support_mm, model.thickness_mm, model.shell_mm
    rc = model.radius_mm - s
    rho, w_rho = _gauss(64, 0.0, rc)
    z, w_z = _gauss(64, s, t - s)
    rr, zz = np.meshgrid(rho, z, indexing="ij")
    r2 = rr**2 + (f - zz) ** 2
    cos = (f - zz) / np.sqrt(r2)
    attenuation = np.exp(-(mu_adipose * s + mu_mix * (t - s - zz)) / cos)
    r_ref2 = model.reference_distance_mm() ** 2
    integral = math.pi * float(np.sum(np.outer(w_rho * rho, w_z) * attenuation * r_ref2 / r2))
    mean = integral / model.central_volume_mm3
    ratio = mass_energy_absorption_cm2_g("breast_glandular", e) / mass_energy_absorption_cm2_g(
        "air", e
    )
    return mean * float(ratio[0])


@pytest.mark.parametrize(
    ("thickness_mm", "glandularity", "energy_kev"),
    [(50.0, 0.5, 20.0), (20.0, 0.001, 12.0), (110.0, 1.0, 40.0)],
)
def test_pure_absorber_limit_is_the_primary_quadrature(
    thickness_mm: float, glandularity: float, energy_kev: float
) -> None:
    model = BreastModel(thickness_mm, glandularity)
    run = simulate_glandular_dose(
        [energy_kev], model, photons_per_energy=100_000, seed=3, scatter=False
    )
    expected = primary_dgn(model, energy_kev)
    assert run.dgn[0] == pytest.approx(expected, abs=4.0 * run.dgn_uncertainty[0])


def test_thin_slab_dose_is_the_primary_kerma() -> None:
    # a 0.1 mm slab without shell or support scatters under 1 % of its primary (estimate:
    # scattering probability mu_s t ~ 0.2 %, times a path about four times the primary's)
    model = BreastModel(0.1, 0.5, shell_mm=0.0, support_mm=0.0)
    for energy in (15.0, 30.0, 50.0):
        run = simulate_glandular_dose([energy], model, photons_per_energy=40_000, seed=4)
        assert run.dgn[0] == pytest.approx(primary_dgn(model, energy), rel=0.015)


def test_scatter_in_a_slab_grows_with_its_thickness() -> None:
    excess = []
    for t in (0.5, 2.0, 8.0):
        model = BreastModel(t, 0.5, shell_mm=0.0, support_mm=0.0)
        run = simulate_glandular_dose([30.0], model, photons_per_energy=40_000, seed=5)
        excess.append(run.dgn[0] / primary_dgn(model, 30.0) - 1.0)
    assert 0.0 < excess[0] < excess[1] < excess[2]


def test_analog_histories_conserve_energy_exactly() -> None:
    model = BreastModel(45.0, 0.3)
    run = simulate_glandular_dose(
        [10.0, 20.0, 35.0, 50.0], model, photons_per_energy=5_000, seed=6, analog=True
    )
    out = (
        run.deposited_breast_kev
        + run.deposited_support_kev
        + run.escaped_up_kev
        + run.escaped_down_kev
    )
    assert out == pytest.approx(run.incident_kev, rel=1e-9)
    assert np.all(run.deposited_support_kev > 0.0) and np.all(run.escaped_up_kev > 0.0)


def test_implicit_capture_conserves_energy_on_average() -> None:
    model = BreastModel(45.0, 0.3)
    run = simulate_glandular_dose([20.0, 40.0], model, photons_per_energy=40_000, seed=7)
    out = (
        run.deposited_breast_kev
        + run.deposited_support_kev
        + run.escaped_up_kev
        + run.escaped_down_kev
    )
    assert out == pytest.approx(run.incident_kev, rel=0.005)


def test_collision_and_track_length_estimators_agree() -> None:
    model = BreastModel(60.0, 0.25)
    run = simulate_glandular_dose(
        [12.0, 18.0, 25.0, 35.0, 50.0], model, photons_per_energy=30_000, seed=8
    )
    spread = np.hypot(run.dgn_uncertainty, run.dgn_collision_uncertainty)
    assert np.all(np.abs(run.dgn_collision - run.dgn) < 4.0 * spread + 0.002 * run.dgn)


def test_oblique_source_cone_agrees_with_the_standard_projection() -> None:
    # the tomosynthesis source (a cone holding the whole breast) at a negligible angle gives
    # the standard projection's answer
    model = BreastModel(50.0, 0.5)
    standard = simulate_glandular_dose([20.0], model, photons_per_energy=60_000, seed=9)
    cone = simulate_glandular_dose(
        [20.0], model, photons_per_energy=150_000, seed=10, tube_angle_deg=1e-9
    )
    spread = math.hypot(standard.dgn_uncertainty[0], cone.dgn_uncertainty[0])
    assert cone.dgn[0] == pytest.approx(standard.dgn[0], abs=4.0 * spread)


def test_dose_per_kerma_rises_with_energy_and_falls_with_thickness_and_glandularity() -> None:
    # common practice (Dance 1990: g rises with HVL, falls with thickness; Dance et al. 2000:
    # c < 1 above 50 % glandularity)
    energies = [12.0, 18.0, 28.0]
    thin = simulate_glandular_dose(
        energies, BreastModel(30.0, 0.5), photons_per_energy=8000, seed=1
    )
    thick = simulate_glandular_dose(
        energies, BreastModel(80.0, 0.5), photons_per_energy=8000, seed=2
    )
    dense = simulate_glandular_dose(
        energies, BreastModel(30.0, 1.0), photons_per_energy=8000, seed=3
    )
    assert np.all(np.diff(thin.dgn) > 0) and np.all(np.diff(thick.dgn) > 0)
    assert np.all(thick.dgn < thin.dgn) and np.all(dense.dgn < thin.dgn)


def test_breast_tissue_mixes_by_mass() -> None:
    gland, adipose = material("breast_glandular"), material("breast_adipose")
    assert breast_tissue(1.0).density_g_cm3 == pytest.approx(gland.density_g_cm3)
    assert breast_tissue(0.0).density_g_cm3 == pytest.approx(adipose.density_g_cm3)
    half = breast_tissue(0.5)
    assert 1.0 / half.density_g_cm3 == pytest.approx(
        0.5 / gland.density_g_cm3 + 0.5 / adipose.density_g_cm3
    )
    assert sum(half.mass_fractions) == pytest.approx(1.0)


def test_hammerstein_adipose_attenuates_like_icrp_adipose() -> None:
    # NIST/ICRP adipose tissue as shipped with xraylib: mu/rho within 1 % at 10-40 keV
    import xraylib

    from beamaudit.model.attenuation import Material

    icrp = xraylib.GetCompoundDataNISTByName("Adipose Tissue (ICRP)")
    reference = Material(
        "icrp_adipose",
        "ICRP adipose",
        tuple(icrp["Elements"]),
        tuple(icrp["massFractions"]),
        icrp["density"],
        "xraylib",
    )
    e = np.array([10.0, 15.0, 20.0, 30.0, 40.0])
    ratio = mass_attenuation_cm2_g("breast_adipose", e) / mass_attenuation_cm2_g(reference, e)
    assert ratio == pytest.approx(np.ones(5), abs=0.01)


@pytest.mark.parametrize(
    ("call", "match"),
    [
        (lambda: breast_tissue(1.5), "outside 0-1"),
        (lambda: BreastModel(8.0, 0.5), "thicker and wider"),
        (lambda: BreastModel(50.0, 0.5, focus_to_support_mm=60.0), "50 mm above"),
        (
            lambda: simulate_glandular_dose(
                [100.0], BreastModel(50.0, 0.5), photons_per_energy=10, seed=1
            ),
            "5-60 keV",
        ),
        (
            lambda: simulate_glandular_dose(
                [20.0], BreastModel(50.0, 0.5), photons_per_energy=10, seed=1, tube_angle_deg=80.0
            ),
            "tube angle",
        ),
    ],
)
def test_bad_input_is_a_model_error(call: object, match: str) -> None:
    with pytest.raises(ModelError, match=match):
        call()  # type: ignore[operator]
