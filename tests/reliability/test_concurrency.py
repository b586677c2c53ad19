"""Concurrency: several ingest paths and several ingest nodes writing one store at once.

1. A C-STORE listener, a DICOMweb pull (from Orthanc) and API uploads (four clients), each a
   ``beamaudit`` process of its own, handed overlapping sets of the same instances at the same
   time, on SQLite and on PostgreSQL: every instance stored once, no row lost, every request
   answered success, and no "database is locked" anywhere a user could see it.
2. Two listeners and two scanners against one PostgreSQL, sent overlapping files: the layout of a
   hospital group with several ingest nodes. Each instance is stored once.
"""

from __future__ import annotations

import json
import subprocess
import sys
import threading
from pathlib import Path

import httpx
import pytest
from corpus import dx_header, encode
from peers import (
    free_port,
    orthanc_missing,
    require_peer,
    start_orthanc,
    wait_for_http,
    wait_for_tcp,
)
from procs import SharedStore, beamaudit_process, counts, shared_store, wait_spool_drained
from pynetdicom import AE
from sqlalchemy import select

from beamaudit.api.store import models as m
from beamaudit.api.store.auth import create_token
from beamaudit.ingest.sender import open_association

DX_PRESENTATION = "1.2.840.10008.5.1.4.1.1.1.1"
EXPLICIT_LE = "1.2.840.10008.1.2.1"
LOCKED = "database is locked"


def _instances(n: int, prefix: str) -> list[bytes]:
    return [
        encode(dx_header(f"{prefix}-{i}", StationName=f"ROOM-{i % 4}", StudyDate="20240305"))
        for i in range(n)
    ]


def _uid_of(data: bytes) -> str:
    from io import BytesIO

    from pydicom import dcmread

    return str(dcmread(BytesIO(data), stop_before_pixels=True).SOPInstanceUID)


def _send(port: int, files: list[bytes], statuses: list[int]) -> None:
    from io import BytesIO

    from pydicom import dcmread

    ae = AE(ae_title="CONCURRENT")
    ae.add_requested_context(DX_PRESENTATION, EXPLICIT_LE)
    assoc = open_association(ae, "127.0.0.1", port, ae_title="BEAMAUDIT")
    assert assoc.is_established
    try:
        for data in files:
            status = assoc.send_c_store(dcmread(BytesIO(data)))
            statuses.append(int(status.Status) if "Status" in status else -1)
    finally:
        assoc.release()


def _upload(base: str, token: str, files: list[bytes], replies: list[tuple[int, str]]) -> None:
    with httpx.Client(base_url=base, timeout=60) as client:
        for data in files:
            reply = client.post(
                "/api/v1/upload",
                content=data,
                headers={"Authorization": f"Bearer {token}", "Content-Type": "application/dicom"},
            )
            status = reply.json()["files"][0]["status"] if reply.status_code == 200 else ""
            replies.append((reply.status_code, status or reply.text))


def _token(store: SharedStore) -> str:
    with store.sessions.begin() as session:
        _, token = create_token(session, role="physicist", name="concurrency test", actor="test")
    return token


def _no_lock_reached_anyone(*texts: str) -> None:
    for text in texts:
        assert LOCKED not in text.lower(), text[-2000:]


@pytest.mark.slow
@pytest.mark.peer
@pytest.mark.parametrize(
    "backend", ["sqlite", pytest.param("postgresql", marks=pytest.mark.postgres)]
)
def test_listener_pull_and_uploads_at_once_store_each_instance_once(
    backend: str, tmp_path: Path
) -> None:
    missing = orthanc_missing()
    require_peer("Orthanc with DICOMweb", missing is None, missing or "")
    files = _instances(60, "paths")
    uids = sorted(_uid_of(f) for f in files)
    to_pacs, to_listener, to_upload = files[:40], files[20:], files[10:50]
    orthanc = start_orthanc(tmp_path / "orthanc")
    try:
        for data in to_pacs:
            orthanc.upload(data)
        with shared_store(backend, tmp_path) as store:
            token = _token(store)
            api_port, dicom_port = free_port(), free_port()
            logs = {name: tmp_path / f"{name}.log" for name in ("serve", "listen")}
            serve = ["serve", "--host", "127.0.0.1", "--port", str(api_port)]
            listen = ["listen", "--host", "127.0.0.1", "--port", str(dicom_port)]
            with (
                beamaudit_process(serve, store, logs["serve"]),
                beamaudit_process(listen, store, logs["listen"]),
            ):
                base = f"http://127.0.0.1:{api_port}"
                assert wait_for_http(f"{base}/api/v1/health", timeout_s=60)
                assert wait_for_tcp(dicom_port, timeout_s=60)
                statuses: list[int] = []
                replies: list[tuple[int, str]] = []
                pull_result: list[subprocess.CompletedProcess[str]] = []
                pull_args = [sys.executable, "-m", "beamaudit", "pull", "--dicomweb",
                             orthanc.dicomweb_url, "--since", "2024-01-01", "--json"]  # fmt: skip
                threads = [
                    threading.Thread(target=_send, args=(dicom_port, to_listener, statuses)),
                    threading.Thread(
                        target=lambda: pull_result.append(
                            subprocess.run(
                                pull_args,
                                env=store.env(),
                                capture_output=True,
                                text=True,
                                timeout=180,
                            )
                        )
                    ),
                    *[
                        threading.Thread(target=_upload, args=(base, token, part, replies))
                        for part in (to_upload[i::4] for i in range(4))
                    ],
                ]
                for thread in threads:
                    thread.start()
                for thread in threads:
                    thread.join(timeout=240)
                assert not any(t.is_alive() for t in threads)
                wait_spool_drained(store, dicom_port)
            (pulled,) = pull_result
            assert pulled.returncode == 0, pulled.stdout + pulled.stderr
            assert statuses == [0x0000] * len(to_listener)
            assert sorted(code for code, _ in replies) == [200] * len(to_upload)
            assert {status for _, status in replies} <= {"stored", "duplicate"}, replies
            final = counts(store)
            assert sorted(final["uids"]) == uids  # every instance, once
            assert final["events"] == len(uids)
            assert final["errors"] == 0  # no conflict between paths, nothing refused
            _no_lock_reached_anyone(
                pulled.stdout, pulled.stderr, *(p.read_text() for p in logs.values())
            )
            summary = json.loads(pulled.stdout)
            assert summary["instances"] + summary.get("skipped_known", 0) >= 1
    finally:
        orthanc.stop()


@pytest.mark.slow
@pytest.mark.postgres
def test_two_listeners_and_two_scanners_on_one_postgresql(tmp_path: Path) -> None:
    files = _instances(160, "nodes")
    uids = sorted(_uid_of(f) for f in files)
    folders = [tmp_path / "node-a", tmp_path / "node-b"]
    # scanner A reads 0-99, scanner B 60-159; the listeners get 40-119, alternately
    for folder, part in zip(folders, (files[:100], files[60:]), strict=True):
        folder.mkdir()
        for i, data in enumerate(part):
            (folder / f"IM{i:05d}").write_bytes(data)
    to_listeners = files[40:120]
    with shared_store("postgresql", tmp_path) as store:
        ports = [free_port(), free_port()]
        listeners = [["listen", "--host", "127.0.0.1", "--port", str(p)] for p in ports]
        logs = [tmp_path / f"{n}.log" for n in ("listen-a", "listen-b", "scan-a", "scan-b")]
        with (
            beamaudit_process(listeners[0], store, logs[0]),
            beamaudit_process(listeners[1], store, logs[1]),
        ):
            assert all(wait_for_tcp(p, timeout_s=60) for p in ports)
            statuses: list[int] = []
            senders = [
                threading.Thread(target=_send, args=(ports[0], to_listeners[0::2], statuses)),
                threading.Thread(target=_send, args=(ports[1], to_listeners[1::2], statuses)),
                # the same instances once more, crosswise, to race the first sends
                threading.Thread(target=_send, args=(ports[1], to_listeners[0::2], statuses)),
                threading.Thread(target=_send, args=(ports[0], to_listeners[1::2], statuses)),
            ]
            with (
                beamaudit_process(["scan", str(folders[0]), "--json"], store, logs[2]) as a,
                beamaudit_process(["scan", str(folders[1]), "--json"], store, logs[3]) as b,
            ):
                for thread in senders:
                    thread.start()
                assert a.wait(timeout=240) == 0, logs[2].read_text()[-3000:]
                assert b.wait(timeout=240) == 0, logs[3].read_text()[-3000:]
                for thread in senders:
                    thread.join(timeout=240)
            for port in ports:
                wait_spool_drained(store, port)
        final = counts(store)
        with store.sessions() as session:
            reasons = session.scalars(select(m.IngestError.reason)).all()
        assert statuses == [0x0000] * (2 * len(to_listeners)), reasons
        assert sorted(final["uids"]) == uids
        assert final["events"] == len(uids)
        assert final["errors"] == 0
        scans = [json.loads(log.read_text()[log.read_text().index("{") :]) for log in logs[2:]]
        # what one node stored the other saw as a duplicate: together, each file once
        assert sum(s["objects"] for s in scans) <= len(uids)
        assert sum(s["objects"] + s["duplicates"] for s in scans) == 200
        _no_lock_reached_anyone(*(log.read_text() for log in logs))
