"""NCRP Report 168 substantial radiation dose levels and cumulative skin dose (model.followup)."""

from __future__ import annotations

from datetime import datetime

import numpy as np
import pytest

from beamaudit.model import ModelError
from beamaudit.model.followup import (
    FOLLOW_UP_LEVELS_MGY,
    cumulative_skin_dose,
    substantial_dose_levels,
    substantial_dose_levels_crossed,
)
from beamaudit.model.patient_model import patient_model
from beamaudit.model.skin_dose import skin_dose_map
from beamaudit.model.skin_events import SkinEvent
from beamaudit.model.skin_factors import FixedBeamFactors


def test_levels_are_ncrp_168s() -> None:
    # NCRP Report 168 (2010), from memory (PUBLISHED-VALUES h, confidence high): PSD 3 Gy,
    # K_a,r 5 Gy, P_KA 500 Gy cm2, fluoroscopy time 60 min
    levels = {k: (v.value, v.unit) for k, v in substantial_dose_levels().items()}
    assert levels == {
        "peak_skin_dose": (3000.0, "mGy"),
        "reference_point_air_kerma": (5000.0, "mGy"),
        "air_kerma_area_product": (500.0, "Gy.cm2"),
        "fluoroscopy_time": (60.0, "min"),
    }
    assert all("NCRP Report No. 168" in v.source for v in substantial_dose_levels().values())
    assert FOLLOW_UP_LEVELS_MGY == (2000.0, 3000.0, 5000.0)


def test_which_levels_were_crossed_and_by_how_much() -> None:
    checks = substantial_dose_levels_crossed(
        peak_skin_dose_mgy=3600.0,
        reference_point_air_kerma_mgy=4200.0,
        dap_gy_cm2=500.0,  # at the level counts as reached
        fluoroscopy_time_s=45 * 60.0,
    )
    by_key = {c.key: c for c in checks}
    psd = by_key["peak_skin_dose"]
    assert (psd.crossed, psd.ratio, psd.excess) == (True, pytest.approx(1.2), pytest.approx(600.0))
    assert by_key["reference_point_air_kerma"].crossed is False
    assert by_key["air_kerma_area_product"].crossed is True
    time = by_key["fluoroscopy_time"]
    assert (time.value, time.crossed) == (45.0, False)
    assert "1.20 x the 3000 mGy level" in psd.describe()


def test_unknown_values_are_not_known_not_below() -> None:
    (psd, *_rest) = substantial_dose_levels_crossed(reference_point_air_kerma_mgy=100.0)
    assert (psd.value, psd.crossed, psd.ratio) == (None, None, None)
    assert "not known" in psd.describe()


def test_pka_level_scales_with_the_field_at_the_skin() -> None:
    # NCRP 168's note (from memory): 500 Gy cm2 for 100 cm2; in proportion for other fields
    checks = substantial_dose_levels_crossed(dap_gy_cm2=600.0, skin_field_area_cm2=200.0)
    pka = next(c for c in checks if c.key == "air_kerma_area_product")
    assert (pka.level, pka.crossed) == (1000.0, False)


def test_negative_totals_are_refused() -> None:
    with pytest.raises(ModelError, match="positive"):
        substantial_dose_levels_crossed(dap_gy_cm2=-1.0)


def _map(kar: float, primary: float = 0.0, height_m: float | None = None):
    event = SkinEvent(
        reference_point_air_kerma_mgy=kar,
        positioner_primary_angle_deg=primary,
        positioner_secondary_angle_deg=0.0,
        body_part="CHEST",
    )
    return skin_dose_map(
        [event], patient=patient_model(height_m=height_m), factors=FixedBeamFactors()
    )


def test_maps_of_one_patient_on_one_frame_are_added_cell_by_cell() -> None:
    a, b, c = _map(1000.0), _map(2000.0), _map(1500.0, primary=180.0)
    both = cumulative_skin_dose([a, b])
    assert both.method == "maps_added_assumed_alignment"  # the chest taken at the isocentre
    assert both.peak_skin_dose_mgy == pytest.approx(a.peak_skin_dose_mgy + b.peak_skin_dose_mgy)
    # back and front do not add: the peak of the sum is the larger, the bound the sum of peaks
    opposite = cumulative_skin_dose([a, c])
    assert opposite.peak_skin_dose_mgy == pytest.approx(
        max(a.peak_skin_dose_mgy, c.peak_skin_dose_mgy)
    )
    assert opposite.upper_bound_mgy == pytest.approx(a.peak_skin_dose_mgy + c.peak_skin_dose_mgy)
    assert np.allclose(opposite.dose_mgy, a.dose_mgy + c.dose_mgy)


def test_maps_on_different_frames_add_their_peaks_as_an_upper_bound() -> None:
    a, b = _map(1000.0), _map(1000.0, height_m=1.55)
    result = cumulative_skin_dose([a, b])
    assert result.method == "peaks_added"
    assert result.peak_skin_dose_mgy == result.upper_bound_mgy
    assert result.lower_bound_mgy == pytest.approx(max(a.peak_skin_dose_mgy, b.peak_skin_dose_mgy))


def test_window_keeps_the_procedures_of_the_last_60_days() -> None:
    maps = [_map(1000.0), _map(1000.0), _map(1000.0)]
    dates = [datetime(2026, 1, 5), datetime(2026, 3, 1), datetime(2026, 4, 10)]
    result = cumulative_skin_dose(maps, dates=dates, window_days=60.0)
    assert result.procedures_used == (1, 2)  # 5 January lies 95 days before 10 April
    assert result.peak_skin_dose_mgy == pytest.approx(2 * maps[0].peak_skin_dose_mgy)
    assert any("window" in n for n in result.notes)
    assert cumulative_skin_dose([]).method == "none"
