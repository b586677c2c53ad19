"""Events completed in the storing transaction equal events completed after storing.

:class:`beamaudit.api.intake.postprocess.Completion` maps and reconstructs rows before they are
inserted; :func:`beamaudit.api.intake.postprocess.process_new_events` does it to stored events. The
reference for the figures themselves is ``tests/api/test_reconstruct.py`` (the model one event
at a time); here both paths must store the same columns, event for event, on each backend.
"""

from __future__ import annotations

import math
from dataclasses import replace

from sqlalchemy import select

from beamaudit.api.intake.pipeline import Pipeline
from beamaudit.api.intake.postprocess import Completion, process_new_events
from beamaudit.api.store import models as m
from beamaudit.ingest.events import ExposureEvent, FilterLayer, ParseResult, SourceObject

_IDENTITY = {"id", "event_key", "source_object_id", "study_id", "stored_at"}


def _event(sop: str, study: str, i: int, **kw: object) -> ExposureEvent:
    values: dict[str, object] = {
        "event_key": f"{sop}#{i}",
        "sop_instance_uid": sop,
        "sop_class_uid": "1.2.840.10008.5.1.4.1.1.1.1",
        "source_kind": "image_header",
        "event_index": i,
        "modality": "DX",
        "modality_family": "projection",
        "study_instance_uid": study,
        "station_name": "RAD-COMPLETE",
        "manufacturer": "Invented Medical",
        "model_name": "Model C",
        "device_serial_number": "SN-12",
        "institution_name": "Hollowbrook General (invented)",
        "body_part": "CHEST",
        "view_position": "PA",
        "protocol_name": "Chest PA",
        "kvp_kv": 81.0,
        "exposure_mas": 4.0,
        "sid_mm": 1800.0,
        "dap_gy_cm2": 0.11,
        "filters": (FilterLayer("aluminium", 1.0),),
        "provenance": {"kvp_kv": "(0018,0060) KVP"},
    }
    values.update(kw)
    return ExposureEvent(**values)  # type: ignore[arg-type]


def _objects(prefix: str) -> list[ParseResult]:
    """Invented objects covering every outcome: figures, no technique, CT, a model failure,
    a second room, unmapped raw values, a calibrated room."""
    out = []
    variants: list[dict[str, object]] = [
        {},
        {"kvp_kv": 102.0, "exposure_mas": 2.5, "body_part_thickness_mm": 260.0},
        {"kvp_kv": 70.0, "exposure_mas": 20.0, "body_part": "ABDOMEN", "view_position": "AP",
         "protocol_name": "Abdomen AP"},
        {"field_width_mm": 300.0, "field_height_mm": 240.0, "field_plane": "detector"},
        {"kvp_kv": None, "exposure_mas": None, "notes": ["kVp recorded as 0"]},
        {"body_part_thickness_mm": 5000.0},  # thicker than the SID: the model refuses
        {"modality": "CT", "modality_family": "ct", "ctdivol_mgy": 12.0, "kvp_kv": 120.0},
        {"station_name": "RAD-OTHER", "protocol_name": "Unheard-of protocol", "body_part": None},
        {"collimator_edges_px": (100, 2900, 80, 2400), "imager_pixel_spacing_mm": (0.14, 0.14)},
    ]  # fmt: skip
    for k, extra in enumerate(variants):
        sop = f"{prefix}.{k}"
        study = f"{prefix}.9{k}"
        events = [_event(sop, study, 0, **extra), _event(sop, study, 1, **extra)]
        source = SourceObject(
            sop_instance_uid=sop,
            sop_class_uid=events[0].sop_class_uid,
            kind="image_header",
            modality=str(extra.get("modality", "DX")),
            study_instance_uid=study,
        )
        out.append(ParseResult(source, events, [], ["a reading warning"] if k == 3 else []))
    return out


def _rows(store, prefix: str) -> list[dict[str, object]]:
    with store.session_factory() as s:
        rows = s.scalars(
            select(m.ExposureEventRow)
            .where(m.ExposureEventRow.event_key.like(f"{prefix}.%"))
            .order_by(m.ExposureEventRow.event_key)
        ).all()
        return [
            {c.key: getattr(r, c.key) for c in m.ExposureEventRow.__table__.columns} for r in rows
        ]


def _calibrate_the_room(store) -> None:
    """Store one object so that the device and its room exist, then configure the room."""
    Pipeline(store.session_factory).store(_objects("1.2.826.0.1.3680043.8.498.40")[0],
                                          received_via="scan")  # fmt: skip
    with store.session_factory.begin() as s:
        room = s.scalars(select(m.Room).where(m.Room.name == "RAD-COMPLETE")).one()
        room.filtration = [{"material": "aluminium", "thickness_mm": 3.0}]
        s.add(
            m.RoomCalibrationRow(
                room_id=room.id,
                output_scale=1.08,
                output_scale_uncertainty_rel=0.05,
                inherent_filtration_mm_al=None,
                n_measurements=6,
                active=True,
            )
        )


def test_completion_stores_what_the_later_pass_stores(store) -> None:
    _calibrate_the_room(store)
    before, after = "1.2.826.0.1.3680043.8.498.41", "1.2.826.0.1.3680043.8.498.42"
    completion = Completion()
    outcomes = Pipeline(store.session_factory, completion=completion).store_many(
        [(r, None, None) for r in _objects(before)], received_via="scan"
    )
    assert all(o.status == "stored" for o in outcomes)
    plain = Pipeline(store.session_factory).store_many(
        [(r, None, None) for r in _objects(after)], received_via="scan"
    )
    summary = process_new_events(store.session_factory, [i for o in plain for i in o.event_ids])
    assert completion.summary.as_dict() == summary.as_dict()
    assert summary.as_dict() == {
        "reconstructed": 12,
        "no_technique": 2,
        "not_applicable": 2,
        "failed": 2,
    }
    completed, later = _rows(store, before), _rows(store, after)
    assert len(completed) == len(later) == 18
    for a, b in zip(completed, later, strict=True):
        for column in a.keys() - _IDENTITY:
            x, y = a[column], b[column]
            if isinstance(x, float) and isinstance(y, float):
                assert math.isclose(x, y, rel_tol=1e-12), column
            else:
                assert x == y, (column, x, y)
    statuses = {r["recon_status"] for r in completed}
    assert statuses == {"ok", "no_technique", "not_applicable", "failed"}
    exam_types = {r["exam_type"] for r in completed}
    assert None in exam_types and len(exam_types) > 2  # the unheard-of protocol: unmapped
    assert any(r["recon_calibrated"] for r in completed)


def test_completion_follows_rules_and_rooms_changed_between_batches(store) -> None:
    completion = Completion()
    pipeline = Pipeline(store.session_factory, completion=completion)
    first = _objects("1.2.826.0.1.3680043.8.498.43")[0]
    pipeline.store(first, received_via="listen")
    with store.session_factory() as s:
        mapped = s.scalars(select(m.ExposureEventRow.exam_type)).first()
        room = s.scalars(select(m.Room).where(m.Room.name == "RAD-COMPLETE")).one()
        old_dap = s.scalars(select(m.ExposureEventRow.recon_dap_gy_cm2)).first()
    assert mapped is not None
    # a physicist edits the rules (every chest now maps elsewhere) and the room's filtration
    with store.session_factory.begin() as s:
        rule = s.scalars(select(m.MappingRuleRow).order_by(m.MappingRuleRow.priority)).first()
        assert rule is not None
        rule.patterns = {"modality": "DX"}
        rule.priority = -1
        s.get(m.Room, room.id).filtration = [{"material": "aluminium", "thickness_mm": 6.0}]
    second = _objects("1.2.826.0.1.3680043.8.498.44")[0]
    pipeline.store(replace(second), received_via="listen")
    with store.session_factory() as s:
        latest = s.scalars(
            select(m.ExposureEventRow).order_by(m.ExposureEventRow.id.desc())
        ).first()
    assert latest is not None
    assert latest.exam_type == rule.exam_type
    assert latest.recon_dap_gy_cm2 is not None and old_dap is not None
    assert latest.recon_dap_gy_cm2 < old_dap  # more filtration, less air kerma per mAs
