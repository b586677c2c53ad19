"""Exposure-level dose figures: the chain by hand, uncertainties, reported vs reconstructed, trails.

Equations: IAEA TRS 457 (2007) §7 and ICRU Report 74 (2005); uncertainty combination
JCGM 100:2008 eq. 12; backscatter from the shipped water table (from memory, see
test_backscatter.py).
"""

from __future__ import annotations

import dataclasses
import json
import math

import pytest

from beamaudit.model.backscatter import load_backscatter_table
from beamaudit.model.dose import off_axis_factor
from beamaudit.model.errors import ModelError
from beamaudit.model.exposure import BeamInputs, compute_exposure_dose, dose_from_beam
from beamaudit.model.geometry import GeometryInputs

BEAM = BeamInputs(
    kvp_kv=80.0,
    output_ugy_per_mas_1m=50.0,
    output_standard_uncertainty_ugy_per_mas_1m=5.0,
    hvl1_mm_al=3.0,
    hvl1_standard_uncertainty_mm_al=0.0,
    tissue_to_air_ratio=1.06,
    calibrated=True,
    source="test beam",
)
GEOMETRY = GeometryInputs(
    sid_mm=1000.0,
    body_part_thickness_mm=200.0,
    table_to_detector_gap_mm=50.0,
    field_width_mm=300.0,
    field_height_mm=300.0,
)


#: the 30 x 30 cm field of GEOMETRY at 1 m: its mean kerma over its axis kerma (off-axis
#: inverse-square law; off_axis_factor is checked by quadrature in test_dose.py)
F30 = float(off_axis_factor(field_width_cm=30.0, field_height_cm=30.0, distance_mm=1000.0))


def test_chain_by_hand() -> None:
    # FSD = 1000 - 50 - 200 = 750 mm
    # K_a,i = 50 µGy/mAs · 10 mAs · (1000/750)² = 888.89 µGy = 0.88889 mGy
    # field 30 x 30 cm at 1000 mm -> 22.5 x 22.5 cm at 750 mm; a beam given without its
    # spectrum takes B(3.0 mm Al, 22.5 cm) from the shipped table by HVL (beamaudit's Monte
    # Carlo kernels), midway between its 20 cm and 25 cm cells
    # K_a,e = 0.88889 · B mGy; D = K_a,e · 1.06
    # P_KA = K(1000 mm) · A(1000 mm) · f = 0.5 mGy · 900 cm² · f = 0.45 Gy·cm² · f, f the
    # field's mean kerma over its axis kerma (off-axis inverse-square law, ICRU 74's integral)
    table = load_backscatter_table("soft_tissue_mc")
    row = list(table.hvl_mm_al).index(3.0)
    b = (table.factors[row, list(table.field_side_cm).index(20.0)]
         + table.factors[row, list(table.field_side_cm).index(25.0)]) / 2  # fmt: skip
    r = dose_from_beam(BEAM, exposure_mas=10.0, geometry=GEOMETRY)
    assert r.fsd.value == 750.0
    assert r.incident_air_kerma.value == pytest.approx(0.888889, rel=1e-6)
    assert r.backscatter_factor is not None and r.backscatter_factor.value == pytest.approx(b)
    assert r.esak is not None and r.esak.value == pytest.approx(0.888889 * b, rel=1e-6)
    assert r.entrance_dose is not None and r.entrance_dose.value == pytest.approx(
        0.888889 * b * 1.06, rel=1e-6
    )
    assert r.dap.value == pytest.approx(0.45 * F30, rel=1e-9)
    assert r.geometry.entrance_field_side_cm == pytest.approx(22.5)


def test_uncertainties_by_hand() -> None:
    r = dose_from_beam(BEAM, exposure_mas=10.0, geometry=GEOMETRY)
    # DAP: sqrt(0.10² (output) + 0.05² (reported field, dose_defaults.csv) + (2 · 0.01)² (SID))
    assert r.dap.relative_uncertainty == pytest.approx(math.sqrt(0.01 + 0.0025 + 0.0004))
    # FSD: u² = (1 % · 1000)² + (1 % · 50)² + 10² (recorded thickness) -> 14.151 mm
    u_fsd = math.sqrt(10.0**2 + 0.5**2 + 10.0**2)
    assert r.fsd.standard_uncertainty == pytest.approx(u_fsd)
    # K_a,i: sqrt(0.10² + (2 · u_fsd / 750)²)
    rel_ki = math.sqrt(0.01 + (2 * u_fsd / 750.0) ** 2)
    assert r.incident_air_kerma.relative_uncertainty == pytest.approx(rel_ki)
    # ESAK adds B's relative uncertainty; ESD adds the 1 % of the tissue/air ratio
    assert r.backscatter_factor is not None and r.esak is not None and r.entrance_dose is not None
    rel_b = r.backscatter_factor.relative_uncertainty
    assert rel_b >= 0.03  # at least the table's cell uncertainty
    assert r.esak.relative_uncertainty == pytest.approx(math.hypot(rel_ki, rel_b))
    assert r.entrance_dose.relative_uncertainty == pytest.approx(
        math.sqrt(rel_ki**2 + rel_b**2 + 0.01**2)
    )


def test_beam_uncertainty_is_carried_into_every_figure() -> None:
    exact = BeamInputs(**{**BEAM.__dict__, "output_standard_uncertainty_ugy_per_mas_1m": 0.0})
    loose = BeamInputs(**{**BEAM.__dict__, "output_standard_uncertainty_ugy_per_mas_1m": 20.0})
    a = dose_from_beam(exact, exposure_mas=10.0, geometry=GEOMETRY)
    b = dose_from_beam(loose, exposure_mas=10.0, geometry=GEOMETRY)
    for name in ("dap_gy_cm2", "incident_air_kerma_mgy", "esak_mgy", "entrance_dose_mgy"):
        assert b.figures()[name].standard_uncertainty > a.figures()[name].standard_uncertainty


def test_hvl_uncertainty_reaches_the_backscatter_factor() -> None:
    hvl_u = BeamInputs(**{**BEAM.__dict__, "hvl1_standard_uncertainty_mm_al": 0.5})
    a = dose_from_beam(BEAM, exposure_mas=10.0, geometry=GEOMETRY)
    b = dose_from_beam(hvl_u, exposure_mas=10.0, geometry=GEOMETRY)
    assert a.backscatter_factor is not None and b.backscatter_factor is not None
    assert b.backscatter_factor.standard_uncertainty > a.backscatter_factor.standard_uncertainty


def test_reported_values_are_kept_beside_the_reconstruction() -> None:
    geometry = dataclasses.replace(GEOMETRY, source_to_reference_point_mm=700.0)
    r = dose_from_beam(
        BEAM,
        exposure_mas=10.0,
        geometry=geometry,
        reported_dap_gy_cm2=0.5,
        reported_entrance_dose_mgy=0.8,
        entrance_dose_derivation="IAK",
        reported_reference_point_air_kerma_mgy=1.0,
        reported_source="image header",
    )
    by = {c.quantity: c for c in r.comparisons}
    assert by["dap_gy_cm2"].ratio == pytest.approx(0.5 / (0.45 * F30))
    assert by["dap_gy_cm2"].reported_source == "image header"
    assert by["incident_air_kerma_mgy"].ratio == pytest.approx(0.8 / 0.888889, rel=1e-6)
    # K_a,r at 700 mm: 0.5 mGy · (1000/700)² = 1.020408 mGy (inverse-square law, by hand)
    assert r.reference_point_air_kerma is not None
    assert r.reference_point_air_kerma.value == pytest.approx(1.020408, rel=1e-6)
    assert by["reference_point_air_kerma_mgy"].ratio == pytest.approx(1.0 / 1.020408, rel=1e-6)


def test_entrance_dose_without_derivation_is_compared_as_iak_and_noted() -> None:
    r = dose_from_beam(BEAM, exposure_mas=10.0, geometry=GEOMETRY, reported_entrance_dose_mgy=1.0)
    assert r.comparisons[0].quantity == "incident_air_kerma_mgy"
    assert any("derivation absent" in a for a in r.assumptions)


def test_reference_point_without_distance_is_noted() -> None:
    r = dose_from_beam(
        BEAM, exposure_mas=10.0, geometry=GEOMETRY, reported_reference_point_air_kerma_mgy=1.0
    )
    assert r.comparisons == []
    assert any("reference point's distance is not known" in a for a in r.assumptions)


def test_low_hvl_leaves_esak_empty_with_a_reason() -> None:
    # below the table by HVL (from 0.3 mm Al) a beam without its spectrum gets no B
    soft = BeamInputs(**{**BEAM.__dict__, "hvl1_mm_al": 0.2})
    r = dose_from_beam(soft, exposure_mas=10.0, geometry=GEOMETRY)
    assert r.esak is None and r.entrance_dose is None and r.backscatter_factor is None
    assert r.incident_air_kerma.value > 0
    assert any("no entrance surface air kerma" in a for a in r.assumptions)


def test_every_trail_names_its_inputs_and_assumptions() -> None:
    r = dose_from_beam(BEAM, exposure_mas=10.0, geometry=GeometryInputs(exam="abdomen_ap"))
    dap_steps = {s.quantity for s in r.dap.trail}
    # the DAP needs the output, the field and the plane (the default SID, assumed)
    assert {"output_ugy_per_mas_1m", "field_area_cm2", "sid_mm", "dap_gy_cm2"} <= dap_steps
    assert r.dap.assumed
    assert any("SID not recorded" in a for a in r.dap.trail.assumptions)
    esd_steps = [s.quantity for s in r.entrance_dose.trail] if r.entrance_dose else []
    assert esd_steps[-1] == "entrance_dose_mgy"
    assert esd_steps.count("sid_mm") == 1  # shared steps appear once
    assert {"fsd_mm", "backscatter_factor", "tissue_to_air_ratio", "esak_mgy"} <= set(esd_steps)


def test_as_dict_is_json() -> None:
    r = dose_from_beam(BEAM, exposure_mas=10.0, geometry=GEOMETRY, reported_dap_gy_cm2=0.5)
    data = json.loads(json.dumps(r.as_dict(), allow_nan=False))
    for key in (
        "dap_gy_cm2",
        "incident_air_kerma_mgy",
        "esak_mgy",
        "entrance_dose_mgy",
        "backscatter_factor",
        "fsd_mm",
        "hvl1_mm_al",
        "calibrated",
        "assumptions",
    ):
        assert key in data
    assert data["figures"]["esak_mgy"]["trail"][-1]["quantity"] == "esak_mgy"
    assert data["comparisons"][0]["quantity"] == "dap_gy_cm2"


def test_bad_mas() -> None:
    with pytest.raises(ModelError, match="exposure_mas"):
        dose_from_beam(BEAM, exposure_mas=0.0, geometry=GEOMETRY)


def test_with_the_beam_model() -> None:
    from beamaudit.model.beam import BeamSpec, compute_beam, tissue_to_air_ratio

    r = compute_exposure_dose(
        kvp_kv=81,
        exposure_mas=10,
        sid_mm=1800,
        body_part_thickness_mm=220,
        field_width_mm=350,
        field_height_mm=430,
    )
    beam = compute_beam(BeamSpec(kv=81))
    same = dose_from_beam(
        BeamInputs.from_beam_result(beam, tissue_to_air_ratio=tissue_to_air_ratio(beam)),
        exposure_mas=10,
        geometry=GeometryInputs(
            sid_mm=1800, body_part_thickness_mm=220, field_width_mm=350, field_height_mm=430
        ),
    )
    assert r.dap.value == pytest.approx(same.dap.value)
    assert r.calibrated is False
    assert r.hvl1_mm_al == pytest.approx(beam.hvl1_mm_al)
    # the beam model's uncertainty on the output reaches the DAP
    u_rel_output = beam.uncertainty["output_ugy_per_mas_1m"] / beam.output_ugy_per_mas_1m
    assert r.dap.relative_uncertainty >= u_rel_output
    assert any(a.startswith("uncalibrated") for a in r.assumptions)
    # the spectrum-averaged soft tissue / air ratio lies in the TRS 457 range 1.05-1.07
    # (PUBLISHED-VALUES d, medium-high)
    assert r.entrance_dose is not None and r.esak is not None
    assert 1.04 <= r.entrance_dose.value / r.esak.value <= 1.08


def test_geometry_keywords_are_checked() -> None:
    with pytest.raises(ModelError, match="unknown geometry input"):
        compute_exposure_dose(kvp_kv=81, exposure_mas=10, sid=1800)
    with pytest.raises(ModelError, match="not both"):
        compute_exposure_dose(kvp_kv=81, exposure_mas=10, geometry=GEOMETRY, sid_mm=1800)
