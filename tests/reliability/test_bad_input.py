"""The malformed corpus (corpus.py) through every source: folder scan, C-STORE, API upload.

Each malformed case must end as exactly one recorded ingest error with its reason, on SQLite and
PostgreSQL; no process may crash; the good objects sent around them (and the tolerated
deviations) must all be stored. A reused SOP Instance UID is recorded with the reason "already
stored with different content" (the first object is kept).
"""

from __future__ import annotations

import json
import re
from collections.abc import Callable
from pathlib import Path

import pytest
from api_support import make_api
from corpus import DX_PRESENTATION, PATIENT, Case, cases, dx_header, encode, part10, split_part10
from corpus import tolerated as tolerated_cases
from peers import free_port
from pydicom.uid import ExplicitVRLittleEndian, generate_uid
from pynetdicom import AE
from sqlalchemy import func, select

from beamaudit.api.cli import main
from beamaudit.api.intake.pipeline import Pipeline
from beamaudit.api.intake.receiving import make_store_handler
from beamaudit.api.intake.scanning import scan_paths
from beamaudit.api.intake.spooling import Spool, SpoolWorker, make_spooling_handler
from beamaudit.api.store import models as m
from beamaudit.ingest.errors import ERROR_CODES
from beamaudit.ingest.listener import ListenerConfig, StoreStatus, start_listener
from beamaudit.ingest.pseudonym import Pseudonymiser
from beamaudit.ingest.sender import open_association

KEY = b"reliability-corpus-key-32-bytes!"
CONFLICT_REASON = "already stored with different content"


def test_the_corpus_is_large_and_every_case_names_known_codes() -> None:
    corpus = cases()
    assert len(corpus) >= 40
    for case in corpus:
        assert case.expected, case.id
        assert set(case.expected) <= ERROR_CODES | {"conflict"}, case.id
        assert (case.first is not None) == (case.expected == ("conflict",)), case.id
    # every kind of damage the issue lists is in it, and every code a file can earn
    ids = " ".join(c.id for c in corpus)
    words = ("text-file", "truncated-", "no-meta", "meta-", "mixed", "vr-", "nested-", "huge-",
             "1000", "negative", "nan", "infinite", "report-", "same-uid")  # fmt: skip
    for word in words:
        assert word in ids, word
    codes = {code for c in corpus for code in c.expected}
    assert codes >= ERROR_CODES - {"unreadable", "bad_key"}


def _write_corpus(folder: Path) -> dict[str, Case]:
    """Each case as a file (first objects before their duplicates), good files around them."""
    folder.mkdir()
    by_name: dict[str, Case] = {}
    for case in cases():
        if case.first is not None:
            (folder / f"a-first-{case.id}").write_bytes(case.first)
        (folder / f"b-{case.id}").write_bytes(case.data)
        by_name[f"b-{case.id}"] = case
    for case in tolerated_cases():
        (folder / f"c-tolerated-{case.id}").write_bytes(case.data)
    for i in range(3):
        (folder / f"d-good-{i}").write_bytes(encode(dx_header(f"good-{i}")))
    return by_name


def _expected_stored() -> int:
    firsts = {c.first for c in cases() if c.first is not None}
    return len(firsts) + len(tolerated_cases()) + 3


def _assert_recorded(errors: list[m.IngestError], case: Case) -> None:
    assert len(errors) == 1, f"{case.id}: {len(errors)} recorded errors"
    (error,) = errors
    assert error.reason, case.id
    if case.expected == ("conflict",):
        assert error.code == "bad_value", case.id
        assert error.reason and re.search(CONFLICT_REASON, error.reason), error.reason
    else:
        assert error.code in case.expected, f"{case.id}: {error.code} ({error.reason})"


@pytest.mark.slow
def test_folder_scan_records_every_case_and_stores_the_rest(store, tmp_path: Path) -> None:
    folder = tmp_path / "corpus"
    by_name = _write_corpus(folder)
    summary = scan_paths([folder], pipeline=Pipeline(store.session_factory), key=KEY)
    assert summary.files == len(list(folder.iterdir()))
    assert summary.objects == _expected_stored()
    assert len(summary.errors) == len(by_name)
    with store.session_factory() as session:
        rows = session.scalars(select(m.IngestError)).all()
        stored = session.scalar(select(func.count()).select_from(m.SourceObjectRow))
    assert stored == _expected_stored()
    for name, case in by_name.items():
        _assert_recorded([r for r in rows if r.source == str(folder / name)], case)
    assert len(rows) == len(by_name)
    # errors name no patient (the corpus carries an invented one everywhere)
    for row in rows:
        for value in PATIENT.values():
            assert value not in row.reason and value not in row.source


@pytest.mark.slow
def test_scan_command_with_parser_processes_survives_the_corpus(
    settings_env: Path, tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    folder = tmp_path / "corpus"
    by_name = _write_corpus(folder)
    assert main(["scan", str(folder), "--workers", "2", "--json"]) == 1  # partial, not a crash
    out = json.loads(capsys.readouterr().out)
    assert out["objects"] == _expected_stored()
    assert sorted(Path(e["source"]).name for e in out["errors"]) == sorted(by_name)
    # a second run stores nothing new and records the same errors again, nothing else
    assert main(["scan", str(folder), "--json"]) == 1
    again = json.loads(capsys.readouterr().out)
    assert again["objects"] == 0
    assert again["duplicates"] == _expected_stored()


# ------------------------------------------------------------------------------ C-STORE


def _wire_file(case: Case, folder: Path, name: str, data: bytes) -> tuple[Path, str, str]:
    """The case as a Part 10 file a sender can send as it is: its own file meta when intact,
    else its bytes behind a DX file meta (the junk then arrives as a data set)."""
    meta = split_part10(data)
    if meta is None:
        uid = generate_uid(entropy_srcs=["wire", name])
        data = part10(data, sop_class=DX_PRESENTATION, sop_instance=uid,
                      transfer_syntax=ExplicitVRLittleEndian)  # fmt: skip
        meta = split_part10(data)
        assert meta is not None
    path = folder / name
    path.write_bytes(data)
    return path, meta[1], meta[3]


@pytest.fixture
def chunked_sends(monkeypatch: pytest.MonkeyPatch) -> None:
    """pynetdicom sends a file's bytes as they are (no decoding and re-encoding)."""
    from pynetdicom import _config

    monkeypatch.setattr(_config, "STORE_SEND_CHUNKED_DATASET", True)


def _error_rows(store) -> list[m.IngestError]:
    with store.session_factory() as session:
        return list(session.scalars(select(m.IngestError).order_by(m.IngestError.id)).all())


@pytest.mark.slow
@pytest.mark.parametrize("spooled", [False, True], ids=["direct", "spooled"])
def test_listener_answers_and_records_every_case(
    store, tmp_path: Path, chunked_sends, spooled: bool
) -> None:
    """Every case of the corpus is answered and recorded once. Direct (the handler stores before
    answering): refused with a failure status. Spooled (``beamaudit listen``): refused before the
    answer when the listener's own checks find it (framing, UIDs, class), else answered success
    once spooled and recorded as an ingest error when the worker stores the spool."""
    pipeline = Pipeline(store.session_factory)
    settle: Callable[[], object] = lambda: None  # noqa: E731
    if spooled:
        spool = Spool(tmp_path / "spool.sqlite")
        handler, store_batch, give_up = make_spooling_handler(
            spool, pipeline, Pseudonymiser(KEY), max_spooled=1000
        )
        settle = SpoolWorker(spool, store_batch, give_up).drain  # not started: drained here
    else:
        handler = make_store_handler(pipeline, Pseudonymiser(KEY))
    port = free_port()
    folder = tmp_path / "wire"
    folder.mkdir()
    plan: list[tuple[Case | None, Path, str, str]] = []
    for case in cases():
        if case.first is not None:
            plan.append((None, *_wire_file(case, folder, f"first-{case.id}", case.first)))
        plan.append((case, *_wire_file(case, folder, case.id, case.data)))
    for case in tolerated_cases():
        if split_part10(case.data) is not None:  # the bare data set has no meta to send by
            plan.append((None, *_wire_file(case, folder, f"tolerated-{case.id}", case.data)))
    ae = AE(ae_title="CORPUS")
    for context in sorted({(sop_class, ts) for _, _, sop_class, ts in plan}):
        ae.add_requested_context(*context)
    ae.add_requested_context("1.2.840.10008.1.1")  # Verification (C-ECHO), PS3.4 Annex A
    refused_at_negotiation: list[str] = []
    refused_by_sender: list[str] = []
    accepted_then_recorded: list[str] = []
    with start_listener(ListenerConfig(port=port, decode_values=not spooled), handler):
        assoc = open_association(ae, "127.0.0.1", port, ae_title="BEAMAUDIT")
        assert assoc.is_established
        accepted = {(c.abstract_syntax, c.transfer_syntax[0]) for c in assoc.accepted_contexts}
        try:
            for case, path, sop_class, ts in plan:
                if (sop_class, ts) not in accepted:
                    # a class that carries no x-ray exposure is not negotiated: the sender is told
                    refused_at_negotiation.append(case.id if case else path.name)
                    continue
                before = len(_error_rows(store))
                try:
                    status = assoc.send_c_store(path)
                except ValueError:  # pynetdicom will not put a 5000-character UID in a request
                    refused_by_sender.append(case.id if case else path.name)
                    continue
                assert "Status" in status, f"{path.name}: no answer"
                settle()
                rows = _error_rows(store)[before:]
                if case is None:
                    assert status.Status == StoreStatus.SUCCESS, path.name
                    assert rows == []
                    continue
                if status.Status == StoreStatus.SUCCESS:
                    assert spooled, f"{case.id}: answered success"
                    accepted_then_recorded.append(case.id)
                assert len(rows) == 1, f"{case.id}: {len(rows)} recorded errors"
                assert rows[0].received_via == "listen"
                assert rows[0].reason
                if case.expected == ("conflict",):
                    assert re.search(CONFLICT_REASON, rows[0].reason)
        finally:
            assoc.release()
        # the listener is still up and stores a good object after all that
        assoc = open_association(ae, "127.0.0.1", port, ae_title="BEAMAUDIT")
        good = dx_header("after-the-corpus")
        assert assoc.send_c_store(good).Status == StoreStatus.SUCCESS
        assert assoc.send_c_echo().Status == 0
        assoc.release()
        settle()
    assert refused_at_negotiation == ["sop-class-mr", "sop-class-junk"]
    # what the listener's checks find is refused before the answer either way
    assert spooled == bool(accepted_then_recorded)
    assert refused_by_sender == ["sop-instance-uid-5000"]
    with store.session_factory() as session:
        uids = session.scalars(select(m.SourceObjectRow.sop_instance_uid)).all()
    assert good.SOPInstanceUID in uids
    expected = sum(1 for c, *_ in plan if c is None) + 1
    assert len(uids) == expected


# ------------------------------------------------------------------------------ API upload


@pytest.mark.slow
def test_api_upload_answers_and_records_every_case(store, tmp_path: Path) -> None:
    for api in make_api(store, tmp_path):
        for case in cases():
            if case.first is not None:
                reply = api.post(
                    "/upload", content=case.first, headers={"Content-Type": "application/dicom"}
                )
                assert reply.status_code == 200, reply.text
                assert reply.json()["files"][0]["status"] in ("stored", "duplicate")
            before = len(_error_rows(store))
            reply = api.post(
                "/upload", content=case.data, headers={"Content-Type": "application/dicom"}
            )
            assert reply.status_code == 200, f"{case.id}: {reply.status_code} {reply.text}"
            (result,) = reply.json()["files"]
            assert result["status"] in ("error", "conflict"), f"{case.id}: {result}"
            rows = _error_rows(store)[before:]
            _assert_recorded(rows, case)
            assert rows[0].received_via == "upload"
        for case in tolerated_cases():
            reply = api.post(
                "/upload", content=case.data, headers={"Content-Type": "application/dicom"}
            )
            assert reply.status_code == 200, reply.text
            assert reply.json()["files"][0]["status"] == "stored", (case.id, reply.json())
        # several files in one multipart request: each gets its own answer, none is lost
        batch = [("files", (f"{c.id}.dcm", c.data, "application/dicom")) for c in cases()[:12]]
        good = encode(dx_header("multipart-good"))
        batch.append(("files", ("good.dcm", good, "application/dicom")))
        reply = api.post("/upload", files=batch)
        assert reply.status_code == 200, reply.text
        body = reply.json()
        assert body["errors"] == 12 and body["stored"] == 1
        assert api.get("/health", as_=None).status_code == 200
