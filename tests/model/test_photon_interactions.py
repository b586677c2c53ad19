"""Interaction data for transport: cross-sections and angle sampling against xraylib and NIST."""

from __future__ import annotations

import itertools
import math

import numpy as np
import pytest
import xraylib

from beamaudit.model.attenuation import mass_attenuation_cm2_g, mass_energy_absorption_cm2_g
from beamaudit.model.breast_montecarlo import breast_tissue
from beamaudit.model.errors import ModelError
from beamaudit.model.photon_interactions import photon_interactions, scatter_directions

BREAST = breast_tissue(0.5)


@pytest.mark.parametrize("energy_kev", [8.0, 15.0, 20.0, 30.0, 50.0])
def test_total_attenuation_is_that_of_the_attenuation_module(energy_kev: float) -> None:
    # xraylib's CS_Total is photoabsorption + incoherent + coherent below 1 MeV
    data = photon_interactions(BREAST)
    e = np.array([energy_kev])
    mu_rho = data.at(data.mu_per_mm, e)[0] * 10.0 / BREAST.density_g_cm3
    assert mu_rho == pytest.approx(float(mass_attenuation_cm2_g(BREAST, e)[0]), rel=1e-6)
    mu_en = data.at(data.mu_en_cm2_g, e)[0]
    assert mu_en == pytest.approx(float(mass_energy_absorption_cm2_g(BREAST, e)[0]), rel=1e-6)


def test_water_attenuation_matches_nist() -> None:
    # NIST XCOM (NISTIR 5632 Table 4), liquid water, mu/rho at 20 and 30 keV: 0.8096, 0.3756
    data = photon_interactions("water")
    mu = data.at(data.mu_per_mm, np.array([20.0, 30.0])) * 10.0
    assert mu == pytest.approx([0.8096, 0.3756], rel=0.01)


def _xraylib_bin_probabilities(energy_kev: float, edges: np.ndarray, coherent: bool) -> np.ndarray:
    """P(cos theta in each bin) from xraylib's differential cross-sections of the mixture."""
    nodes, weights = np.polynomial.legendre.leggauss(24)
    dcs = xraylib.DCS_Rayl if coherent else xraylib.DCS_Compt
    probs = []
    for lo, hi in itertools.pairwise(edges):
        cos = 0.5 * (hi - lo) * nodes + 0.5 * (hi + lo)
        total = 0.0
        for z, w in zip(BREAST.atomic_numbers, BREAST.mass_fractions, strict=True):
            values = [dcs(z, energy_kev, math.acos(float(c))) for c in cos]
            total += w * 0.5 * (hi - lo) * float(np.dot(weights, values))
        probs.append(2.0 * math.pi * total)
    p = np.asarray(probs)
    return p / p.sum()


# xraylib 4.3 DCS_Compt (Klein-Nishina x incoherent scattering function) and DCS_Rayl
# (Thomson x form factor squared), per element, mixed by mass fraction
@pytest.mark.parametrize(
    ("energy_kev", "coherent"),
    [(12.0, False), (20.0, False), (45.0, False), (12.0, True), (20.0, True), (45.0, True)],
)
def test_scattering_angles_follow_xraylib(energy_kev: float, coherent: bool) -> None:
    data = photon_interactions(BREAST)
    n = 200_000
    rng = np.random.default_rng(11)
    cos = 1.0 - data.sample_t(np.full(n, energy_kev), rng, coherent=coherent)
    edges = (
        np.linspace(-1.0, 1.0, 21)
        if not coherent
        else np.concatenate((np.linspace(-1.0, 0.8, 10), np.linspace(0.85, 1.0, 11)[1:]))
    )
    counts, _ = np.histogram(cos, bins=edges)
    expected = _xraylib_bin_probabilities(energy_kev, edges, coherent)
    z = (counts - n * expected) / np.sqrt(n * expected * (1.0 - expected) + 1.0)
    assert np.max(np.abs(z)) < 4.5, f"bins off by {np.round(z, 1)} sigma"


def test_scatter_directions_turn_by_the_given_angle() -> None:
    rng = np.random.default_rng(5)
    d = rng.normal(size=(1000, 3))
    d /= np.linalg.norm(d, axis=1)[:, None]
    d[0] = (0.0, 0.0, 1.0)  # along an axis
    cos = rng.uniform(-1.0, 1.0, 1000)
    out = scatter_directions(d, cos, rng.uniform(0.0, 2.0 * math.pi, 1000))
    assert np.allclose(np.linalg.norm(out, axis=1), 1.0)
    assert np.allclose(np.sum(out * d, axis=1), cos, atol=1e-12)


def test_azimuths_are_uniform() -> None:
    # turning (0, 0, 1) by 90 degrees with uniform phi spreads the new directions evenly
    rng = np.random.default_rng(6)
    n = 100_000
    out = scatter_directions(
        np.tile([0.0, 0.0, 1.0], (n, 1)), np.zeros(n), rng.uniform(0.0, 2.0 * math.pi, n)
    )
    assert abs(out[:, 0].mean()) < 0.01 and abs(out[:, 1].mean()) < 0.01


def test_energy_range_is_checked() -> None:
    with pytest.raises(ModelError, match="2-150 keV"):
        photon_interactions("water", max_kev=500.0)
