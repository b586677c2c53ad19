"""Interaction data against the NIST tables, material names, the mu_en ratio helper."""

from __future__ import annotations

import numpy as np
import pytest

from beamaudit.model.attenuation import (
    energy_bin_centres_kev,
    energy_bin_edges_kev,
    grid_linear_attenuation_per_mm,
    linear_attenuation_per_mm,
    mass_attenuation_cm2_g,
    mass_energy_absorption_cm2_g,
    material,
    mu_en_ratio,
)
from beamaudit.model.errors import ModelError

ENERGIES_KEV = (10.0, 15.0, 20.0, 30.0, 40.0, 50.0, 60.0, 80.0, 100.0, 150.0)

# NIST XCOM, Hubbell & Seltzer NISTIR 5632 (NIST SRD 126 v1.4, 2004), Tables 3 and 4, as copied
# in PUBLISHED-VALUES section a: (mu/rho ; mu_en/rho) in cm^2/g at ENERGIES_KEV.
NIST = {
    # dry air (near sea level), Table 4
    "air": (
        (5.120, 1.614, 0.7779, 0.3538, 0.2485, 0.2080, 0.1875, 0.1662, 0.1541, 0.1356),
        (4.742, 1.334, 0.5389, 0.1537, 0.06833, 0.04098, 0.03041, 0.02407, 0.02325, 0.02496),
    ),
    # liquid water, Table 4
    "water": (
        (5.329, 1.673, 0.8096, 0.3756, 0.2683, 0.2269, 0.2059, 0.1837, 0.1707, 0.1505),
        (4.944, 1.374, 0.5503, 0.1557, 0.06947, 0.04223, 0.03190, 0.02597, 0.02546, 0.02764),
    ),
    # aluminium Z=13, Table 3
    "Al": (
        (26.23, 7.955, 3.441, 1.128, 0.5685, 0.3681, 0.2778, 0.2018, 0.1704, 0.1378),
        (25.43, 7.487, 3.094, 0.8778, 0.3601, 0.1840, 0.1099, 0.05511, 0.03794, 0.02827),
    ),
    # copper Z=29, Table 3
    "Cu": (
        (215.9, 74.05, 33.79, 10.92, 4.862, 2.613, 1.593, 0.7630, 0.4584, 0.2217),
        (148.4, 57.88, 27.88, 9.349, 4.163, 2.192, 1.290, 0.5581, 0.2949, 0.1027),
    ),
    # ICRU-44 soft tissue, Table 4 ("Tissue, Soft")
    "soft_tissue": (
        (5.379, 1.699, 0.8230, 0.3790, 0.2688, 0.2264, 0.2048, 0.1823, 0.1693, 0.1492),
        (4.987, 1.402, 0.5663, 0.1616, 0.07216, 0.04360, 0.03264, 0.02617, 0.02545, 0.02745),
    ),
    # ICRU four-component soft tissue, Table 4
    "soft_tissue_icru4": (
        (4.937, 1.558, 0.7616, 0.3604, 0.2609, 0.2223, 0.2025, 0.1813, 0.1688, 0.1490),
        (4.564, 1.266, 0.5070, 0.1438, 0.06474, 0.03987, 0.03051, 0.02530, 0.02501, 0.02732),
    ),
}

# Tolerances. mu/rho: xraylib and NIST share the same photon cross-section lineage, so 0.5 %
# (four-digit tables, observed <= 0.1 %). mu_en/rho: the issue asks 2 % for air and water; we
# hold air, water and tissues to 0.5 % (observed <= 0.15 %), Al to 1 % (observed 0.3 %). Copper
# keeps 3 %: its K fluorescence at 10-20 keV is treated slightly differently from Seltzer's
# (observed -2.3 % at 10 keV, within 0.9 % from 20 keV up).
MU_EN_TOLERANCE = {
    "air": 0.005,
    "water": 0.005,
    "soft_tissue": 0.005,
    "soft_tissue_icru4": 0.005,
    "Al": 0.01,
    "Cu": 0.03,
}

CASES = [(name, i) for name in NIST for i in range(len(ENERGIES_KEV))]


@pytest.fixture(scope="module")
def computed() -> dict[str, tuple[np.ndarray, np.ndarray]]:
    """Both coefficients at all tabulated energies, one vectorised call per material."""
    energies = np.array(ENERGIES_KEV)
    return {
        name: (mass_attenuation_cm2_g(name, energies), mass_energy_absorption_cm2_g(name, energies))
        for name in NIST
    }


@pytest.mark.parametrize(
    ("name", "index"), CASES, ids=[f"{n}-{ENERGIES_KEV[i]:g}keV" for n, i in CASES]
)
def test_mass_attenuation_matches_nist(
    name: str, index: int, computed: dict[str, tuple[np.ndarray, np.ndarray]]
) -> None:
    # NIST XCOM, Hubbell & Seltzer NISTIR 5632 (section a of PUBLISHED-VALUES)
    expected = NIST[name][0][index]
    got = float(computed[name][0][index])
    assert got == pytest.approx(expected, rel=0.005)


@pytest.mark.parametrize(
    ("name", "index"), CASES, ids=[f"{n}-{ENERGIES_KEV[i]:g}keV" for n, i in CASES]
)
def test_mass_energy_absorption_matches_nist(
    name: str, index: int, computed: dict[str, tuple[np.ndarray, np.ndarray]]
) -> None:
    # NIST, Hubbell & Seltzer NISTIR 5632 (section a of PUBLISHED-VALUES)
    expected = NIST[name][1][index]
    got = float(computed[name][1][index])
    assert got == pytest.approx(expected, rel=MU_EN_TOLERANCE[name])


@pytest.mark.parametrize(
    ("energy_kev", "mu_rho"),
    [(20.0, 65.73), (30.0, 22.73), (60.0, 3.713), (80.0, 7.810), (100.0, 4.438), (150.0, 1.581)],
)
def test_tungsten_mass_attenuation_matches_nist(energy_kev: float, mu_rho: float) -> None:
    # NIST XCOM, Hubbell & Seltzer NISTIR 5632 Table 3, tungsten Z=74 (the anode's self-absorption)
    assert float(mass_attenuation_cm2_g("W", energy_kev)) == pytest.approx(mu_rho, rel=0.005)


def test_tungsten_k_edge_jump_matches_nist() -> None:
    # NISTIR 5632 Table 3, W just below / above the K edge at 69.525 keV: 2.552 / 11.23 cm^2/g
    below, above = mass_attenuation_cm2_g("W", np.array([69.52, 69.53]))
    assert below == pytest.approx(2.552, rel=0.01)
    assert above == pytest.approx(11.23, rel=0.01)


@pytest.mark.parametrize(
    ("alias", "key"),
    [
        ("Al", "Al"),
        ("aluminium", "Al"),
        ("aluminum", "Al"),
        ("ALUMINIUM", "Al"),
        ("Cu", "Cu"),
        ("copper", "Cu"),
        ("Be", "Be"),
        ("Mo", "Mo"),
        ("Rh", "Rh"),
        ("Ag", "Ag"),
        ("glass", "glass"),
        ("oil", "oil"),
        ("air", "air"),
        ("water", "water"),
        ("soft_tissue", "soft_tissue"),
    ],
)
def test_material_aliases(alias: str, key: str) -> None:
    assert material(alias).key == key


def test_unknown_material_is_a_clear_error() -> None:
    with pytest.raises(ModelError, match="unknown material 'kryptonite'"):
        material("kryptonite")


def test_mass_fractions_sum_to_one() -> None:
    for name in ("glass", "oil", "air", "water", "soft_tissue"):
        assert sum(material(name).mass_fractions) == pytest.approx(1.0)


def test_bad_energies_rejected() -> None:
    with pytest.raises(ModelError, match="positive"):
        mass_attenuation_cm2_g("Al", [10.0, 0.0])


def test_linear_coefficient_uses_density() -> None:
    # NISTIR 5632: Al density 2.699 g/cm^3; mu in 1/mm = mu/rho * rho / 10
    mu = float(linear_attenuation_per_mm("Al", 30.0))
    assert mu == pytest.approx(1.128 * 2.699 / 10.0, rel=0.005)


def test_energy_grid_is_half_kev_or_finer_and_covers_150_kev() -> None:
    edges = energy_bin_edges_kev()
    assert np.max(np.diff(edges)) <= 0.5
    assert edges[-1] == pytest.approx(150.0)
    assert energy_bin_centres_kev().size == edges.size - 1
    assert grid_linear_attenuation_per_mm("Cu").shape == energy_bin_centres_kev().shape


@pytest.mark.parametrize(
    ("energy_kev", "ratio"),
    [(20.0, 1.051), (30.0, 1.051), (40.0, 1.056), (60.0, 1.073), (80.0, 1.087), (100.0, 1.095)],
)
def test_mu_en_ratio_monoenergetic_matches_nist_ratio(energy_kev: float, ratio: float) -> None:
    # derived from NISTIR 5632 (PUBLISHED-VALUES section a): ICRU-44 soft tissue / air
    got = mu_en_ratio([energy_kev], [1.0], "soft_tissue", "air")
    assert got == pytest.approx(ratio, abs=0.003)


def test_mu_en_ratio_weights_a_spectrum() -> None:
    # two energies, equal energy fluence: ratio of the sums (NISTIR 5632 values at 30 and 80 keV)
    got = mu_en_ratio([30.0, 80.0], [1.0, 1.0], "water", "air")
    expected = (0.1557 + 0.02597) / (0.1537 + 0.02407)
    assert got == pytest.approx(expected, rel=0.003)


def test_mu_en_ratio_rejects_mismatched_shapes() -> None:
    with pytest.raises(ModelError, match="same shape"):
        mu_en_ratio([20.0, 30.0], [1.0], "water", "air")
