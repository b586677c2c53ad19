"""Beam quantities against IEC 61267 qualities and the trade's common-practice behaviour."""

from __future__ import annotations

import itertools
import json
import math

import numpy as np
import pytest
from scipy.optimize import brentq

from beamaudit.model import (
    BeamSpec,
    FilterSpec,
    ModelError,
    compute_beam,
    output_at_distance_ugy_per_mas,
    tissue_to_air_ratio,
)
from beamaudit.model.attenuation import linear_attenuation_per_mm
from beamaudit.model.quantities import air_kerma_ugy

# IEC 61267:2005 (edition 2) Table 3, RQR qualities: kV -> (first HVL mm Al, homogeneity h)
# (PUBLISHED-VALUES b: kV and HVL high confidence, h medium)
RQR_2005 = {
    "RQR 2": (40.0, 1.42, 0.81),
    "RQR 3": (50.0, 1.78, 0.76),
    "RQR 4": (60.0, 2.19, 0.74),
    "RQR 5": (70.0, 2.58, 0.71),
    "RQR 6": (80.0, 3.01, 0.69),
    "RQR 7": (90.0, 3.48, 0.68),
    "RQR 8": (100.0, 3.97, 0.68),
    "RQR 9": (120.0, 5.00, 0.68),
    "RQR 10": (150.0, 6.57, 0.72),
}
# Tolerance for the RQR first HVLs at one filtration: 4 %. The RQR series is meant to be produced
# by one tube at one total filtration (IEC 61267:2005), so a spectrum model must follow the HVL's
# voltage dependence with one filtration. The model's electron depth factor was fitted to these
# same nine values (one parameter; residuals <= 3.3 %, at RQR 2), so this check is mainly a guard
# that the whole series stays consistent; 4 % leaves room for the standard's 3-digit rounding and
# for the anode angle of the standard's reference tube, which we do not know.
RQR_HVL_TOLERANCE = 0.04
# Homogeneity coefficients are NOT used in the fit; given to two digits with medium confidence.
RQR_H_TOLERANCE = 0.03


def _al(t_mm: float) -> tuple[FilterSpec, ...]:
    return (FilterSpec("Al", t_mm),)


@pytest.fixture(scope="module")
def rqr5_filtration_mm_al() -> float:
    """Total Al filtration that gives RQR 5 (70 kV) its standard first HVL, 2.58 mm Al."""
    return float(
        brentq(
            lambda t: compute_beam(BeamSpec(70.0, _al(t))).hvl1_mm_al - 2.58, 1.0, 5.0, xtol=1e-5
        )
    )


def test_rqr5_filtration_is_plausible(rqr5_filtration_mm_al: float) -> None:
    # an RQR tube has about the IEC 60601-1-3 minimum of 2.5 mm Al total (common practice)
    assert 2.0 < rqr5_filtration_mm_al < 3.5


@pytest.mark.parametrize("quality", list(RQR_2005))
def test_rqr_first_hvl_at_one_filtration(quality: str, rqr5_filtration_mm_al: float) -> None:
    # IEC 61267:2005 Table 3
    kv, hvl1, _ = RQR_2005[quality]
    result = compute_beam(BeamSpec(kv, _al(rqr5_filtration_mm_al)))
    assert result.hvl1_mm_al == pytest.approx(hvl1, rel=RQR_HVL_TOLERANCE)


@pytest.mark.parametrize("quality", list(RQR_2005))
def test_rqr_homogeneity_at_one_filtration(quality: str, rqr5_filtration_mm_al: float) -> None:
    # IEC 61267:2005 Table 3 homogeneity coefficients (medium confidence)
    kv, _, h = RQR_2005[quality]
    result = compute_beam(BeamSpec(kv, _al(rqr5_filtration_mm_al)))
    assert result.homogeneity == pytest.approx(h, abs=RQR_H_TOLERANCE)


@pytest.mark.parametrize("kv", [50.0, 80.0, 120.0])
def test_adding_filtration_never_lowers_hvl(kv: float) -> None:
    # beam hardening (common practice)
    hvls = [compute_beam(BeamSpec(kv, _al(t))).hvl1_mm_al for t in (1.0, 2.5, 4.0, 6.0)]
    assert all(b > a for a, b in itertools.pairwise(hvls))
    with_cu = compute_beam(BeamSpec(kv, (FilterSpec("Al", 2.5), FilterSpec("Cu", 0.1))))
    assert with_cu.hvl1_mm_al > hvls[1]


def test_adding_filtration_lowers_output() -> None:
    outputs = [compute_beam(BeamSpec(80.0, _al(t))).output_ugy_per_mas_1m for t in (1.0, 2.5, 4.0)]
    assert outputs[0] > outputs[1] > outputs[2]


def test_output_grows_with_kv() -> None:
    outputs = [compute_beam(BeamSpec(kv)).output_ugy_per_mas_1m for kv in (50.0, 80.0, 110.0)]
    assert outputs[0] < outputs[1] < outputs[2]


def test_second_hvl_exceeds_first() -> None:
    r = compute_beam(BeamSpec(80.0))
    assert r.hvl2_mm_al > r.hvl1_mm_al
    assert r.homogeneity == pytest.approx(r.hvl1_mm_al / r.hvl2_mm_al)


def test_hvl_is_the_half_value_of_the_air_kerma() -> None:
    # definition of the HVL (ICRU Report 74): the kerma behind HVL1 of Al is half
    r = compute_beam(BeamSpec(90.0))
    mu_al = linear_attenuation_per_mm("Al", r.energies_kev)
    mu_cu = linear_attenuation_per_mm("Cu", r.energies_kev)
    k0 = air_kerma_ugy(r.fluence_per_mas_1m)
    assert air_kerma_ugy(r.fluence_per_mas_1m * np.exp(-mu_al * r.hvl1_mm_al)) == pytest.approx(
        k0 / 2
    )
    t2 = r.hvl1_mm_al + r.hvl2_mm_al
    assert air_kerma_ugy(r.fluence_per_mas_1m * np.exp(-mu_al * t2)) == pytest.approx(k0 / 4)
    assert air_kerma_ugy(r.fluence_per_mas_1m * np.exp(-mu_cu * r.hvl1_mm_cu)) == pytest.approx(
        k0 / 2
    )


def test_effective_energy_has_the_same_hvl() -> None:
    r = compute_beam(BeamSpec(80.0))
    mu = float(linear_attenuation_per_mm("Al", r.effective_energy_kev))
    assert math.log(2.0) / mu == pytest.approx(r.hvl1_mm_al, rel=0.01)
    assert r.effective_energy_kev < r.mean_energy_kev < 80.0


def test_output_is_the_air_kerma_of_the_fluence() -> None:
    r = compute_beam(BeamSpec(80.0))
    assert air_kerma_ugy(r.fluence_per_mas_1m) == pytest.approx(r.output_ugy_per_mas_1m)


@pytest.mark.parametrize("mas", [0.5, 10.0, 250.0])
def test_air_kerma_is_linear_in_mas(mas: float) -> None:
    # output per mAs times mAs (common practice: kerma proportional to tube charge)
    r = compute_beam(BeamSpec(80.0))
    assert air_kerma_ugy(mas * r.fluence_per_mas_1m) == pytest.approx(mas * r.output_ugy_per_mas_1m)


@pytest.mark.parametrize("distance_mm", [500.0, 1000.0, 1500.0, 1800.0])
def test_inverse_square_law(distance_mm: float) -> None:
    # inverse-square law for a point source
    y = output_at_distance_ugy_per_mas(50.0, distance_mm)
    assert y * distance_mm**2 == pytest.approx(50.0 * 1000.0**2)


@pytest.mark.parametrize("kv", [80.0, 90.0, 100.0])
def test_most_output_is_bremsstrahlung(kv: float) -> None:
    # common practice: at 80-100 kV most of the air kerma is bremsstrahlung
    r = compute_beam(BeamSpec(kv))
    assert 0.0 < r.characteristic_kerma_fraction < 0.15


def test_no_fluence_above_kv_in_the_result() -> None:
    # Duane-Hunt (common practice)
    r = compute_beam(BeamSpec(65.0))
    assert np.all(r.fluence_per_mas_1m[r.energies_kev - 0.125 >= 65.0] == 0.0)


def test_default_filtration_is_flagged_assumed() -> None:
    r = compute_beam(BeamSpec(80.0))
    assert r.filtration_assumed
    assert r.filters == (FilterSpec("Al", 2.5),)
    assert any("2.5 mm Al" in a for a in r.assumptions)
    assert not compute_beam(BeamSpec(80.0, _al(2.5))).filtration_assumed


def test_without_calibration_the_result_is_marked_uncalibrated() -> None:
    r = compute_beam(BeamSpec(80.0))
    assert r.calibrated is False
    assert any(a.startswith("uncalibrated") for a in r.assumptions)
    # the 40 % default-scale uncertainty shows in the output's uncertainty
    assert r.uncertainty["output_ugy_per_mas_1m"] == pytest.approx(0.4 * r.output_ugy_per_mas_1m)


def test_default_output_is_of_the_published_typical_size() -> None:
    # typical output at 80 kV: fit value 50 uGy/mAs at ~1 m (PUBLISHED-VALUES j, medium)
    r = compute_beam(BeamSpec(80.0))
    assert r.output_ugy_per_mas_1m == pytest.approx(50.0, rel=0.15)


def test_uncertainty_propagates_kv_and_filtration() -> None:
    exact = compute_beam(BeamSpec(80.0, _al(3.0)))
    r = compute_beam(
        BeamSpec(80.0, _al(3.0)), kv_uncertainty_kv=2.0, filtration_uncertainty_mm_al=0.3
    )
    assert exact.uncertainty["hvl1_mm_al"] == 0.0
    assert 0.0 < r.uncertainty["hvl1_mm_al"] < 0.5
    assert r.uncertainty["output_ugy_per_mas_1m"] > exact.uncertainty["output_ugy_per_mas_1m"]
    # sensitivity check by hand: dHVL/dkV from a central difference
    up = compute_beam(BeamSpec(82.0, _al(3.0))).hvl1_mm_al
    down = compute_beam(BeamSpec(78.0, _al(3.0))).hvl1_mm_al
    kv_only = compute_beam(BeamSpec(80.0, _al(3.0)), kv_uncertainty_kv=2.0)
    assert kv_only.uncertainty["hvl1_mm_al"] == pytest.approx(abs(up - down) / 2.0)


def test_ripple_softens_and_lowers_output() -> None:
    flat = compute_beam(BeamSpec(80.0))
    rippled = compute_beam(BeamSpec(80.0, ripple_percent=20.0))
    assert rippled.hvl1_mm_al < flat.hvl1_mm_al
    assert any("ripple" in a for a in rippled.assumptions)


def test_as_dict_is_json_ready_and_complete() -> None:
    d = json.loads(json.dumps(compute_beam(BeamSpec(80.0)).as_dict()))
    for key in (
        "kv",
        "hvl1_mm_al",
        "hvl2_mm_al",
        "homogeneity",
        "hvl1_mm_cu",
        "mean_energy_kev",
        "output_ugy_per_mas_1m",
        "calibrated",
        "energies_kev",
        "fluence_per_mas_1m",
    ):
        assert key in d
    assert len(d["energies_kev"]) == len(d["fluence_per_mas_1m"])


def test_tissue_to_air_ratio_is_that_of_trs_457() -> None:
    # IAEA TRS 457: spectrum-averaged (mu_en/rho) ICRU soft tissue / air about 1.06 (1.05-1.07),
    # water / air 1.02-1.05 for 50-150 kV (PUBLISHED-VALUES d, medium-high / medium)
    for kv in (60.0, 80.0, 120.0):
        r = compute_beam(BeamSpec(kv))
        assert 1.04 <= tissue_to_air_ratio(r) <= 1.08
        assert 1.01 <= tissue_to_air_ratio(r, tissue="water") <= 1.05
        assert tissue_to_air_ratio(r.energies_kev, r.fluence_per_mas_1m) == pytest.approx(
            tissue_to_air_ratio(r)
        )


@pytest.mark.parametrize(
    ("kwargs", "match"),
    [
        ({"kv": 0.0}, "outside 20-150 kV"),
        ({"kv": 400.0}, "outside 20-150 kV"),
        ({"kv": float("nan")}, "outside"),
        ({"kv": 80.0, "anode_angle_deg": 30.0}, "anode angle"),
        ({"kv": 80.0, "ripple_percent": 120.0}, "ripple"),
        ({"kv": 80.0, "anode": "Mo"}, "outside 20-50 kV for a molybdenum anode"),
    ],
)
def test_impossible_beams_are_rejected(kwargs: dict[str, float], match: str) -> None:
    with pytest.raises(ModelError, match=match):
        BeamSpec(**kwargs)


def test_below_validated_voltage_is_flagged() -> None:
    r = compute_beam(BeamSpec(30.0, _al(1.0)))
    assert any("below 40 kV" in a for a in r.assumptions)
