"""Storing parsed objects: idempotence, conflicts, studies, devices, and header/report linking."""

from __future__ import annotations

from datetime import datetime
from pathlib import Path

import pytest
from sqlalchemy import func, select, update

from beamaudit.api.intake.pipeline import (
    Pipeline,
    _make_printable,
    content_hash,
    prepare,
    report_covers,
    result_fingerprint,
)
from beamaudit.api.store import models as m
from beamaudit.ingest.errors import IngestError
from beamaudit.ingest.events import (
    AccumulatedDose,
    ExposureEvent,
    FilterLayer,
    ParseResult,
    SourceObject,
)

STUDY = "1.2.826.0.1.3680043.8.498.1"


def _result(sop: str, *, kind="image_header", modality="DX", n_events=1, study=STUDY, **kw):
    src = SourceObject(
        sop_instance_uid=sop,
        sop_class_uid="1.2.840.10008.5.1.4.1.1.1.1"
        if kind == "image_header"
        else "1.2.840.10008.5.1.4.1.1.88.67",
        kind=kind,
        modality=modality,
        study_instance_uid=study,
    )
    events = [
        ExposureEvent(
            event_key=f"{sop}#{i}",
            sop_instance_uid=sop,
            sop_class_uid=src.sop_class_uid,
            source_kind=kind,
            event_index=i,
            modality=modality,
            study_instance_uid=study,
            station_name="RAD1",
            manufacturer="Invented Medical",
            model_name="Model R",
            device_serial_number="SN-1",
            institution_name="Hollowbrook General (invented)",
            study_datetime=datetime(2026, 11, 3, 9, 30),
            patient_weight_kg=72.0,
            kvp_kv=81.0,
            exposure_mas=10.0,
            filters=(FilterLayer("aluminium", 2.5),),
            dap_gy_cm2=0.12,
            provenance={"kvp_kv": "(0018,0060) KVP"},
            **kw,
        )
        for i in range(n_events)
    ]
    return ParseResult(source=src, events=events)


def _count(store, model) -> int:
    with store.session_factory() as s:
        return s.scalar(select(func.count()).select_from(model))


def test_store_creates_study_device_room_and_event(store) -> None:
    out = Pipeline(store.session_factory).store(_result("1.2.3.1"), received_via="scan")
    assert out.status == "stored" and out.events == 1
    with store.session_factory() as s:
        event = s.scalars(select(m.ExposureEventRow)).one()
        assert event.kvp_kv == 81.0
        assert event.filters == [{"material": "aluminium", "thickness_mm": 2.5}]
        assert event.provenance == {"kvp_kv": "(0018,0060) KVP"}
        assert event.study_datetime.tzinfo is not None
        room = s.get(m.Room, event.room_id)
        assert room.name == "RAD1"
        study = s.get(m.Study, event.study_id)
        assert study.patient_weight_kg == 72.0


def test_same_instance_twice_is_one_event(store) -> None:
    pipe = Pipeline(store.session_factory)
    r = _result("1.2.3.2")
    assert pipe.store(r, received_via="scan", sha256="a").status == "stored"
    assert pipe.store(r, received_via="listen", sha256="a").status == "duplicate"
    assert _count(store, m.ExposureEventRow) == 1
    assert _count(store, m.SourceObjectRow) == 1


def test_same_uid_different_content_is_a_conflict_and_keeps_the_first(store) -> None:
    pipe = Pipeline(store.session_factory)
    pipe.store(_result("1.2.3.3"), received_via="scan", sha256=content_hash(b"one"))
    out = pipe.store(_result("1.2.3.3"), received_via="scan", sha256=content_hash(b"two"))
    assert out.status == "conflict"
    assert "different content" in out.reason
    assert _count(store, m.ExposureEventRow) == 1


def test_batch_with_a_repeat_inside_stores_each_object_once(store) -> None:
    pipe = Pipeline(store.session_factory)
    items = [(_result(f"1.2.3.4.{i % 3}"), None, None) for i in range(6)]
    outcomes = pipe.store_many(items, received_via="scan")
    assert [o.status for o in outcomes].count("stored") == 3
    assert _count(store, m.SourceObjectRow) == 3


def test_images_sharing_an_irradiation_event_uid_are_all_kept(store) -> None:
    # the slices of one CT acquisition carry one Irradiation Event UID (DICOM PS3.3 C.7.6.1)
    pipe = Pipeline(store.session_factory)
    a = _result("1.2.3.5.1", modality="CT")
    b = _result("1.2.3.5.2", modality="CT")
    b.events[0].event_key = a.events[0].event_key
    assert pipe.store(a, received_via="scan").status == "stored"
    assert pipe.store(b, received_via="scan").status == "stored"
    assert _count(store, m.ExposureEventRow) == 2


def test_dose_report_supersedes_header_events_whichever_arrives_first(store) -> None:
    pipe = Pipeline(store.session_factory)
    pipe.store(_result("1.2.3.6.1"), received_via="scan")  # header first
    pipe.store(_result("1.2.3.6.9", kind="rdsr", n_events=2), received_via="listen")
    pipe.store(_result("1.2.3.6.2"), received_via="scan")  # header after the report
    with store.session_factory() as s:
        rows = s.scalars(select(m.ExposureEventRow)).all()
        headers = [r for r in rows if r.source_kind == "image_header"]
        reports = [r for r in rows if r.source_kind == "rdsr"]
    assert len(headers) == 2 and all(r.superseded for r in headers)
    assert len(reports) == 2 and not any(r.superseded for r in reports)


def test_ct_report_does_not_supersede_projection_headers() -> None:
    assert report_covers(["CT"], "CT")
    assert not report_covers(["CT"], "DX")
    assert report_covers(["DX"], "DX")
    assert not report_covers(["RF"], "CT")


def test_errors_are_recorded_with_source_and_reason(store) -> None:
    pipe = Pipeline(store.session_factory)
    pipe.record_error(
        IngestError("not_dicom", "no DICM marker", "/data/readme.txt"), received_via="scan"
    )
    with store.session_factory() as s:
        err = s.scalars(select(m.IngestError)).one()
    assert (err.source, err.code, err.reason) == ("/data/readme.txt", "not_dicom", "no DICM marker")


def test_fingerprint_ignores_provenance_but_not_exposure_content() -> None:
    a = _result("1.2.3.7")
    b = _result("1.2.3.7")
    b.events[0].provenance = {"kvp_kv": "(113733, DCM) KVP"}
    assert result_fingerprint(a) == result_fingerprint(b)
    b.events[0].kvp_kv = 90.0
    assert result_fingerprint(a) != result_fingerprint(b)


def test_same_uid_different_exposures_without_hash_is_a_conflict(store) -> None:
    pipe = Pipeline(store.session_factory)
    pipe.store(_result("1.2.3.8"), received_via="scan")
    other = _result("1.2.3.8")
    other.events[0].kvp_kv = 60.0
    assert pipe.store(other, received_via="listen").status == "conflict"
    assert pipe.store(_result("1.2.3.8"), received_via="listen").status == "duplicate"


def _defined_fingerprint(result: ParseResult) -> str:
    """The fingerprint as documented: the JSON of ``as_dict()`` without provenance and notes,
    and without the fields added since the first stored objects while they are None."""
    import json

    from beamaudit.api.intake.pipeline import _FINGERPRINT_ALWAYS

    payload = [
        {
            k: v
            for k, v in e.as_dict().items()
            if k not in {"provenance", "notes"} and (k in _FINGERPRINT_ALWAYS or v is not None)
        }
        for e in result.events
    ]
    payload.append({"accumulated": [repr(a) for a in result.accumulated]})
    return content_hash(json.dumps(payload, sort_keys=True, default=str).encode("utf-8"))


def test_fingerprint_is_the_documented_one_for_real_files() -> None:
    # pydicom's bundled files (CT, CR, MR, ...) and a built dose report: the fast fingerprint
    # must equal the documented definition, or stored objects would look changed on a re-scan
    import os

    import data_store
    import pydicom
    from pydicom.data import get_testdata_file
    from rdsr_builders import ct_report, fluoroscopy_report

    from beamaudit.ingest.folder import scan
    from beamaudit.ingest.pseudonym import Pseudonymiser
    from beamaudit.ingest.reader import read_dataset

    names = ["CT_small.dcm", "MR_small.dcm", "rtplan.dcm", "JPEG2000.dcm", "SC_rgb.dcm"]
    paths = [p for p in (get_testdata_file(n) for n in names) if p]
    # and every file pydicom and pydicom-data ship that parses (installed, none downloaded)
    for folder in (
        Path(os.path.dirname(pydicom.data.__file__)) / "test_files",
        Path(os.path.dirname(data_store.__file__)) / "data",
    ):
        paths.extend(str(p) for p in sorted(folder.rglob("*.dcm")) if p.stat().st_size < 8 << 20)
    pseudonymiser = Pseudonymiser(b"k" * 32)
    outcomes = scan(paths, pseudonymiser=pseudonymiser)
    results = [o.result for o in outcomes if o.result is not None]
    results.append(_result("1.2.3.9", n_events=3, body_part_thickness_mm=210.0))
    for report in (fluoroscopy_report(), ct_report()):
        results.append(read_dataset(report, pseudonymiser=pseudonymiser, source="built"))
    assert len(results) > 10
    for result in results:
        assert result_fingerprint(result) == _defined_fingerprint(result)


def test_fingerprint_of_values_outside_their_declared_types_is_the_documented_one() -> None:
    # a field holding something its type does not declare is written as as_dict() writes it,
    # keys sorted at every level (here the fast layout cannot be used)
    result = _result("1.2.3.10", n_events=2)
    result.events[0].protocol_name = {"zeta": 1, "alpha": [2, {"y": 1, "x": 2}]}  # type: ignore[assignment]
    result.events[1].collimator_edges_px = ({"b": 1, "a": 2}, 1, 2, 3)  # type: ignore[assignment]
    assert result_fingerprint(result) == _defined_fingerprint(result)


# prepare() looks for control characters in the fingerprint's JSON and in the few texts the
# fingerprint leaves out, and walks the whole object only when it finds one. Every C0 control
# but TAB, LF and CR, and DEL (the set printable() replaces), in every kind of place a text sits,
# must give what the full walk gives.
_CONTROLS = [chr(c) for c in (*range(0x00, 0x09), 0x0B, 0x0C, *range(0x0E, 0x20), 0x7F)]


def _place_protocol(r: ParseResult, c: str) -> None:
    r.events[0].protocol_name = f"Chest{c}PA"


def _place_filter(r: ParseResult, c: str) -> None:
    r.events[0].filters = (FilterLayer(f"Al{c}", 2.5),)


def _place_provenance_value(r: ParseResult, c: str) -> None:
    r.events[0].provenance["kvp_kv"] = f"(0018,0060){c}"


def _place_provenance_key(r: ParseResult, c: str) -> None:
    r.events[0].provenance[f"k{c}"] = "(0018,0060)"


def _place_note(r: ParseResult, c: str) -> None:
    r.events[0].notes.append(f"note{c}")


def _place_accumulated(r: ParseResult, c: str) -> None:
    r.accumulated[0].acquisition_plane = f"single{c}"


def _place_warning(r: ParseResult, c: str) -> None:
    r.warnings.append(f"while reading: {c}")


def _place_source(r: ParseResult, c: str) -> None:
    r.source.modality = f"DX{c}"


_PLACES = [
    _place_protocol,
    _place_filter,
    _place_provenance_value,
    _place_provenance_key,
    _place_note,
    _place_accumulated,
    _place_warning,
    _place_source,
]


def _with_accumulation() -> ParseResult:
    result = _result("1.2.826.0.1.3680043.8.498.77")
    result.accumulated.append(AccumulatedDose(sop_instance_uid="1.2.3", study_instance_uid=STUDY))
    return result


@pytest.mark.parametrize("place", _PLACES, ids=lambda f: f.__name__[7:])
def test_prepare_finds_every_control_character_wherever_it_sits(place) -> None:
    for char in _CONTROLS:
        fast, slow = _with_accumulation(), _with_accumulation()
        place(fast, char)
        place(slow, char)
        fingerprint = prepare(fast)
        _make_printable(slow)
        assert fast == slow, hex(ord(char))
        assert fingerprint == result_fingerprint(slow), hex(ord(char))


def test_prepare_leaves_clean_text_alone_and_fingerprints_it() -> None:
    result = _with_accumulation()
    result.events[0].protocol_name = "Chest\tPA\r\n \\b \\u0001 Ünïcode"  # allowed, or look-alikes
    expected = result_fingerprint(result)
    assert prepare(result) == expected
    assert result.events[0].protocol_name == "Chest\tPA\r\n \\b \\u0001 Ünïcode"


def _pinned_result(sop: str = "1.2.826.0.1.3680043.10.1234.1") -> ParseResult:
    """The object whose fingerprints older versions wrote (values invented)."""
    study = "1.2.826.0.1.3680043.10.1234"
    src = SourceObject(
        sop_instance_uid=sop, sop_class_uid="1.2.840.10008.5.1.4.1.1.1.1", kind="image_header",
        modality="DX", study_instance_uid=study,
    )  # fmt: skip
    event = ExposureEvent(
        event_key=f"{sop}#0", sop_instance_uid=sop, sop_class_uid=src.sop_class_uid,
        source_kind="image_header", event_index=0, modality="DX", study_instance_uid=study,
        station_name="RAD1", manufacturer="Invented Medical", model_name="Model R",
        study_datetime=datetime(2026, 11, 3, 9, 30), kvp_kv=81.0, exposure_mas=10.0,
        filters=(FilterLayer("aluminium", 2.5),), dap_gy_cm2=0.12,
        provenance={"kvp_kv": "(0018,0060) KVP"},
    )  # fmt: skip
    return ParseResult(source=src, events=[event])


#: ``result_fingerprint`` of :func:`_pinned_result` as the first version that stored fingerprints
#: computed it (commit 8de1067: the JSON of every field of ExposureEvent as it then was)
FIRST_VERSION_FINGERPRINT = "1ee0ccc36f49934a5d3671592943c49a9d4151c4da1758a09dac3502f9d57e10"
#: and as the versions just before fields added later were left out while None (every field of
#: this version, null included)
EVERY_FIELD_FINGERPRINT = "944408fdd2fc0a3a62731aeb5eef35bcc97313a87a2c3089a59c3e7f27e76f9a"


def test_a_field_added_since_the_first_stored_objects_leaves_the_fingerprint_alone() -> None:
    result = _pinned_result()
    assert result_fingerprint(result) == FIRST_VERSION_FINGERPRINT
    result.events[0].pulse_width_ms = 5.0  # a later field with a value changes it
    assert result_fingerprint(result) != FIRST_VERSION_FINGERPRINT


@pytest.mark.parametrize("stored_as", [FIRST_VERSION_FINGERPRINT, EVERY_FIELD_FINGERPRINT])
def test_an_object_stored_by_an_older_version_sent_again_is_a_duplicate(store, stored_as) -> None:
    pipe = Pipeline(store.session_factory)
    assert pipe.store(_pinned_result(), received_via="scan").status == "stored"
    with store.session_factory.begin() as s:  # as the older version stored it
        s.execute(update(m.SourceObjectRow).values(content_sha256=stored_as))
    assert pipe.store(_pinned_result(), received_via="listen").status == "duplicate"
    changed = _pinned_result()
    changed.events[0].kvp_kv = 90.0
    assert pipe.store(changed, received_via="listen").status == "conflict"


@pytest.mark.parametrize("report_first", [False, True])
def test_a_header_with_a_reports_irradiation_event_uid_is_superseded_across_studies(
    store, report_first
) -> None:
    # ingest/linking.py rule 2a: a report filed in a study of its own still carries the
    # Irradiation Event UID (113769, DCM) the image header has in (0008,3010)
    uid = "1.2.826.0.1.3680043.10.1234.77"
    header = _result("1.2.3.11.1", study="1.2.3.11")
    report = _result("1.2.3.11.9", kind="rdsr", study="1.2.3.12")
    for event in (header.events[0], report.events[0]):
        event.irradiation_event_uid = event.event_key = uid
    other = _result("1.2.3.11.2", study="1.2.3.11")  # same study, no UID: stands on its own
    pipe = Pipeline(store.session_factory)
    for r in [report, header, other] if report_first else [header, other, report]:
        assert pipe.store(r, received_via="scan").status == "stored"
    with store.session_factory() as s:
        superseded = dict(
            s.execute(
                select(m.SourceObjectRow.sop_instance_uid, m.ExposureEventRow.superseded).join(
                    m.SourceObjectRow,
                    m.SourceObjectRow.id == m.ExposureEventRow.source_object_id,
                )
            ).all()
        )
    assert superseded == {"1.2.3.11.1": True, "1.2.3.11.2": False, "1.2.3.11.9": False}


def test_threads_of_one_process_take_turns_at_a_sqlite_writer(store) -> None:
    # SQLite has one writer at a time (https://sqlite.org/lockingv3.html); a thread that finds
    # it busy polls with sleeps of up to 100 ms, so threads of one process queue on one lock
    import contextlib
    import threading

    from beamaudit.api.intake.pipeline import WriterTurn, writer_turn

    turn = writer_turn(store.session_factory)
    if store.backend != "sqlite":  # PostgreSQL has row locks and many writers
        assert isinstance(turn, contextlib.nullcontext)
        return
    assert isinstance(turn, WriterTurn)
    assert writer_turn(store.session_factory) is turn  # one per database
    order: list[str] = []
    with turn, turn:  # re-entrant
        other = threading.Thread(target=lambda: (turn.__enter__(), order.append("other"),
                                                 turn.__exit__(None, None, None)))  # fmt: skip
        other.start()
        other.join(0.2)
        assert other.is_alive()  # waits for this thread's turn
        order.append("first")
    other.join(5)
    assert order == ["first", "other"]


_HOLD_THE_TURN = """
import sys, time
from pathlib import Path
from beamaudit.api.intake.pipeline import WriterTurn
turn = WriterTurn(Path(sys.argv[1]))
turn.__enter__()
print("holding", flush=True)
time.sleep(float(sys.argv[2]))
turn.__exit__(None, None, None)
print("released", time.time(), flush=True)
time.sleep(30)
"""


def _holder(database: Path, hold_s: float):
    import subprocess
    import sys

    holder = subprocess.Popen(
        [sys.executable, "-c", _HOLD_THE_TURN, str(database), str(hold_s)],
        stdout=subprocess.PIPE, text=True,
    )  # fmt: skip
    assert holder.stdout is not None and holder.stdout.readline().strip() == "holding"
    return holder


def test_processes_take_turns_at_a_sqlite_writer_by_a_file_lock(tmp_path: Path) -> None:
    # Before, writers of two processes met only in SQLite's busy handler, which sleeps up to
    # 100 ms between looks: an upload waited for the other serving process in 100 ms steps.
    import time

    from beamaudit.api.intake.pipeline import WriterTurn

    database = tmp_path / "store.db"
    holder = _holder(database, 0.5)
    try:
        started = time.time()
        with WriterTurn(database):
            entered = time.time()
        assert holder.stdout is not None
        words = holder.stdout.readline().split()
        assert words[0] == "released"
        assert entered - started >= 0.4  # it waited for the other process's turn
        assert entered - float(words[1]) < 0.05  # and took it within a few ms of its end
    finally:
        holder.kill()
        holder.wait()
        holder.stdout.close()
    assert (tmp_path / "store.db-writer.lock").exists()
    assert not database.exists()  # the database's own files are never opened by the turn


def test_a_process_killed_in_its_turn_lets_the_others_write(tmp_path: Path) -> None:
    import signal
    import time

    from beamaudit.api.intake.pipeline import WriterTurn

    database = tmp_path / "store.db"
    holder = _holder(database, 60)
    holder.send_signal(signal.SIGKILL)
    holder.wait()
    holder.stdout.close()
    started = time.monotonic()
    with WriterTurn(database):
        assert time.monotonic() - started < 1
