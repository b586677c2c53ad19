"""Mean glandular dose by the Dance method: the factors, published s and g, the trail."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from beamaudit.model import FilterSpec, ModelError
from beamaudit.model.attenuation import energy_bin_centres_kev, grid_mass_energy_absorption_cm2_g
from beamaudit.model.dance_coefficients import load_official_coefficients
from beamaudit.model.glandular_dose import (
    TomosynthesisAcquisition,
    mean_glandular_dose,
    reference_beam_weights,
)
from beamaudit.model.mammography import MammographyTechnique, breast_beam
from beamaudit.model.quantities import half_value_layers_mm

FILTERS = {"Mo": ("Mo", 0.030), "Rh": ("Rh", 0.025), "Ag": ("Ag", 0.050), "Al": ("Al", 0.7)}


def technique(kv: float, anode: str, filt: str, thickness: float, **kw: object):
    material, mm = FILTERS[filt]
    if (anode, filt) == ("W", "Rh"):
        mm = 0.050
    return MammographyTechnique(kv, anode, (FilterSpec(material, mm),), thickness, **kw)


def test_mgd_is_k_g_c_s() -> None:
    r = mean_glandular_dose(technique(28.0, "W", "Rh", 50.0), exposure_mas=80.0, glandularity=0.3)
    assert r.mgd_mgy == pytest.approx(r.incident_air_kerma_mgy * r.g * r.c * r.s)
    assert r.incident_air_kerma_mgy == pytest.approx(80.0 * r.beam.air_kerma_per_mas_mgy)
    assert r.monte_carlo["mgd_mgy"] == pytest.approx(r.mgd_mgy)
    assert r.trail.steps[-1].quantity == "mgd_mgy"
    assert 0.0 < r.mgd_uncertainty_mgy < r.mgd_mgy


@pytest.mark.parametrize("kv", [24.0, 26.0, 28.0, 30.0, 32.0])
@pytest.mark.parametrize("thickness", [30.0, 60.0])
def test_s_of_mo_mo_is_one(kv: float, thickness: float) -> None:
    # Dance et al. 2000: s = 1.000 for Mo/Mo, the spectra of the g and c tables. Up to 28 kV the
    # beam is its own reference (s = 1 to the HVL match's tolerance); above, the reference is
    # 28 kV with aluminium and s is 1.01-1.02
    r = mean_glandular_dose(technique(kv, "Mo", "Mo", thickness), exposure_mas=50.0, age_years=55)
    if kv <= 28.0:
        assert r.s == pytest.approx(1.0, abs=1e-4)
    else:
        assert r.s == pytest.approx(1.0, abs=0.025)


def test_c_is_one_at_half_glandular_and_falls_with_glandularity() -> None:
    t = technique(29.0, "Mo", "Rh", 55.0)
    cs = [mean_glandular_dose(t, exposure_mas=50.0, glandularity=g).c for g in (0.01, 0.5, 1.0)]
    assert cs[1] == pytest.approx(1.0, abs=1e-9)
    assert cs[0] > 1.0 > cs[2]  # Dance et al. 2000: c > 1 below 50 %, c < 1 above


def test_g_rises_with_hvl_and_falls_with_thickness() -> None:
    def g(kv: float, thickness: float) -> float:
        return mean_glandular_dose(
            technique(kv, "Mo", "Mo", thickness), exposure_mas=50.0, glandularity=0.5
        ).g

    assert g(25.0, 50.0) < g(28.0, 50.0) < g(32.0, 50.0)
    assert g(28.0, 30.0) > g(28.0, 50.0) > g(28.0, 80.0)


def test_reference_beam_has_the_hvl_it_was_chosen_for() -> None:
    grid_air = energy_bin_centres_kev() * grid_mass_energy_absorption_cm2_g("air")
    for hvl in (0.30, 0.40, 0.55):
        weights, how = reference_beam_weights(hvl, 580.0)
        fluence = np.where(grid_air > 0, weights / grid_air, 0.0)
        assert half_value_layers_mm(fluence)[0] == pytest.approx(hvl, abs=1e-3)
        assert how.startswith("Mo/Mo at")
    assert "mm Al" in reference_beam_weights(0.55, 580.0)[1]  # beyond 40 kV: aluminium added
    with pytest.raises(ModelError, match="below that of the softest reference beam"):
        reference_beam_weights(0.1, 580.0)


# Dance et al., Phys Med Biol 45:3225 (2000) (Mo/Rh, Rh/Rh, W/Rh; Rh/Al 1.044 not checked:
# no Rh/Al system is in use to set its typical technique) and Dance et al., Phys Med Biol
# 54:4361 (2009) (W/Ag): s, "about constant" over the breasts and voltages each is used for
# (PUBLISHED-VALUES m: memory + abstract, high). Averaged here over the typical breasts of
# women of 50-64 (Dance 2000) 30-70 mm thick and the voltages listed (common practice).
PUBLISHED_S = {
    ("Mo", "Rh", (27.0, 29.0, 31.0)): 1.017,
    ("Rh", "Rh", (28.0, 30.0, 32.0)): 1.061,
    ("W", "Rh", (26.0, 28.0, 30.0)): 1.042,
    ("W", "Ag", (28.0, 31.0, 34.0)): 1.042,
}


@pytest.mark.parametrize(("case", "published"), sorted(PUBLISHED_S.items()))
def test_published_s_factors(case: tuple[str, str, tuple[float, ...]], published: float) -> None:
    anode, filt, kvs = case
    values = [
        mean_glandular_dose(
            technique(kv, anode, filt, thickness), exposure_mas=50.0, age_years=55.0
        ).s
        for kv in kvs
        for thickness in (30.0, 40.0, 50.0, 60.0, 70.0)
    ]
    # beamaudit (reference family chosen with these values, see glandular_dose.py): Mo/Rh
    # 1.030, Rh/Rh 1.072, W/Rh 1.033, W/Ag 1.045; the published values are "a few percent"
    # estimates of their own Monte Carlo
    assert float(np.mean(values)) == pytest.approx(published, rel=0.03)
    assert max(values) - min(values) < 0.08  # "about constant": ours vary by 0.03-0.06


# Dance et al., Phys Med Biol 45:3225 (2000), table of g (mGy/mGy) for 50 % glandular breasts
# against first HVL (mm Al) and compressed thickness (mm): from memory (low-medium confidence),
# so held only within 10 %. beamaudit is within 6 % of every value (largest +5.9 % at 0.50 mm
# Al, 20 mm).
DANCE_2000_G = {
    0.30: {20.0: 0.390, 30.0: 0.274, 40.0: 0.207, 50.0: 0.164, 60.0: 0.135, 80.0: 0.098},
    0.40: {20.0: 0.473, 30.0: 0.343, 40.0: 0.263, 50.0: 0.211, 60.0: 0.176, 80.0: 0.131},
    0.50: {20.0: 0.543, 30.0: 0.403, 40.0: 0.314, 50.0: 0.254, 60.0: 0.213, 80.0: 0.161},
}


@pytest.mark.parametrize(
    ("hvl", "thickness", "g"),
    [(h, t, g) for h, row in DANCE_2000_G.items() for t, g in row.items()],
)
def test_g_against_dance_2000(hvl: float, thickness: float, g: float) -> None:
    from beamaudit.model.dance_coefficients import load_dgn_table
    from beamaudit.model.glandular_dose import _fold

    weights, _ = reference_beam_weights(hvl, 630.0 - thickness)
    dgn, _ = load_dgn_table().at(thickness, 0.5)
    assert _fold(weights, dgn)[0] == pytest.approx(g, rel=0.10)


def test_tomosynthesis_factor() -> None:
    t = technique(30.0, "W", "Al", 55.0)
    base = mean_glandular_dose(t, exposure_mas=50.0, glandularity=0.5)
    single = mean_glandular_dose(
        t, exposure_mas=50.0, glandularity=0.5, tomosynthesis=TomosynthesisAcquisition((0.0,))
    )
    assert single.tomo_factor == pytest.approx(1.0)
    assert single.mgd_mgy == pytest.approx(base.mgd_mgy)
    sweep = TomosynthesisAcquisition.uniform(50.0, 25)
    tomo = mean_glandular_dose(t, exposure_mas=50.0, glandularity=0.5, tomosynthesis=sweep)
    assert tomo.tomo_factor is not None and tomo.tomo_factor < 1.0
    assert tomo.mgd_mgy == pytest.approx(base.mgd_mgy * tomo.tomo_factor)
    assert sweep.label == "±25° 25 projections"
    mirrored = TomosynthesisAcquisition(tuple(-a for a in sweep.angles_deg))
    assert mean_glandular_dose(
        t, exposure_mas=50.0, glandularity=0.5, tomosynthesis=mirrored
    ).tomo_factor == pytest.approx(tomo.tomo_factor)


def test_given_kerma_replaces_the_beam_output() -> None:
    r = mean_glandular_dose(technique(29.0, "Mo", "Rh", 45.0), incident_air_kerma_mgy=5.0,
                            glandularity=0.4)  # fmt: skip
    assert r.incident_air_kerma_mgy == 5.0 and r.incident_air_kerma_uncertainty_mgy == 0.0
    assert r.mgd_mgy == pytest.approx(5.0 * r.g * r.c * r.s)
    step = next(s for s in r.trail.steps if s.quantity == "incident_air_kerma_mgy")
    assert step.equation == "given"


def test_default_glandularity_is_typical_and_flagged() -> None:
    r = mean_glandular_dose(technique(28.0, "W", "Rh", 53.0), exposure_mas=80.0)
    assert r.glandularity == pytest.approx(0.29)  # Dance et al. 2000, 50-64, 53 mm (memory)
    assert any("age not known" in a for a in r.assumptions)
    younger = mean_glandular_dose(technique(28.0, "W", "Rh", 53.0), exposure_mas=80.0,
                                  age_years=45.0)  # fmt: skip
    assert younger.glandularity == pytest.approx(0.41)


def test_official_table_takes_precedence_where_it_covers(tmp_path: Path) -> None:
    path = tmp_path / "official.csv"
    path.write_text(
        "# title: National table\n# source: typed from the national protocol\n"
        "factor,key,hvl_mm_al,thickness_mm,glandularity_percent,value\n"
        "g,,0.40,40,,0.25\ng,,0.40,60,,0.17\ng,,0.60,40,,0.33\ng,,0.60,60,,0.24\n"
        "s,W/Rh,,,,1.042\n",
        encoding="utf-8",
    )
    official = load_official_coefficients(path)
    t = technique(28.0, "W", "Rh", 50.0)
    r = mean_glandular_dose(t, exposure_mas=80.0, glandularity=0.5, official=official)
    assert r.s == 1.042 and r.g == pytest.approx(official.g(r.hvl1_mm_al, 50.0))
    assert r.c == pytest.approx(r.monte_carlo["c"])  # no c rows: the Monte Carlo's
    assert r.coefficients == official.describe()
    assert any("official table lists no c" in a for a in r.assumptions)
    g_step = next(s for s in r.trail.steps if s.quantity == "g")
    assert g_step.source == official.describe()
    assert g_step.inputs["monte_carlo"] == pytest.approx(r.monte_carlo["g"])
    outside = mean_glandular_dose(technique(25.0, "Mo", "Mo", 50.0), exposure_mas=80.0,
                                  glandularity=0.5, official=official)  # fmt: skip
    assert outside.g == outside.monte_carlo["g"]
    assert any("does not cover g" in a for a in outside.assumptions)


@pytest.mark.parametrize(
    ("kwargs", "message"),
    [
        ({}, "either the exposure in mAs or the incident air kerma"),
        ({"exposure_mas": 0.0}, "not a positive number"),
        ({"exposure_mas": 50.0, "glandularity": 0.0}, "outside 0.001-1"),
        ({"exposure_mas": 50.0, "age_years": -3.0}, "not an age"),
        ({"incident_air_kerma_mgy": -1.0}, "not positive"),
    ],
)
def test_bad_input_is_a_model_error(kwargs: dict[str, float], message: str) -> None:
    with pytest.raises(ModelError, match=message):
        mean_glandular_dose(technique(28.0, "W", "Rh", 50.0), **kwargs)  # type: ignore[arg-type]


def test_tomosynthesis_input_is_checked() -> None:
    with pytest.raises(ModelError, match="within \\+-30"):
        TomosynthesisAcquisition((40.0,))
    with pytest.raises(ModelError, match="one non-negative tube-loading share"):
        TomosynthesisAcquisition((0.0, 5.0), (1.0,))
    with pytest.raises(ModelError, match=r"arc 90\.0 degrees"):
        TomosynthesisAcquisition.uniform(90.0, 9)


def test_as_dict_is_json_ready() -> None:
    import json

    r = mean_glandular_dose(technique(30.0, "Rh", "Rh", 60.0), exposure_mas=70.0, age_years=60)
    data = json.loads(json.dumps(r.as_dict()))
    assert data["target_filter"] == "Rh/Rh" and data["trail"][-1]["quantity"] == "mgd_mgy"
    assert breast_beam(r.beam.technique).hvl1_mm_al == pytest.approx(data["hvl1_mm_al"])


def test_s_of_tungsten_aluminium_rises_with_thickness() -> None:
    # Dance et al. 2009: s for W/Al (0.5 mm) depends on thickness, about 1.05 thin to 1.15 at
    # 110 mm (PUBLISHED-VALUES m: numbers from memory, low confidence). beamaudit: 1.015 at
    # 20 mm / 26 kV to 1.18 at 110 mm / 39 kV
    s = [
        mean_glandular_dose(
            MammographyTechnique(kv, "W", (FilterSpec("Al", 0.5),), thickness),
            exposure_mas=50.0,
            age_years=55.0,
        ).s
        for thickness, kv in ((20.0, 26.0), (60.0, 32.0), (110.0, 39.0))
    ]
    assert s[0] < s[1] < s[2]
    assert 1.0 < s[0] < 1.10 and 1.08 < s[2] < 1.25
