"""The end-to-end demo: an invented hospital's files through the real ingest paths.

1. :func:`beamaudit.api.demo.generate.generate_scenario` writes the invented
   scenario as DICOM files (``DIR/dicom``) and its manifest.
2. The rooms' beam configurations and the QA measurements of the calibrated
   rooms are stored (as a physicist would enter them), so reconstruction uses
   them.
3. Rooms delivered by "folder" are read by the folder scan; rooms delivered by
   "cstore" are sent over DICOM C-STORE to the listener on a free loopback
   port; the broken files go through the folder scan too.
4. The national and the (invented) local reference-level sets are imported,
   and a monthly review runs for every month of the scenario.
5. :func:`compare_with_plan` sets the flags beside the planted findings.

Everything here is invented; nothing is a real patient, person or hospital.
"""

from __future__ import annotations

import json
from collections import Counter
from dataclasses import dataclass, field
from datetime import date
from pathlib import Path
from typing import Any

from sqlalchemy import select
from sqlalchemy.orm import Session, sessionmaker

from beamaudit.api.auth import record_change
from beamaudit.api.store import models as m

__all__ = ["DemoOutcome", "compare_with_plan", "run_demo"]


@dataclass
class DemoOutcome:
    manifest: dict[str, Any]
    scan: dict[str, Any] = field(default_factory=dict)
    cstore: dict[str, int] = field(default_factory=dict)
    run_ids: dict[str, int] = field(default_factory=dict)
    flags: list[dict[str, Any]] = field(default_factory=list)
    ingest_errors: list[dict[str, str]] = field(default_factory=list)


def _setup_rooms(sessions: sessionmaker[Session], manifest: dict[str, Any]) -> None:
    from beamaudit.model import FilterSpec, QAMeasurement, calibrate_room

    with sessions.begin() as session:
        for r in manifest["rooms"]:
            site_name = r.get("site") or manifest["institution"]
            site = session.scalar(select(m.Site).where(m.Site.name == site_name))
            if site is None:
                site = m.Site(name=site_name)
                session.add(site)
                session.flush()
            room = m.Room(
                site_id=site.id,
                name=r["station_name"],
                modality=r["modality"],
                anode_material=r.get("anode_material") or "tungsten",
                anode_angle_deg=float(r.get("anode_angle_deg") or 12.0),
                ripple_percent=float(r.get("ripple_percent") or 0.0),
                filtration=r.get("inherent_filtration") or None,
                table_to_detector_mm=r.get("table_to_detector_mm"),
            )
            session.add(room)
            session.flush()
            session.add(
                m.Device(
                    room_id=room.id,
                    station_name=r["station_name"],
                    manufacturer=r["manufacturer"],
                    model_name=r["model_name"],
                    serial_number=r["serial_number"],
                    device_observer_uid=r.get("device_observer_uid"),
                    institution_name=site_name,
                )
            )
            qa = r.get("qa_measurements") or []
            for q in qa:
                session.add(
                    m.QAMeasurementRow(
                        room_id=room.id,
                        measured_on=date.fromisoformat(q["measured_on"]),
                        kvp_kv=q["kvp_kv"],
                        filtration=q.get("filtration"),
                        distance_mm=q["distance_mm"],
                        output_ugy_per_mas=q["output_ugy_per_mas"],
                        hvl_mm_al=q.get("hvl_mm_al"),
                        note=q.get("note"),
                    )
                )
            if r.get("calibrated") and qa:
                cal = calibrate_room(
                    [
                        QAMeasurement(
                            kv=q["kvp_kv"],
                            filters=tuple(
                                FilterSpec(f["material"], f["thickness_mm"])
                                for f in q.get("filtration") or []
                            ),
                            distance_mm=q["distance_mm"],
                            measured_output_ugy_per_mas=q["output_ugy_per_mas"],
                            measured_hvl_mm_al=q.get("hvl_mm_al"),
                        )
                        for q in qa
                    ],
                    anode="W",
                    anode_angle_deg=room.anode_angle_deg,
                    ripple_percent=room.ripple_percent,
                )
                session.add(
                    m.RoomCalibrationRow(
                        room_id=room.id,
                        output_scale=cal.output_scale,
                        output_scale_uncertainty_rel=cal.output_scale_uncertainty_rel,
                        inherent_filtration_mm_al=cal.inherent_filtration_mm_al,
                        residuals=[
                            x.as_dict() if hasattr(x, "as_dict") else dict(x.__dict__)
                            for x in cal.residuals
                        ],
                        n_measurements=len(qa),
                    )
                )
            record_change(
                session,
                actor="demo",
                action="create",
                entity="room",
                entity_id=room.id,
                after={"name": room.name, "calibrated": bool(r.get("calibrated"))},
            )


def _send_cstore(folder: Path, port: int) -> dict[str, int]:
    """Send every file under ``folder`` to the listener with a pynetdicom SCU, one association."""
    from pydicom import dcmread
    from pynetdicom import AE

    files = sorted(p for p in folder.rglob("*") if p.is_file())
    datasets = [dcmread(p) for p in files]
    ae = AE(ae_title="DEMO_MODALITY")
    for uid in sorted({str(ds.SOPClassUID) for ds in datasets}):
        ae.add_requested_context(uid)
    counts: Counter[str] = Counter()
    assoc = ae.associate("127.0.0.1", port, ae_title="BEAMAUDIT")
    if not assoc.is_established:
        raise RuntimeError("the demo could not open an association with its own listener")
    try:
        for ds in datasets:
            status = assoc.send_c_store(ds)
            code = int(getattr(status, "Status", 0xFFFF))
            counts["success" if code == 0 else "failure"] += 1
    finally:
        assoc.release()
    return dict(counts)


def run_demo(
    sessions: sessionmaker[Session],
    *,
    output: Path,
    months: int,
    seed: int,
    key: bytes,
    end_month: str | None = None,
    workers: int = 2,
) -> DemoOutcome:
    """Generate, ingest through the real paths, import levels, review every month."""
    from beamaudit.api.demo.generate import generate_scenario
    from beamaudit.api.pipeline import Pipeline
    from beamaudit.api.postprocess import process_new_events
    from beamaudit.api.receiving import make_store_handler
    from beamaudit.api.review import (
        Period,
        ReviewParameters,
        load_demo_local_levels,
        load_national_levels,
    )
    from beamaudit.api.reviews import ensure_catalogue, run_review, store_level_sets
    from beamaudit.api.scanning import scan_paths
    from beamaudit.ingest.listener import ListenerConfig, start_listener
    from beamaudit.ingest.pseudonym import Pseudonymiser

    dicom = output / "dicom"
    generate_scenario(dicom, months=months, seed=seed, end_month=end_month)
    manifest = json.loads((dicom / "manifest.json").read_text(encoding="utf-8"))
    outcome = DemoOutcome(manifest=manifest)
    _setup_rooms(sessions, manifest)
    with sessions.begin() as session:
        ensure_catalogue(session, actor="demo")
        store_level_sets(
            session, [*load_national_levels(), *load_demo_local_levels()], actor="demo"
        )
    pipeline = Pipeline(sessions)
    folders = [dicom / r["path"] for r in manifest["rooms"] if r["delivery"] == "folder"]
    summary = scan_paths([*folders, dicom / "broken"], pipeline=pipeline, key=key, workers=workers)
    outcome.scan = summary.as_dict()
    received: list[int] = []  # reconstructed in one batch after the sends
    handler = make_store_handler(pipeline, Pseudonymiser(key), after_store=received.extend)
    with start_listener(ListenerConfig(port=0), handler) as listener:
        for r in manifest["rooms"]:
            if r["delivery"] == "cstore":
                for k, v in _send_cstore(dicom / r["path"], listener.port).items():
                    outcome.cstore[k] = outcome.cstore.get(k, 0) + v
    process_new_events(sessions, [*summary.stored_event_ids, *received])
    params = manifest.get("review_parameters") or {}
    known = set(ReviewParameters.__dataclass_fields__)
    overrides: dict[str, Any] = {
        k: (tuple(v) if isinstance(v, list) else v) for k, v in params.items() if k in known
    }
    for month in manifest["months"]:
        p = ReviewParameters(period=Period.parse(month), **overrides)
        outcome.run_ids[month] = run_review(sessions, p, kind="monthly", actor="demo")
    with sessions() as session:
        for month, run_id in outcome.run_ids.items():
            run = session.get(m.ReviewRun, run_id)
            for f in (run.result or {}).get("flags", []) if run else []:
                outcome.flags.append({**f, "period": month})
        outcome.ingest_errors = [
            {"source": e.source, "code": e.code, "reason": e.reason}
            for e in session.scalars(select(m.IngestError).order_by(m.IngestError.id))
        ]
    return outcome


_KIND_OF_PLANT = {
    "dap_ratio": "dap_ratio_out_of_tolerance",
    "change_point": "changepoint",
    "unmapped_protocol": "unmapped_events",
}


def _room_of(flag: dict[str, Any]) -> str | None:
    return (flag.get("concerns") or {}).get("room")


def compare_with_plan(outcome: DemoOutcome) -> dict[str, Any]:
    """Each planted finding with the flags (or ingest errors) that found it; the unplanted flags."""
    rooms = {r["name"]: r["station_name"] for r in outcome.manifest["rooms"]}
    used: set[int] = set()
    found = []
    for plant in outcome.manifest["planted_findings"]:
        kind = _KIND_OF_PLANT.get(plant["kind"], plant["kind"])
        if kind == "ingest_error":
            name = Path(plant.get("paths", [""])[0] or plant["id"]).name
            hits = [e for e in outcome.ingest_errors if Path(e["source"]).name == name]
            found.append(
                {
                    "plant": plant["id"],
                    "kind": kind,
                    "found": bool(hits),
                    "by": [e["reason"] for e in hits],
                }
            )
            continue
        station = rooms.get(plant.get("room") or "", plant.get("station_name"))
        uids = set(plant.get("study_instance_uids") or [])
        hit_indices: list[int] = []
        for i, f in enumerate(outcome.flags):
            if f["kind"] != kind:
                continue
            where = f.get("concerns") or {}
            if uids and where.get("study_uid") not in uids:
                continue
            if station and where.get("room") not in (station, None):
                continue
            if plant.get("exam_type") and where.get("exam_type") not in (plant["exam_type"], None):
                continue
            quantities = (plant.get("expected") or {}).get("quantities") or [plant.get("quantity")]
            if (
                kind == "changepoint"
                and plant.get("quantity")
                and where.get("quantity")
                not in (
                    *quantities,
                    None,
                )
            ):
                continue
            hit_indices.append(i)
        used.update(hit_indices)
        found.append(
            {
                "plant": plant["id"],
                "kind": kind,
                "found": bool(hit_indices),
                "required": plant.get("required", True),
                "by": [outcome.flags[i]["reason"] for i in hit_indices[:3]],
            }
        )
    unplanted = [f for i, f in enumerate(outcome.flags) if i not in used]
    return {"planted": found, "unplanted": unplanted}
