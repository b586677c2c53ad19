"""Effective dose estimates: the shipped coefficients against their cited tables, the ICRP 103
tissue weights, and that nothing is estimated without a sourced coefficient."""

from __future__ import annotations

import math

import numpy as np
import pytest

from beamaudit.model.effective_dose import (
    POPULATION_AVERAGE_CAUTION,
    ct_effective_dose_msv,
    dap_effective_dose_msv,
    effective_dose_from_equivalent_doses,
    load_ct_k_factors,
    load_dap_coefficients,
    load_tissue_weights_icrp103,
)
from beamaudit.model.errors import ModelError

K = load_ct_k_factors()

# AAPM Report 96 (2008), Table 4, k in mSv/(mGy·cm) at ages 0, 1, 5, 10 years and adult, from
# memory (confidence medium, as the data file says): ICRP 60-based coefficients.
AAPM_96_TABLE_4 = {
    "head_neck": (0.013, 0.0085, 0.0057, 0.0042, 0.0031),
    "head": (0.011, 0.0067, 0.0040, 0.0032, 0.0021),
    "neck": (0.017, 0.012, 0.011, 0.0079, 0.0059),
    "chest": (0.039, 0.026, 0.018, 0.013, 0.014),
    "abdomen_pelvis": (0.049, 0.030, 0.020, 0.015, 0.015),
    "trunk": (0.044, 0.028, 0.019, 0.014, 0.015),
}
NOMINAL_AGES = (0.0, 1.0, 5.0, 10.0, 40.0)
# European Guidelines on Quality Criteria for CT, EUR 16262 (2000): adult k, from memory (medium)
EUR_16262 = {"head": 0.0023, "neck": 0.0054, "chest": 0.017, "abdomen": 0.015, "pelvis": 0.019}
# a recalled value of medium confidence may be a rounding step off; allow 5 % (the tables print
# two significant figures)
MEDIUM_RTOL = 0.05


@pytest.mark.parametrize(("region", "column"), [(r, c) for r in AAPM_96_TABLE_4 for c in range(5)])
def test_aapm_96_table_4_every_cell(region: str, column: int) -> None:
    row = K.lookup(region, NOMINAL_AGES[column])
    assert row is not None and row.table == "AAPM Report 96 (2008), Table 4"
    assert row.k_msv_per_mgy_cm == pytest.approx(AAPM_96_TABLE_4[region][column], rel=MEDIUM_RTOL)
    assert row.confidence == "medium" and row.tissue_weighting == "ICRP 60"


@pytest.mark.parametrize(("region", "k"), EUR_16262.items())
def test_eur_16262_adult_coefficients(region: str, k: float) -> None:
    row = K.lookup(region, 40.0, "EUR 16262")
    assert row is not None and "EUR 16262" in row.table
    assert row.k_msv_per_mgy_cm == pytest.approx(k, rel=MEDIUM_RTOL)


def test_the_two_adult_tables_agree_where_their_regions_match() -> None:
    # same ICRP 60 basis and NRPB Monte Carlo lineage: the adult head and chest differ by a
    # fifth at most (0.0021 vs 0.0023; 0.014 vs 0.017)
    for region in ("head", "chest"):
        aapm = K.lookup(region, 40.0)
        eur = K.lookup(region, 40.0, "EUR 16262")
        assert aapm is not None and eur is not None
        assert aapm.k_msv_per_mgy_cm == pytest.approx(eur.k_msv_per_mgy_cm, rel=0.2)


@pytest.mark.parametrize(
    ("age", "label"),
    [(0.0, "newborn"), (0.49, "newborn"), (0.5, "1 year"), (2.99, "1 year"), (3.0, "5 years"),
     (7.49, "5 years"), (7.5, "10 years"), (14.9, "10 years"), (15.0, "adult"), (90.0, "adult")],
)  # fmt: skip
def test_age_bands_take_the_nearest_tabulated_age(age: float, label: str) -> None:
    row = K.lookup("chest", age)
    assert row is not None and row.age_label == label


def test_paediatric_coefficients_fall_with_age_common_practice() -> None:
    # common practice: a smaller body receives more of the dose per DLP in every organ
    for region, values in AAPM_96_TABLE_4.items():
        assert list(values[:4]) == sorted(values[:4], reverse=True), region


def test_ct_effective_dose_is_k_times_dlp_with_its_source() -> None:
    e = ct_effective_dose_msv(
        [790.0, 290.0, 100.0], region=["head", "chest", "chest"], age_years=[60.0, 50.0, 4.0]
    )
    # 790 mGy·cm (the UK head NDRL) x 0.0021 = 1.659 mSv; 290 x 0.014 = 4.06; 100 x 0.018 = 1.8
    np.testing.assert_allclose(e.effective_dose_msv, [1.659, 4.06, 1.8])
    assert e.coefficient_unit == "mSv/(mGy·cm)"
    assert all("AAPM Report 96 (2008), Table 4" in s for s in e.source)
    assert list(e.reason) == ["", "", ""] and e.caution == POPULATION_AVERAGE_CAUTION
    assert "population-average" in e.caution and "not as an individual" in e.caution


def test_no_estimate_without_a_coefficient_age_or_matching_phantom() -> None:
    e = ct_effective_dose_msv(
        [500.0, 500.0, 500.0, math.nan],
        region=["foot", "head", "chest", "head"],
        age_years=[40.0, math.nan, 40.0, 40.0],
        phantom_cm=[32.0, 16.0, 16.0, 16.0],
    )
    assert np.isnan(e.effective_dose_msv).all()
    assert "region 'foot'" in e.reason[0]
    assert "age not recorded" in e.reason[1]
    assert "16 cm phantom; the coefficient to the 32 cm phantom" in e.reason[2]
    assert "DLP not recorded" in e.reason[3]


def test_bad_ct_arguments_are_refused() -> None:
    with pytest.raises(ModelError, match="unknown coefficient set"):
        ct_effective_dose_msv([1.0], region="head", age_years=[1.0], coefficient_set="X")
    with pytest.raises(ModelError, match="must not be negative"):
        ct_effective_dose_msv([-1.0], region="head", age_years=[40.0])
    with pytest.raises(ModelError, match="scalar or have 2 values"):
        ct_effective_dose_msv([1.0, 2.0], region=["head"], age_years=[40.0, 40.0])


def test_no_dap_coefficient_is_shipped_without_a_source() -> None:
    shipped = load_dap_coefficients()
    assert len(shipped.rows) == 0 and "EMPTY" in shipped.metadata["source"]
    e = dap_effective_dose_msv([0.1, 2.0], exam_type=["chest_pa", "abdomen_ap"])
    assert np.isnan(e.effective_dose_msv).all()
    assert e.reason[0] == "no sourced effective-dose coefficient for exam type 'chest_pa'"


def test_a_site_table_of_dap_coefficients_is_used_with_its_source(tmp_path) -> None:
    # an invented coefficient, for the mechanics only
    path = tmp_path / "dap.csv"
    path.write_text(
        "exam_type,c_msv_per_gy_cm2,tissue_weighting,patient,table,original,confidence\n"
        "chest_pa,0.2,ICRP 103,adult,Invented survey Table 9,invented,test\n"
    )
    table = load_dap_coefficients(path)
    e = dap_effective_dose_msv([0.1, 0.1], exam_type=["chest_pa", "knee_ap"], table=table)
    assert e.effective_dose_msv[0] == pytest.approx(0.02) and math.isnan(e.effective_dose_msv[1])
    assert "Invented survey Table 9" in e.source[0]
    path.write_text(
        "exam_type,c_msv_per_gy_cm2,tissue_weighting,patient,table,original,confidence\n"
        "chest_pa,0.2,ICRP 103,adult,,invented,\n"
    )
    with pytest.raises(ModelError, match="needs the table it comes from"):
        load_dap_coefficients(path)


# -------------------------------------------------------------------------- ICRP 103 weights
@pytest.mark.parametrize(
    ("tissue", "w"),
    [("red_bone_marrow", 0.12), ("colon", 0.12), ("lung", 0.12), ("stomach", 0.12),
     ("breast", 0.12), ("remainder", 0.12), ("gonads", 0.08), ("bladder", 0.04),
     ("oesophagus", 0.04), ("liver", 0.04), ("thyroid", 0.04), ("bone_surface", 0.01),
     ("brain", 0.01), ("salivary_glands", 0.01), ("skin", 0.01)],
)  # fmt: skip
def test_icrp_103_table_3_tissue_weights(tissue: str, w: float) -> None:
    # ICRP Publication 103 (2007), Table 3 (from memory, high)
    assert load_tissue_weights_icrp103()[tissue] == w


def test_tissue_weights_sum_to_one_and_a_uniform_dose_gives_itself() -> None:
    weights = load_tissue_weights_icrp103()
    assert sum(weights.values()) == pytest.approx(1.0, abs=1e-12)
    uniform = dict.fromkeys(weights, 3.0)
    assert effective_dose_from_equivalent_doses(uniform, uniform) == pytest.approx(3.0)


def test_effective_dose_averages_the_sexes() -> None:
    weights = load_tissue_weights_icrp103()
    male = dict.fromkeys(weights, 0.0)
    female = dict.fromkeys(weights, 0.0)
    female["breast"] = 10.0  # ICRP 103 eq. 4.5: 0.12 x (0 + 10) / 2
    assert effective_dose_from_equivalent_doses(male, female) == pytest.approx(0.6)
    with pytest.raises(ModelError, match="missing"):
        effective_dose_from_equivalent_doses({"lung": 1.0}, female)
