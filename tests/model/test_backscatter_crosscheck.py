"""The Monte Carlo backscatter check: its physics on known answers, then the stored check file.

Part (a) checks ``beamaudit.model.montecarlo_backscatter`` on cases whose answer is known without
it (xraylib's Klein-Nishina and partial cross-sections, NIST XCOM attenuation of water, the
inverse-square law, a phantom that cannot scatter). Part (b) reads the stored result of
``benchmarks/backscatter_crosscheck.py`` (``model/data/backscatter_water_mc_check.csv``) and
holds the shipped table to the trust level the reference notes give it: every cell within
max(5 %, 3 sigma) of the Monte Carlo (PUBLISHED-VALUES.md section d: B from memory, not to be
relied on tighter than about 5 %).
"""

from __future__ import annotations

import csv
import itertools
import math
from importlib import resources

import numpy as np
import pytest
import xraylib

from beamaudit.model.backscatter import load_backscatter_table
from beamaudit.model.errors import ModelError
from beamaudit.model.montecarlo_backscatter import (
    SlabPhantom,
    field_solid_angle_sr,
    interaction_data,
    primary_fluence_through_disc,
    sample_scatter_cosines,
    simulate_backscatter,
    spectrum_for_hvl,
)

# ---------------------------------------------------------------------------------------------
# (a) physics of the Monte Carlo


def _xraylib_kn_bin_probabilities(energy_kev: float, edges: np.ndarray) -> np.ndarray:
    """P(cos theta in each bin) from xraylib's DCS_KN (barn/sr) over its CS_KN (barn)."""
    nodes, weights = np.polynomial.legendre.leggauss(32)
    probs = []
    for lo, hi in itertools.pairwise(edges):
        cos = 0.5 * (hi - lo) * nodes + 0.5 * (hi + lo)
        dcs = [xraylib.DCS_KN(energy_kev, math.acos(float(c))) for c in cos]
        probs.append(2.0 * math.pi * 0.5 * (hi - lo) * float(np.dot(weights, dcs)))
    return np.asarray(probs) / xraylib.CS_KN(energy_kev)


# Klein & Nishina, Z Phys 52:853 (1929), as coded in xraylib 4.3 (DCS_KN, CS_KN)
@pytest.mark.parametrize("energy_kev", [20.0, 60.0, 140.0])
def test_klein_nishina_sampling_follows_xraylib(energy_kev: float) -> None:
    n = 200_000
    cos = sample_scatter_cosines(energy_kev, n, seed=7, binding=False)
    edges = np.linspace(-1.0, 1.0, 21)
    counts, _ = np.histogram(cos, bins=edges)
    expected = _xraylib_kn_bin_probabilities(energy_kev, edges)
    assert expected.sum() == pytest.approx(1.0, abs=1e-6)
    z = (counts - n * expected) / np.sqrt(n * expected * (1.0 - expected))
    assert np.max(np.abs(z)) < 4.5, f"bins off by {np.round(z, 1)} sigma"
    chi2 = float(np.sum(z**2))
    assert chi2 < 45.0  # 20 bins (19 dof): p < 0.001 above 43.8


# xraylib 4.3 CS_KN (barn per electron); the table integral over 4 pi is a quadrature
@pytest.mark.parametrize("energy_kev", [10.0, 30.0, 60.0, 100.0, 150.0])
def test_klein_nishina_total_cross_section_matches_xraylib(energy_kev: float) -> None:
    data = interaction_data("water", binding=False)
    water = xraylib.GetCompoundDataNISTByName("Water, Liquid")
    electrons_per_gram = sum(
        w * z / xraylib.AtomicWeight(z) * 6.02214076e23
        for z, w in zip(water["Elements"], water["massFractions"], strict=True)
    )
    row = int(energy_kev - 1.0)  # table rows every 1 keV from 1 keV
    assert data.table_kev[row] == energy_kev
    per_electron_barn = data.incoherent_norm[row] / electrons_per_gram / 1e-24
    assert per_electron_barn == pytest.approx(xraylib.CS_KN(energy_kev), rel=2e-4)


# Mean energy kept by the scattered photon, <E'/E> over the Klein-Nishina distribution
# (xraylib DCS_KN, CS_KN): checks energy and angle together.
def test_klein_nishina_mean_energy_ratio() -> None:
    energy = 100.0
    k = energy / 510.99895  # m_e c^2, CODATA 2018
    cos = sample_scatter_cosines(energy, 200_000, seed=11, binding=False)
    ratio = 1.0 / (1.0 + k * (1.0 - cos))
    nodes, weights = np.polynomial.legendre.leggauss(64)
    dcs = np.array([xraylib.DCS_KN(energy, math.acos(float(c))) for c in nodes])
    expected = float(
        2 * math.pi * np.dot(weights, dcs / (1 + k * (1 - nodes))) / xraylib.CS_KN(energy)
    )
    sigma = float(np.std(ratio)) / math.sqrt(ratio.size)
    assert abs(float(np.mean(ratio)) - expected) < 4 * sigma


# xraylib 4.3 CS_Compt and CS_Rayl of the NIST water composition: the angular tables (Klein-
# Nishina x S(x), Thomson x F(x)^2) integrate to xraylib's totals within 1 %
@pytest.mark.parametrize("energy_kev", [20.0, 40.0, 60.0, 100.0, 150.0])
def test_angular_tables_integrate_to_xraylib_partial_cross_sections(energy_kev: float) -> None:
    data = interaction_data("water")
    water = xraylib.GetCompoundDataNISTByName("Water, Liquid")
    pairs = list(zip(water["Elements"], water["massFractions"], strict=True))
    compt = sum(w * xraylib.CS_Compt(z, energy_kev) for z, w in pairs)
    rayl = sum(w * xraylib.CS_Rayl(z, energy_kev) for z, w in pairs)
    row = int(energy_kev - 1.0)
    assert data.incoherent_norm[row] == pytest.approx(compt, rel=0.01)
    assert data.coherent_norm[row] == pytest.approx(rayl, rel=0.01)


# NIST XCOM, Hubbell & Seltzer NISTIR 5632 Table 4, water, liquid: mu/rho in cm^2/g
# (PUBLISHED-VALUES.md section a); density 1.000 g/cm^3
@pytest.mark.parametrize(
    ("energy_kev", "mu_rho"),
    [(20.0, 0.8096), (30.0, 0.3756), (40.0, 0.2683), (50.0, 0.2269), (60.0, 0.2059),
     (80.0, 0.1837), (100.0, 0.1707), (150.0, 0.1505)],
)  # fmt: skip
def test_attenuation_of_water_matches_nist(energy_kev: float, mu_rho: float) -> None:
    data = interaction_data("water")
    mu = float(data.interp(data.mu_per_cm, np.array([energy_kev]))[0])
    assert mu / data.density_g_cm3 == pytest.approx(mu_rho, rel=0.01)


# Inverse-square law for a point source: the fluence per emitted photon through an on-axis
# disc of radius r at distance D is Omega_disc / (Omega_field pi r^2), Omega_disc =
# 2 pi (1 - D / sqrt(D^2 + r^2)) (exact solid angle of a disc), i.e. 1 / (Omega_field D^2)
@pytest.mark.parametrize("distance_cm", [50.0, 100.0, 200.0])
def test_primary_fluence_follows_inverse_square(distance_cm: float) -> None:
    side, fsd, r = 10.0, 100.0, 1.0
    phi, u = primary_fluence_through_disc(
        field_side_cm=side,
        fsd_cm=fsd,
        plane_distance_cm=distance_cm,
        disc_radius_cm=r,
        n_photons=400_000,
        seed=5,
    )
    omega_field = field_solid_angle_sr(side, fsd)
    omega_disc = 2 * math.pi * (1 - distance_cm / math.hypot(distance_cm, r))
    expected = omega_disc / (omega_field * math.pi * r * r)
    assert abs(phi - expected) < 4 * u
    assert expected * distance_cm**2 * omega_field == pytest.approx(1.0, rel=1e-3)


def test_field_solid_angle_small_field_limit() -> None:
    # a small field subtends its area over the distance squared (common practice)
    assert field_solid_angle_sr(1.0, 100.0) == pytest.approx(1.0 / 100.0**2, rel=1e-4)


@pytest.fixture(scope="module")
def beam_3mm():
    beam, al = spectrum_for_hvl(3.0, 80.0)
    return beam, al


def test_spectrum_has_the_requested_hvl(beam_3mm) -> None:
    beam, al = beam_3mm
    assert beam.hvl1_mm_al == pytest.approx(3.0, abs=1e-3)
    # IEC 61267:2005 RQR 6 (80 kV, HVL 3.01 mm Al) needs about 2.5 mm Al total: same order
    assert 2.0 < al < 3.2


def test_phantom_that_cannot_scatter_gives_b_of_one(beam_3mm) -> None:
    # B = K_e / K_i = 1 exactly with nothing to scatter back (definition, ICRU Report 74)
    beam, _ = beam_3mm
    result = simulate_backscatter(
        beam.energies_kev,
        beam.fluence_per_mas_1m,
        field_side_cm=20.0,
        n_photons=5000,
        seed=1,
        phantom=SlabPhantom(depth_cm=0.0),
    )
    assert result.backscatter_factor == 1.0
    assert result.standard_uncertainty == 0.0
    assert result.collisions_per_photon == 0.0


def test_b_tends_to_one_for_a_pencil_beam(beam_3mm) -> None:
    # a field of side s: primary fluence at its centre grows as 1/s^2, the scatter there as
    # 1/s, so B - 1 -> 0 linearly as s -> 0 (pencil-beam limit)
    beam, _ = beam_3mm
    b = [
        simulate_backscatter(
            beam.energies_kev, beam.fluence_per_mas_1m, field_side_cm=s, n_photons=50_000, seed=2
        ).backscatter_factor
        for s in (0.2, 1.0, 5.0)
    ]
    assert 1.0 < b[0] < 1.02
    assert b[0] < b[1] < b[2]


def test_point_and_disc_estimators_agree_and_primary_is_normalised(beam_3mm) -> None:
    # two independent tallies of the same kerma (module docstring): next-event point estimator
    # with the exact primary, and surface crossings of a disc for primary and scatter alike
    beam, _ = beam_3mm
    result = simulate_backscatter(
        beam.energies_kev,
        beam.fluence_per_mas_1m,
        field_side_cm=15.0,
        n_photons=300_000,
        seed=3,
    )
    gap = result.backscatter_factor - result.disc_backscatter_factor
    assert abs(gap) < 4 * math.hypot(result.standard_uncertainty, result.disc_standard_uncertainty)
    assert abs(result.disc_primary_kerma - result.primary_kerma) < (
        4 * result.disc_primary_kerma_uncertainty
    )
    assert abs(result.exclusion_bias_estimate) < 0.005


def test_same_seed_same_answer(beam_3mm) -> None:
    beam, _ = beam_3mm
    runs = [
        simulate_backscatter(
            beam.energies_kev, beam.fluence_per_mas_1m, field_side_cm=10.0, n_photons=2000, seed=9
        )
        for _ in range(2)
    ]
    assert runs[0] == runs[1]


def test_bad_input_is_refused(beam_3mm) -> None:
    beam, _ = beam_3mm
    e, f = beam.energies_kev, beam.fluence_per_mas_1m
    with pytest.raises(ModelError, match="positive number of cm"):
        simulate_backscatter(e, f, field_side_cm=-1.0, n_photons=10, seed=1)
    with pytest.raises(ModelError, match="larger than the phantom"):
        simulate_backscatter(e, f, field_side_cm=40.0, n_photons=10, seed=1)
    with pytest.raises(ModelError, match="same length"):
        simulate_backscatter(e[:3], f, field_side_cm=10.0, n_photons=10, seed=1)
    with pytest.raises(ModelError, match="no Al filtration"):
        spectrum_for_hvl(8.0, 40.0)


# ---------------------------------------------------------------------------------------------
# (b) the stored Monte Carlo check against the shipped table

CHECK_FILE = "backscatter_water_mc_check.csv"
# PUBLISHED-VALUES.md section d: the shipped B (from memory) is trusted to about 5 %
TRUST_RELATIVE = 0.05
TRUST_SIGMAS = 3.0


def _read_check() -> tuple[dict[str, str], list[dict[str, str]]]:
    text = resources.files("beamaudit.model.data").joinpath(CHECK_FILE).read_text("utf-8")
    meta: dict[str, str] = {}
    body: list[str] = []
    for line in text.splitlines():
        if line.startswith("#"):
            key, _, value = line[1:].partition(":")
            meta[key.strip()] = value.strip()
        elif line.strip():
            body.append(line)
    return meta, list(csv.DictReader(body))


def test_check_file_describes_itself() -> None:
    meta, rows = _read_check()
    for key in ("method", "spectra", "photons_per_cell", "seed", "date", "software"):
        assert meta.get(key), f"check file header lacks {key!r}"
    assert "xraylib" in meta["software"] and "numpy" in meta["software"]
    assert all(float(r["u_mc"]) > 0 for r in rows)


def test_check_file_covers_the_shipped_table_as_it_is() -> None:
    table = load_backscatter_table()
    _, rows = _read_check()
    ref = {
        (float(r["hvl_mm_al"]), float(r["field_side_cm"])): r
        for r in rows
        if r["variant"] == "reference"
    }
    missing, stale = [], []
    for i, hvl in enumerate(table.hvl_mm_al):
        for j, side in enumerate(table.field_side_cm):
            row = ref.get((float(hvl), float(side)))
            if row is None:
                missing.append(f"HVL {hvl:g} mm Al x {side:g} cm")
            elif float(row["b_shipped"]) != float(table.factors[i, j]):
                stale.append(f"HVL {hvl:g} x {side:g} cm ({row['b_shipped']} in the check file)")
    assert not missing, "cells without a Monte Carlo check (rerun the benchmark): " + "; ".join(
        missing
    )
    assert not stale, "the table changed since the check was run: " + "; ".join(stale)
    for row in ref.values():
        # the spectrum of each row has the row's HVL
        assert float(row["hvl_model_mm_al"]) == pytest.approx(float(row["hvl_mm_al"]), abs=2e-3)


def test_shipped_table_within_trust_level_of_monte_carlo() -> None:
    _, rows = _read_check()
    off = []
    for r in rows:
        if r["variant"] != "reference":
            continue
        b_mc, u_mc, b_ship = float(r["b_mc"]), float(r["u_mc"]), float(r["b_shipped"])
        allowed = max(TRUST_RELATIVE * b_mc, TRUST_SIGMAS * u_mc)
        if abs(b_ship - b_mc) > allowed:
            off.append(
                f"HVL {r['hvl_mm_al']} mm Al x {r['field_side_cm']} cm: shipped {b_ship:.3f}, "
                f"Monte Carlo {b_mc:.4f} +- {u_mc:.4f} ({100 * (b_ship - b_mc) / b_mc:+.1f} %)"
            )
    assert not off, "shipped B outside max(5 %, 3 sigma) of the Monte Carlo: " + "; ".join(off)
