"""Reconstruction of stored events in bulk: the same figures as the model one by one, and trails.

The reference for every stored figure is :func:`beamaudit.model.dose_from_beam` on the same beam
and geometry, itself checked against the published formulas in ``tests/model``; here the bulk
path through the store must agree with it, and the why trail made again on demand must give the
stored numbers.
"""

from __future__ import annotations

import math
from dataclasses import replace

import pytest
from sqlalchemy import select

from beamaudit.api.intake.pipeline import Pipeline
from beamaudit.api.intake.reconstruct import (
    RECIPE_KIND,
    _BeamCache,
    _geometry,
    reconstruct_events,
    trail_for_event,
)
from beamaudit.api.store import models as m
from beamaudit.ingest.events import ExposureEvent, FilterLayer, ParseResult, SourceObject
from beamaudit.model import dose_from_beam

STUDY = "1.2.826.0.1.3680043.8.498.77"


def _event(sop: str, i: int, **kw) -> ExposureEvent:
    values = {
        "event_key": f"{sop}#{i}",
        "sop_instance_uid": sop,
        "sop_class_uid": "1.2.840.10008.5.1.4.1.1.1.1",
        "source_kind": "image_header",
        "event_index": i,
        "modality": "DX",
        "study_instance_uid": STUDY,
        "station_name": "RAD-RECON",
        "manufacturer": "Invented Medical",
        "model_name": "Model R",
        "device_serial_number": "SN-9",
        "institution_name": "Hollowbrook General (invented)",
        "body_part": "CHEST",
        "view_position": "PA",
        "kvp_kv": 81.0,
        "exposure_mas": 4.0,
        "sid_mm": 1800.0,
        "dap_gy_cm2": 0.11,
        "filters": (FilterLayer("aluminium", 1.0),),
    }
    values.update(kw)
    return ExposureEvent(**values)


def _store(store, events: list[ExposureEvent], sop: str = "1.2.3.100") -> list[int]:
    src = SourceObject(
        sop_instance_uid=sop,
        sop_class_uid="1.2.840.10008.5.1.4.1.1.1.1",
        kind="image_header",
        modality="DX",
        study_instance_uid=STUDY,
    )
    out = Pipeline(store.session_factory).store(
        ParseResult(source=src, events=events), received_via="scan"
    )
    return out.event_ids


def _one_by_one(session, row: m.ExposureEventRow):
    """The figures of ``row`` from the model called for this one event (no store, no bulk)."""
    from beamaudit.api.intake.reconstruct import _event_beam

    room = session.get(m.Room, row.room_id)
    beam = _event_beam(row, room, None, _BeamCache())
    return dose_from_beam(
        beam,
        exposure_mas=row.exposure_mas,
        geometry=_geometry(row, room),
        reported_dap_gy_cm2=row.dap_gy_cm2,
    )


def test_bulk_figures_equal_the_model_one_by_one(store) -> None:
    sop = "1.2.3.101"
    events = [
        _event(sop, 0),
        _event(sop, 1, kvp_kv=102.0, exposure_mas=2.5, body_part_thickness_mm=260.0),
        _event(sop, 2, kvp_kv=70.0, exposure_mas=20.0, body_part="ABDOMEN", view_position="AP"),
        _event(sop, 3, field_width_mm=300.0, field_height_mm=240.0, field_plane="detector"),
    ]
    ids = _store(store, events, sop)
    summary = reconstruct_events(store.session_factory, ids)
    assert summary.reconstructed == len(events)
    with store.session_factory() as s:
        for row in s.scalars(select(m.ExposureEventRow).order_by(m.ExposureEventRow.id)):
            ref = _one_by_one(s, row)
            assert row.recon_status == "ok"
            for stored, expected in (
                (row.recon_dap_gy_cm2, ref.dap.value),
                (row.recon_dap_u_gy_cm2, ref.dap.standard_uncertainty),
                (row.recon_incident_air_kerma_mgy, ref.incident_air_kerma.value),
                (row.recon_esak_mgy, ref.esak.value),
                (row.recon_esak_u_mgy, ref.esak.standard_uncertainty),
                (row.recon_entrance_dose_mgy, ref.entrance_dose.value),
                (row.recon_backscatter_factor, ref.backscatter_factor.value),
                (row.recon_fsd_mm, ref.fsd.value),
                (row.recon_hvl1_mm_al, ref.hvl1_mm_al),
            ):
                assert math.isclose(stored, expected, rel_tol=1e-9)
            assert math.isclose(row.dap_ratio_reported_to_recon, 0.11 / ref.dap.value)
            # the trail is kept as its recipe and made again on demand
            assert row.recon_trail["kind"] == RECIPE_KIND
            trail = trail_for_event(s, row)
            assert math.isclose(trail["dap_gy_cm2"], row.recon_dap_gy_cm2, rel_tol=1e-12)
            assert trail["recipe"]["room"]["id"] == row.room_id
            assert not any("software version" in n for n in trail.get("notes", []))
            # asked again: the kept trail, each caller with a copy of its own
            again = trail_for_event(s, row)
            assert again == trail and again is not trail
            again["recipe"]["room"]["id"] = -1
            again.setdefault("notes", []).append("changed by a caller")
            assert trail_for_event(s, row) == trail


def test_trail_uses_the_calibration_that_made_the_figures(store) -> None:
    ids = _store(store, [_event("1.2.3.102", 0)], "1.2.3.102")
    with store.session_factory.begin() as s:
        room_id = s.get(m.ExposureEventRow, ids[0]).room_id
        s.add(
            m.RoomCalibrationRow(
                room_id=room_id, output_scale=1.3, n_measurements=4, residuals=[], active=True
            )
        )
    reconstruct_events(store.session_factory, ids)
    with store.session_factory.begin() as s:
        row = s.get(m.ExposureEventRow, ids[0])
        assert row.recon_calibrated is True
        stored_dap = row.recon_dap_gy_cm2
        # the calibration is replaced afterwards: the trail still shows the one that was used
        for cal in s.scalars(select(m.RoomCalibrationRow)):
            cal.active = False
        s.add(
            m.RoomCalibrationRow(
                room_id=room_id, output_scale=0.5, n_measurements=2, residuals=[], active=True
            )
        )
    with store.session_factory() as s:
        row = s.get(m.ExposureEventRow, ids[0])
        trail = trail_for_event(s, row)
        assert math.isclose(trail["dap_gy_cm2"], stored_dap, rel_tol=1e-12)
        assert trail["recipe"]["calibration"]["output_scale"] == 1.3
        assert trail["calibrated"] is True


def test_outcomes_other_than_figures(store) -> None:
    sop = "1.2.3.103"
    events = [
        _event(sop, 0, kvp_kv=None, exposure_mas=None),  # CR reader recorded 0: no technique
        _event(sop, 1, body_part_thickness_mm=5000.0),  # thicker than the SID: impossible
        replace(_event(sop, 2), modality="CT", modality_family="ct"),
    ]
    ids = _store(store, events, sop)
    summary = reconstruct_events(store.session_factory, ids)
    assert summary.as_dict() == {
        "reconstructed": 0,
        "no_technique": 1,
        "not_applicable": 1,
        "failed": 1,
    }
    with store.session_factory() as s:
        rows = {r.event_index: r for r in s.scalars(select(m.ExposureEventRow))}
        assert rows[0].recon_status == "no_technique" and rows[0].recon_dap_gy_cm2 is None
        assert rows[1].recon_status == "failed"
        assert any(n.startswith("reconstruction failed:") for n in rows[1].notes)
        assert rows[2].recon_status == "not_applicable"
        assert trail_for_event(s, rows[0]) is None


def test_a_trail_stored_whole_is_returned_as_it_is(store) -> None:
    ids = _store(store, [_event("1.2.3.104", 0)], "1.2.3.104")
    with store.session_factory.begin() as s:
        s.get(m.ExposureEventRow, ids[0]).recon_trail = {"dap_gy_cm2": 0.1, "steps": []}
    with store.session_factory() as s:
        assert trail_for_event(s, s.get(m.ExposureEventRow, ids[0])) == {
            "dap_gy_cm2": 0.1,
            "steps": [],
        }


# -- distances by their IOD's definition, the table, and what was assumed -------------------------
# Hand-worked examples from the DICOM definitions: Distance Source to Patient (0018,1111) is the
# distance from the source to the table, support or bucky side nearest the patient in DX, CR and
# MG images (PS3.3 C.8.11.7, DX Positioning) and from the source to the isocentre in XA and XRF
# images (PS3.3 C.8.7.5 XA Positioner, read in a standard excerpt; C.8.7.6 XRF Positioner, from
# memory). With the patient taken as centred on the isocentre the entrance surface lies half a
# thickness before it: FSD = 765 - 220 / 2 = 655 mm (not 765 - 220 = 545 mm, which would make the
# incident air kerma (655/545)^2 = 1.44 times too high). Under-couch tubes see the table top and
# mattress (tests/model/test_patient_support.py for the physics).


def _reconstructed(store, event, sop: str, **room_settings) -> tuple[m.ExposureEventRow, dict]:
    ids = _store(store, [event], sop)
    if room_settings:
        with store.session_factory.begin() as s:
            room = s.get(m.Room, s.get(m.ExposureEventRow, ids[0]).room_id)
            for name, value in room_settings.items():
                setattr(room, name, value)
    reconstruct_events(store.session_factory, ids)
    with store.session_factory() as s:
        row = s.get(m.ExposureEventRow, ids[0])
        s.expunge(row)
        return row, trail_for_event(s, s.merge(row)) or {}


def _fluoro(sop: str, modality: str, **kw):
    return _event(
        sop,
        0,
        modality=modality,
        source_to_patient_mm=765.0,
        body_part_thickness_mm=220.0,
        sid_mm=1100.0,
        field_width_mm=200.0,
        field_height_mm=200.0,
        provenance={"source_to_patient_mm": "(0018,1111) DistanceSourceToPatient"},
        **kw,
    )


@pytest.mark.parametrize("modality", ["XA", "RF"])
def test_xa_and_xrf_distance_source_to_patient_is_to_the_isocentre(store, modality: str) -> None:
    row, trail = _reconstructed(store, _fluoro("1.2.3.31", modality), "1.2.3.31")
    assert row.recon_status == "ok"
    assert row.recon_fsd_mm == pytest.approx(765.0 - 220.0 / 2)  # 655 mm
    fsd_steps = [s for s in trail["figures"]["fsd_mm"]["trail"] if s["quantity"] == "fsd_mm"]
    assert fsd_steps[-1]["equation"] == "FSD = d_iso - t/2"
    assert "source to isocentre in XA and XRF images" in fsd_steps[-1]["source"]
    assert "patient taken as centred on the isocentre" in trail["assumptions"]


def test_dx_distance_source_to_patient_stays_the_table_side(store) -> None:
    event = _event(
        "1.2.3.40", 0, source_to_patient_mm=1000.0, body_part_thickness_mm=220.0,
        provenance={"source_to_patient_mm": "(0018,1111) DistanceSourceToPatient"},
    )  # fmt: skip
    row, _ = _reconstructed(store, event, "1.2.3.40")
    assert row.recon_fsd_mm == pytest.approx(1000.0 - 220.0)


def test_an_xa_room_that_does_not_say_gets_the_default_table(store) -> None:
    row, trail = _reconstructed(store, _fluoro("1.2.3.50", "XA"), "1.2.3.50")
    transmission = trail["table_transmission"]
    assert 0.6 < transmission < 0.9
    # K_a,i = Y P_It (1 m / FSD)^2 T, by hand from the trail's own numbers
    by_hand = trail["output_ugy_per_mas_1m"] * 4.0 * (1000.0 / 655.0) ** 2 / 1000 * transmission
    assert row.recon_incident_air_kerma_mgy == pytest.approx(by_hand, rel=1e-9)
    notes = " ".join(trail["assumptions"])
    assert "tube taken as below the table (the usual for XA" in notes
    assert "table top and mattress taken as 1.5 mm Al" in notes


def test_room_settings_for_the_table(store) -> None:
    measured, trail = _reconstructed(
        store, _fluoro("1.2.3.60", "XA"), "1.2.3.60", tube_side="below", table_transmission=0.8
    )
    assert trail["table_transmission"] == 0.8
    assert not any("tube taken as below" in a for a in trail["assumptions"])
    over, trail_over = _reconstructed(
        store, _fluoro("1.2.3.61", "RF", station_name="RF-OVER"), "1.2.3.61", tube_side="above"
    )
    assert trail_over["table_transmission"] is None
    assert over.recon_incident_air_kerma_mgy == pytest.approx(
        measured.recon_incident_air_kerma_mgy / 0.8 * over.recon_output_ugy_per_mas_1m
        / measured.recon_output_ugy_per_mas_1m, rel=1e-9
    )  # fmt: skip
    _, trail_layers = _reconstructed(
        store, _fluoro("1.2.3.62", "XA", station_name="XA-LAYERS"), "1.2.3.62",
        table_filtration=[{"material": "aluminium", "thickness_mm": 0.8}],
    )  # fmt: skip
    # 0.8 mm Al of table and mattress transmit more than the 1.5 mm Al default
    _, trail_default = _reconstructed(
        store, _fluoro("1.2.3.63", "XA", station_name="XA-D"), "1.2.3.63"
    )
    assert trail_layers["table_transmission"] > trail_default["table_transmission"]
    assert not any("no room setting" in a for a in trail_layers["assumptions"])


def test_default_inherent_filtration_before_added_filters_is_said(store) -> None:
    # the event records an added 1 mm Al; the room has no filtration configured: the model puts
    # the IEC 60601-1-3 minimum in front of it, and says so (it changes every figure)
    row, trail = _reconstructed(store, _event("1.2.3.70", 0), "1.2.3.70")
    assert row.recon_status == "ok"
    assert any(
        "the room has no filtration configured: 2.5 mm Al" in a for a in trail["assumptions"]
    )
    steps = trail["figures"]["incident_air_kerma_mgy"]["trail"]
    assert any(s["assumed"] and "no filtration configured" in (s["note"] or "") for s in steps)


def test_a_room_with_filtration_assumes_nothing_about_it(store) -> None:
    row, trail = _reconstructed(
        store, _event("1.2.3.71", 0, station_name="RAD-FILTERED"), "1.2.3.71",
        filtration=[{"material": "aluminium", "thickness_mm": 2.7}],
    )  # fmt: skip
    assert row.recon_status == "ok"
    assert not any("filtration" in a for a in trail["assumptions"])


def test_trail_says_where_b_comes_from(store) -> None:
    _, trail = _reconstructed(store, _event("1.2.3.80", 0, station_name="RAD-B"), "1.2.3.80")
    assert "beamaudit Monte Carlo backscatter kernels" in trail["backscatter_factor_source"]
    assert (
        "weighted by this beam's incident air-kerma spectrum" in trail["backscatter_factor_source"]
    )
    assert trail["backscatter_factor_standard_uncertainty"] > 0


def _recalibrate(store, event_id: int, **values) -> None:
    """The event's room gets a new active calibration (the older ones retired)."""
    with store.session_factory.begin() as s:
        room_id = s.get(m.ExposureEventRow, event_id).room_id
        for cal in s.scalars(select(m.RoomCalibrationRow)):
            cal.active = False
        s.add(m.RoomCalibrationRow(room_id=room_id, residuals=[], active=True, **values))


def test_the_exam_page_draws_the_beam_of_the_recipe_after_a_recalibration(store) -> None:
    # the page's spectrum and HVL come from the stored recipe, as the why trail beside them does
    from beamaudit.api.web.page_data import exam_record

    ids = _store(store, [_event("1.2.3.103", 0)], "1.2.3.103")
    _recalibrate(store, ids[0], output_scale=1.3, inherent_filtration_mm_al=2.5, n_measurements=4)
    reconstruct_events(store.session_factory, ids)
    # recalibrated afterwards, with more filtration: a harder beam now
    _recalibrate(store, ids[0], output_scale=0.5, inherent_filtration_mm_al=4.0, n_measurements=2)
    with store.session_factory() as s:
        row = s.get(m.ExposureEventRow, ids[0])
        record = exam_record(s, STUDY)
    assert record is not None
    (exposure,) = record["exposures"]
    assert math.isclose(exposure["spectrum"]["hvl1_mm_al"], row.recon_hvl1_mm_al, rel_tol=1e-9)


def test_warm_up_loads_the_model_tables_a_serving_process_needs() -> None:
    # serve (one worker or many) calls it before its first request: the first trails of a
    # burst of requests then cost what later ones cost (issue #24, bench_load's tail)
    from beamaudit.api.intake import reconstruct

    reconstruct.warm_up()
    beam = reconstruct._TRAIL_BEAMS.get(kvp_kv=80.0, filters=None, room=None, calibration=None)
    assert beam.hvl1_mm_al > 0


def test_a_trail_made_again_is_kept_for_the_event_as_it_is_stored(store) -> None:
    """A page or client asking for the same event again gets the trail kept from the first
    time (the model is not run again), its own copy; a changed event gets a new trail."""
    from unittest import mock

    from beamaudit.api.intake import reconstruct

    ids = _store(store, [_event("1.2.3.103", 0)], "1.2.3.103")
    reconstruct_events(store.session_factory, ids)
    with store.session_factory() as s:
        row = s.get(m.ExposureEventRow, ids[0])
        first = trail_for_event(s, row)
        first["dap_gy_cm2"] = -1.0  # the caller's copy: the kept trail does not change
        with mock.patch.object(reconstruct, "_trail_made_again", side_effect=AssertionError):
            again = trail_for_event(s, row)
        assert math.isclose(again["dap_gy_cm2"], row.recon_dap_gy_cm2, rel_tol=1e-12)
        row.exposure_mas = row.exposure_mas * 2  # another stored value: made again
        changed = trail_for_event(s, row)
        assert math.isclose(changed["dap_gy_cm2"], 2 * row.recon_dap_gy_cm2, rel_tol=1e-9)
