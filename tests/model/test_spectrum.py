"""The thick-target spectrum against Kramers, Duane-Hunt, xraylib's K-lines and common practice."""

from __future__ import annotations

import numpy as np
import pytest
import xraylib

from beamaudit.model.errors import ModelError
from beamaudit.model.filtration import FilterSpec, transmission
from beamaudit.model.spectrum import (
    BREMSSTRAHLUNG_EFFICIENCY_PER_VOLT,
    GREEN_COSSLETT_EXPONENT,
    characteristic_lines,
    csda_range_g_cm2,
    get_anode,
    k_shell_vacancies_per_electron,
    tube_spectrum,
)

W = get_anode("W")


def _upper_edges(energies: np.ndarray) -> np.ndarray:
    return energies + 0.5 * (energies[1] - energies[0])


@pytest.mark.parametrize("kv", [40.0, 57.3, 80.0, 100.0, 150.0])
def test_duane_hunt_no_fluence_above_the_tube_voltage(kv: float) -> None:
    # Duane-Hunt limit: the highest photon energy in keV equals the tube voltage in kV
    # (common practice)
    s = tube_spectrum(kv=kv)
    lower_edges = s.energies_kev - 0.125
    assert np.all(s.total[lower_edges >= kv] == 0.0)
    assert s.total[lower_edges < kv][-1] > 0.0


def test_without_self_absorption_it_is_kramers_thick_target_law() -> None:
    # Kramers, Phil Mag 46:836 (1923): N(E) = k Z (E0 - E) / E per electron (here per sr, 4 pi)
    s = tube_spectrum(kv=100.0, self_absorption=False)
    e = s.energies_kev
    k_kramers = 2.0e3 * BREMSSTRAHLUNG_EFFICIENCY_PER_VOLT
    expected = k_kramers * 74 * (100.0 - e) / e / (4 * np.pi) * 0.25
    inside = _upper_edges(e) <= 100.0
    np.testing.assert_allclose(s.bremsstrahlung[inside], expected[inside], rtol=1e-9)


def test_bremsstrahlung_efficiency_is_k_z_v() -> None:
    # radiated energy per electron = eta * T0 with eta = 1e-9 Z V (PUBLISHED-VALUES i, medium);
    # the grid starts at 1 keV, so the part k Z (T0 - 1/2) below it is missing
    s = tube_spectrum(kv=100.0, self_absorption=False)
    radiated_kev = float(np.sum(s.bremsstrahlung * s.energies_kev)) * 4 * np.pi
    eta = BREMSSTRAHLUNG_EFFICIENCY_PER_VOLT * 74 * 100e3
    below_grid_kev = 2.0e3 * BREMSSTRAHLUNG_EFFICIENCY_PER_VOLT * 74 * (100.0 - 0.5)
    assert radiated_kev == pytest.approx(eta * 100.0 - below_grid_kev, rel=1e-6)


def test_unfiltered_number_spectrum_rises_toward_low_energies() -> None:
    # common practice: the unfiltered (Kramers) number spectrum rises toward low energies
    s = tube_spectrum(kv=80.0, self_absorption=False)
    inside = _upper_edges(s.energies_kev) <= 80.0
    assert np.all(np.diff(s.bremsstrahlung[inside]) < 0.0)


def test_self_absorption_removes_low_energies_most() -> None:
    # the anode filters its own beam: transmission falls toward low energies (Birch & Marshall)
    bare = tube_spectrum(kv=80.0, self_absorption=False).bremsstrahlung
    real = tube_spectrum(kv=80.0).bremsstrahlung
    e = tube_spectrum(kv=80.0).energies_kev
    i20, i50 = np.searchsorted(e, [20.0, 50.0])
    ratio_20, ratio_50 = real[i20] / bare[i20], real[i50] / bare[i50]
    assert 0.0 < ratio_20 < ratio_50 < 1.0


def test_steeper_anode_angle_absorbs_less() -> None:
    # heel effect: a larger take-off angle shortens the exit path in the target (common practice)
    e = tube_spectrum(kv=80.0).energies_kev
    i = np.searchsorted(e, 30.0)
    assert (
        tube_spectrum(kv=80.0, anode_angle_deg=22.0).total[i]
        > tube_spectrum(kv=80.0, anode_angle_deg=6.0).total[i]
    )


@pytest.mark.parametrize("kv", [60.0, 100.0])
def test_after_2_5_mm_al_the_spectrum_is_bell_shaped(kv: float) -> None:
    # common practice: after 2.5 mm Al the number spectrum has one maximum
    s = tube_spectrum(kv=kv)
    phi = s.bremsstrahlung * transmission((FilterSpec("Al", 2.5),), air_path_mm=1000.0)
    visible = phi > 1e-6 * phi.max()
    d = np.sign(np.diff(phi[visible]))
    d = d[d != 0]
    assert np.count_nonzero(np.diff(d) != 0) == 1  # one change of slope: up, then down
    assert d[0] > 0 and d[-1] < 0


def test_k_line_positions_match_xraylib_and_bearden() -> None:
    energies, rates = characteristic_lines(W)
    expected = [xraylib.LineEnergy(74, line) for line in (xraylib.KL3_LINE, xraylib.KL2_LINE)]
    assert energies[np.argmax(rates)] == pytest.approx(expected[0])
    # X-ray Data Booklet Table 1-2 (Bearden 1967): W K-alpha1 59.318, K-alpha2 57.982,
    # K-beta1 67.244 keV
    for line_kev in (59.318, 57.982, 67.244):
        assert np.min(np.abs(energies - line_kev)) < 0.01
    assert np.sum(rates) == pytest.approx(1.0, abs=1e-3)


def test_k_line_relative_rates_match_the_data_booklet() -> None:
    # X-ray Data Booklet Table 1-2 intensities K-alpha1 : K-alpha2 = 100 : 58 (medium-high)
    energies, rates = characteristic_lines(W)
    ka1 = rates[np.argmin(np.abs(energies - 59.318))]
    ka2 = rates[np.argmin(np.abs(energies - 57.982))]
    assert ka2 / ka1 == pytest.approx(0.58, abs=0.03)


def test_k_lines_sit_in_the_bins_of_their_energies() -> None:
    s = tube_spectrum(kv=120.0)
    energies, _ = characteristic_lines(W)
    lit = s.energies_kev[s.characteristic > 0]
    for line_kev in energies:
        assert np.min(np.abs(lit - line_kev)) <= 0.125 + 1e-9


@pytest.mark.parametrize("kv", [40.0, 60.0, 69.0, 69.5])
def test_no_k_lines_below_the_k_edge_voltage(kv: float) -> None:
    # K-edge of W 69.525 keV (X-ray Data Booklet Table 1-1; NIST)
    assert W.k_edge_kev == pytest.approx(69.525)
    assert np.all(tube_spectrum(kv=kv).characteristic == 0.0)
    assert k_shell_vacancies_per_electron(kv, anode=W) == 0.0


def test_k_yield_follows_green_cosslett_power_law() -> None:
    # Green & Cosslett (1968): yield proportional to (U0 - 1)^1.63
    u1, u2 = 100.0 / W.k_edge_kev - 1.0, 150.0 / W.k_edge_kev - 1.0
    ratio = k_shell_vacancies_per_electron(150.0, anode=W) / k_shell_vacancies_per_electron(
        100.0, anode=W
    )
    assert ratio == pytest.approx((u2 / u1) ** GREEN_COSSLETT_EXPONENT)


def test_csda_range_of_tungsten_is_micrometres() -> None:
    # order of magnitude check: 100 keV electrons travel some 10-20 um in tungsten (common practice)
    range_um = float(csda_range_g_cm2(100.0, anode=W)) / W.density_g_cm3 * 1e4
    assert 10.0 < range_um < 25.0


def test_ripple_softens_the_beam() -> None:
    flat = tube_spectrum(kv=80.0)
    rippled = tube_spectrum(kv=80.0, ripple_percent=30.0)
    mean = lambda s: float(np.sum(s.total * s.energies_kev) / np.sum(s.total))  # noqa: E731
    assert mean(rippled) < mean(flat)
    assert np.sum(rippled.total) < np.sum(flat.total)
    assert np.all(rippled.total[flat.total == 0.0] == 0.0)


@pytest.mark.parametrize(
    ("kwargs", "match"),
    [
        ({"kv": 0.0}, "outside 20-150 kV"),
        ({"kv": 400.0}, "outside 20-150 kV"),
        ({"kv": 80.0, "ripple_percent": -1.0}, "ripple"),
        ({"kv": 80.0, "anode": "Pb"}, "unknown anode"),
        ({"kv": 80.0, "anode": "Mo"}, "outside 20-50 kV for a molybdenum anode"),
    ],
)
def test_impossible_input_is_a_model_error(kwargs: dict[str, object], match: str) -> None:
    with pytest.raises(ModelError, match=match):
        tube_spectrum(**kwargs)
