"""Skin-dose maps from dose reports: built TID 10001 reports read by ingest, mapped by the model.

No Radiation Dose SR ships in any installed package (DICOM-NOTES section 4), so the reports are
built to PS3.16 by tests/ingest/rdsr_builders.py (invented data). Two procedures of the same
total K_a,r show why a reference-point kerma is not a skin dose: one irradiates one patch of
skin from two overlapping projections, the other spreads the same kerma around the patient.
"""

from __future__ import annotations

import pytest
from ingest_samples import PSEUDONYMISER, to_bytes
from rdsr_builders import EventGeometry, FluoroEvent, fluoroscopy_report

from beamaudit.ingest import read_bytes
from beamaudit.model import SkinEvent, skin_dose_map, substantial_dose_levels_crossed


def _events(report) -> list[SkinEvent]:
    result = read_bytes(to_bytes(report), pseudonymiser=PSEUDONYMISER, source="skin-test")
    return [SkinEvent.from_fields(e.as_dict()) for e in result.events]


def _run(kar_gy: float, primary_deg: float, pulses: int = 900) -> FluoroEvent:
    return FluoroEvent(
        dose_rp_gy=kar_gy,
        # DAP = K_a,r x the field at the reference point: 160 mm at 1150 mm is 91.8 mm at 660 mm
        dap_gy_m2=kar_gy * (0.16 * 660.0 / 1150.0) ** 2,
        field_area_m2=0.0400,
        pulses=pulses,
        geometry=EventGeometry(primary_angle_deg=primary_deg, secondary_angle_deg=0.0),
    )


def test_report_events_carry_what_the_map_needs() -> None:
    (event,) = _events(fluoroscopy_report([_run(1.5, -20.0)]))
    assert event.reference_point_air_kerma_mgy == 1500.0
    assert event.positioner_primary_angle_deg == -20.0
    assert (event.source_to_isocenter_mm, event.sid_mm) == (810.0, 1150.0)
    assert (event.field_width_mm, event.field_height_mm) == (160.0, 160.0)
    assert event.reference_point_definition == "isocenter_15cm_toward_source"
    assert (event.patient_table_relationship, event.patient_orientation_modifier) == (
        "headfirst",
        "supine",
    )
    assert event.filters == (("copper", 0.3), ("aluminium", 1.0))
    assert event.table_height_position_mm == 185.0


def test_overlapping_projections_pass_3_gy_where_spread_ones_do_not() -> None:
    # the same 6 Gy of K_a,r (above NCRP 168's 5 Gy) in each procedure
    overlapping = _events(fluoroscopy_report([_run(3.0, -4.0), _run(3.0, 4.0)]))
    spread = _events(fluoroscopy_report([_run(1.0, a) for a in (-120, -60, 0, 60, 120, 180)]))
    hot = skin_dose_map(overlapping)
    cool = skin_dose_map(spread)
    assert hot.peak_skin_dose_mgy > 3000.0 > cool.peak_skin_dose_mgy
    assert hot.area_above_cm2[3000.0] > 0 and cool.area_above_cm2[3000.0] == 0
    assert sorted(c.event_index for c in hot.contributors) == [0, 1]
    assert hot.events_used == 2 and not hot.events_skipped
    levels = {
        name: [
            c.crossed
            for c in substantial_dose_levels_crossed(
                peak_skin_dose_mgy=m.peak_skin_dose_mgy, reference_point_air_kerma_mgy=6000.0
            )
        ][:2]
        for name, m in (("hot", hot), ("cool", cool))
    }
    assert levels == {"hot": [True, True], "cool": [False, True]}


def test_assumptions_name_the_room_defaults_used() -> None:
    m = skin_dose_map(_events(fluoroscopy_report([_run(1.0, 0.0)])))
    text = " ".join(m.assumptions)
    assert "table pad" in text and "uncalibrated" in text
    assert "inherent 2.5 mm Al assumed" in " ".join(m.factor_sources)
    assert m.uncertainty.expanded_pct == pytest.approx(52.0, abs=5.0)


def test_events_convert_from_the_records_themselves_too() -> None:
    result = read_bytes(
        to_bytes(fluoroscopy_report([_run(1.0, 30.0)])), pseudonymiser=PSEUDONYMISER, source="t"
    )
    (event,) = result.events
    values = {name: getattr(event, name) for name in ("filters", "kvp_kv", "event_key")}
    converted = SkinEvent.from_fields(values)
    assert converted.filters == (("copper", 0.3), ("aluminium", 1.0))
    assert converted.label == event.event_key
