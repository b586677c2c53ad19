"""Reconstruction of stored events in bulk: the same figures as the model one by one, and trails.

The reference for every stored figure is :func:`beamaudit.model.dose_from_beam` on the same beam
and geometry, itself checked against the published formulas in ``tests/model``; here the bulk
path through the store must agree with it, and the why trail made again on demand must give the
stored numbers.
"""

from __future__ import annotations

import math
from dataclasses import replace

from sqlalchemy import select

from beamaudit.api.pipeline import Pipeline
from beamaudit.api.reconstruct import (
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
    from beamaudit.api.reconstruct import _filters

    room = session.get(m.Room, row.room_id)
    beam = _BeamCache().get(
        kvp_kv=row.kvp_kv, filters=_filters(room, row, None), room=room, calibration=None
    )
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
