"""The uncertainty of a beam's quality figures (model/beam_quality.py), checked by hand.

Each check recomputes the GUM linearisation (JCGM 100:2008, 5.1.2 eq. 10, 5.1.3 eq. 11) with
the spectrum model itself, or holds the model's sensitivity to the published slope of the IEC
61267 reference qualities.
"""

from __future__ import annotations

import math

import pytest

from beamaudit.model import BeamSpec, compute_beam
from beamaudit.model.beam_quality import (
    ATTENUATION_RELATIVE_UNCERTAINTY,
    COVERAGE_FACTOR,
    FILTRATION_ASSUMED_TOLERANCE_MM_AL,
    FILTRATION_STATED_TOLERANCE_MM_AL,
    KV_TOLERANCE_REL,
    beam_quality_uncertainty,
    kv_standard_uncertainty_kv,
)
from beamaudit.model.errors import ModelError
from beamaudit.model.filtration import FilterSpec


def _al(mm: float) -> tuple[FilterSpec, ...]:
    return (FilterSpec("Al", mm),)


def _hvl(kv: float, al_mm: float) -> float:
    return compute_beam(BeamSpec(kv, _al(al_mm))).hvl1_mm_al


def test_rectangular_tolerance_over_root_three() -> None:
    # GUM 4.3.7: a value known only to lie within +-a has u = a / sqrt(3); 10 % of 80 kV
    assert kv_standard_uncertainty_kv(80.0) == pytest.approx(8.0 / math.sqrt(3.0))
    assert kv_standard_uncertainty_kv(80.0) == pytest.approx(4.6188, abs=1e-4)


def test_kv_and_filtration_contributions_by_hand() -> None:
    """Central differences taken by hand with the model's own HVL at 80 kV, 3 mm Al."""
    result = beam_quality_uncertainty(BeamSpec(80.0, _al(3.0)))
    u_kv = KV_TOLERANCE_REL * 80.0 / math.sqrt(3.0)
    c_kv = (_hvl(80.0 + u_kv, 3.0) - _hvl(80.0 - u_kv, 3.0)) / (2 * u_kv)
    u_al = FILTRATION_STATED_TOLERANCE_MM_AL / math.sqrt(3.0)
    c_al = (_hvl(80.0, 3.0 + u_al) - _hvl(80.0, 3.0 - u_al)) / (2 * u_al)
    parts = result.contributions["hvl1_mm_al"]
    assert parts["kv"] == pytest.approx(abs(c_kv) * u_kv, rel=1e-9)
    assert parts["filtration_mm_al"] == pytest.approx(abs(c_al) * u_al, rel=1e-9)
    # GUM eq. 10: the root sum of squares of the three contributions
    combined = math.sqrt(sum(v**2 for v in parts.values()))
    assert result.standard_uncertainties["hvl1_mm_al"] == pytest.approx(combined, rel=1e-12)
    assert result.expanded("hvl1_mm_al") == pytest.approx(COVERAGE_FACTOR * combined)
    assert result.values["hvl1_mm_al"] == pytest.approx(_hvl(80.0, 3.0), rel=1e-12)


def test_kv_sensitivity_matches_the_iec_61267_slope() -> None:
    """dHVL/dkV near 80 kV against the RQR 5 and RQR 7 reference qualities.

    IEC 61267:2005 Table 3 (PUBLISHED-VALUES.md, high confidence for the HVLs): RQR 5 70 kV
    2.58 mm Al, RQR 7 90 kV 3.48 mm Al: 0.045 mm Al per kV. The RQR beams are adjusted to their
    HVL with their own filtration, so the slope is held within 25 %.
    """
    result = beam_quality_uncertainty(BeamSpec(80.0, _al(2.5)))
    u_kv = result.inputs["kv"]
    slope = result.contributions["hvl1_mm_al"]["kv"] / u_kv
    published = (3.48 - 2.58) / (90.0 - 70.0)
    assert slope == pytest.approx(published, rel=0.25)


def test_attenuation_scale_of_a_bare_beam_by_hand() -> None:
    """No filter and no air: scaling every mu by (1 + e) divides the HVL by (1 + e) exactly,
    so the central difference over +-u gives HVL u / (1 - u^2)."""
    spec = BeamSpec(80.0, (), air_path_mm=0.0)
    result = beam_quality_uncertainty(spec, kv_uncertainty_kv=0.0, filtration_uncertainty_mm_al=0)
    u = ATTENUATION_RELATIVE_UNCERTAINTY
    hvl = result.values["hvl1_mm_al"]
    expected = hvl * u / (1 - u**2)
    assert result.contributions["hvl1_mm_al"]["attenuation_rel"] == pytest.approx(expected, 1e-9)
    assert result.standard_uncertainties["hvl1_mm_al"] == pytest.approx(expected, rel=1e-9)


def test_filters_harden_against_the_attenuation_scale() -> None:
    """With a filter, thicker-acting filters harden the beam and offset part of the absorber's
    scale: the relative contribution lies below the bare 2 %."""
    result = beam_quality_uncertainty(BeamSpec(80.0, _al(3.0)))
    rel = result.contributions["hvl1_mm_al"]["attenuation_rel"] / result.values["hvl1_mm_al"]
    assert 0.0 < rel < ATTENUATION_RELATIVE_UNCERTAINTY


def test_assumed_filtration_is_wider() -> None:
    stated = beam_quality_uncertainty(BeamSpec(80.0, _al(2.5)))
    assumed = beam_quality_uncertainty(BeamSpec(80.0))
    assert assumed.inputs["filtration_mm_al"] == pytest.approx(
        FILTRATION_ASSUMED_TOLERANCE_MM_AL / math.sqrt(3.0)
    )
    assert stated.inputs["filtration_mm_al"] < assumed.inputs["filtration_mm_al"]
    assert "assumed filtration" in assumed.method


def test_method_names_gum_and_the_coverage_factor() -> None:
    result = beam_quality_uncertainty(BeamSpec(70.0, _al(2.5)))
    assert "JCGM 100:2008" in result.method
    assert "IEC 60601-2-54" in result.method
    assert "k = 2" in result.method
    assert result.as_dict()["coverage_factor"] == 2.0


def test_bad_uncertainty_is_refused() -> None:
    with pytest.raises(ModelError, match="tube voltage must be zero or positive"):
        beam_quality_uncertainty(BeamSpec(80.0, _al(2.5)), kv_uncertainty_kv=-1.0)
