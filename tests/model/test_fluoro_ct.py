"""Accumulations for fluoroscopy / interventional and CT studies, worked by hand."""

from __future__ import annotations

import pytest

from beamaudit.model.errors import ModelError
from beamaudit.model.fluoro_ct import (
    CtAcquisition,
    ProjectionEvent,
    accumulate_projection_events,
    ct_acquisition_dose,
    ct_study_dose,
)


def _procedure() -> list[ProjectionEvent]:
    return [
        ProjectionEvent("fluoroscopy", 2.5, 12.0, 60.0),
        ProjectionEvent("fluoroscopy", 1.5, 8.0, 30.0),
        ProjectionEvent("stationary", 4.0, 20.0, 2.0),
        ProjectionEvent("rotational", 10.0, 45.0, 5.0),
    ]


def test_totals_by_hand() -> None:
    acc = accumulate_projection_events(_procedure())
    # DAP 2.5 + 1.5 + 4 + 10 = 18 Gy·cm²; K_a,r 12 + 8 + 20 + 45 = 85 mGy; fluoro 90 s
    assert acc.dap_total_gy_cm2 == pytest.approx(18.0)
    assert acc.fluoro_dap_total_gy_cm2 == pytest.approx(4.0)
    assert acc.acquisition_dap_total_gy_cm2 == pytest.approx(14.0)
    assert acc.reference_point_air_kerma_total_mgy == pytest.approx(85.0)
    assert acc.fluoro_reference_point_air_kerma_total_mgy == pytest.approx(20.0)
    assert acc.fluoro_time_total_s == pytest.approx(90.0)
    assert acc.acquisition_time_total_s == pytest.approx(7.0)
    assert (acc.number_of_events, acc.number_of_fluoro_events) == (4, 2)
    assert acc.complete and not acc.trail.assumptions


def test_missing_values_are_never_zero() -> None:
    events = [*_procedure(), ProjectionEvent("fluoroscopy", None, None, 10.0)]
    acc = accumulate_projection_events(events)
    assert acc.dap_total_gy_cm2 == pytest.approx(18.0)
    assert acc.missing["dap_total_gy_cm2"] == 1
    assert not acc.complete
    assert any("lower bound" in a for a in acc.trail.assumptions)


def test_no_values_gives_none() -> None:
    acc = accumulate_projection_events([ProjectionEvent("stationary")])
    assert acc.dap_total_gy_cm2 is None and acc.fluoro_time_total_s is None
    assert acc.missing["dap_total_gy_cm2"] == 1
    assert len(acc.trail) == 0  # nothing summed, nothing claimed


def test_reported_totals_are_kept_with_ratio() -> None:
    acc = accumulate_projection_events(
        _procedure(),
        reported_dap_total_gy_cm2=18.9,
        reported_reference_point_air_kerma_total_mgy=85.0,
        reported_fluoro_time_total_s=90.0,
    )
    ratios = {c.quantity: c.ratio for c in acc.comparisons}
    assert ratios == pytest.approx(
        {
            "dap_total_gy_cm2": 1.05,
            "reference_point_air_kerma_total_mgy": 1.0,
            "fluoro_time_total_s": 1.0,
        }
    )


def test_untyped_events_are_noted() -> None:
    acc = accumulate_projection_events([ProjectionEvent(None, 1.0, 1.0, 1.0)])
    assert acc.number_of_acquisition_events == 1
    assert "counted as acquisitions" in acc.trail.assumptions[0]


def test_negative_values_are_refused() -> None:
    with pytest.raises(ModelError, match="dap_gy_cm2"):
        accumulate_projection_events([ProjectionEvent("fluoroscopy", -1.0)])


def test_ct_acquisition_prefers_reported_dlp_and_keeps_the_product() -> None:
    # by hand: CTDIvol 10 mGy x 38 cm = 380 mGy·cm; reported 400 -> ratio 400/380 = 1.05263
    dose = ct_acquisition_dose(
        CtAcquisition(
            ctdivol_mgy=10.0,
            dlp_mgy_cm=400.0,
            scan_length_mm=380.0,
            phantom_diameter_cm=32,
            water_equivalent_diameter_mm=250.0,
        )
    )
    assert dose.dlp_mgy_cm == 400.0 and dose.dlp_source == "reported"
    assert dose.comparisons[0].ratio == pytest.approx(400.0 / 380.0)
    # AAPM 204, D = 25 cm, 32 cm phantom: f = 1.47924 -> SSDE 14.792 mGy
    assert dose.ssde_mgy == pytest.approx(14.7924, abs=1e-4)


def test_ct_acquisition_dlp_from_length_is_assumed() -> None:
    dose = ct_acquisition_dose(CtAcquisition(ctdivol_mgy=8.0, scan_length_mm=300.0))
    assert dose.dlp_mgy_cm == pytest.approx(240.0)
    assert dose.dlp_source == "ctdivol_x_length"
    assert "over-ranging" in dose.trail.assumptions[0]


def test_ct_ssde_needs_the_phantom() -> None:
    dose = ct_acquisition_dose(CtAcquisition(ctdivol_mgy=8.0, effective_diameter_cm=28.0))
    assert dose.ssde is None
    assert "phantom" in dose.trail.assumptions[0]


def test_ct_study_totals() -> None:
    study = ct_study_dose(
        [
            CtAcquisition(
                ctdivol_mgy=0.2,
                dlp_mgy_cm=8.0,
                acquisition_type="ct_localizer",
                phantom_diameter_cm=32,
            ),
            CtAcquisition(
                ctdivol_mgy=12.0,
                dlp_mgy_cm=450.0,
                phantom_diameter_cm=32,
                effective_diameter_cm=30.0,
            ),
            CtAcquisition(ctdivol_mgy=50.0, dlp_mgy_cm=800.0, phantom_diameter_cm=16),
            CtAcquisition(ctdivol_mgy=3.0),
        ],
        reported_dlp_total_mgy_cm=1258.0,
    )
    # by hand: 8 + 450 + 800 = 1258 mGy·cm over 3 of 4 acquisitions
    assert study.dlp_total_mgy_cm == pytest.approx(1258.0)
    assert study.dlp_subtotals_mgy_cm == {"32": 458.0, "16": 800.0}
    assert study.dlp_missing == 1
    assert study.ctdivol_max_mgy == 50.0  # the localiser is not a candidate; CTDIvol never summed
    assert study.ssde_max_mgy == pytest.approx(12.0 * 1.231, abs=0.01)  # f(30 cm) = 1.231
    assert study.comparisons[0].ratio == pytest.approx(1.0)
    assert "lower bound" in study.trail.assumptions[0]
