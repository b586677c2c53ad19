"""No birth date in any log line, warning or error, from any path; one log record, one line.

A Patient's Birth Date written ``1943-11-07`` (not DICOM's DA ``YYYYMMDD``) makes pydicom warn
``Invalid value for VR DA: '1943-11-07'``, and the warning went to stderr as it was: into the log
file the documented cron line appends to. Here such a header arrives by pull (from a loopback
DICOMweb server), by C-STORE (a listener process), by folder scan and by upload; the console,
the log and the store must not hold the date in any spelling. Both backends where a store is
involved. Invented patient.
"""

from __future__ import annotations

import logging
import subprocess
import sys
import warnings
from pathlib import Path

import pytest
from api_support import make_api
from corpus import _raw, dx_header, encode
from fake_pacs import Study, dx_metadata, fake_pacs
from peers import free_port, wait_for_tcp
from procs import (
    beamaudit_process,
    counts,
    every_value,
    shared_store,
    wait_spool_drained,
)
from pynetdicom import AE

from beamaudit.ingest.sender import open_association

BIRTH_DATE = "1943-11-07"
SPELLINGS = ("1943-11-07", "19431107", "1943/11/07", "1943.11.07")
BACKENDS = ["sqlite", pytest.param("postgresql", marks=pytest.mark.postgres)]
DX_PRESENTATION = "1.2.840.10008.5.1.4.1.1.1.1"
EXPLICIT_LE = "1.2.840.10008.1.2.1"


def _clean(text: str, where: str) -> None:
    for spelling in SPELLINGS:
        assert spelling not in text, f"{spelling!r} in {where}:\n{text}"


def _header_with_birth_date(name: str):
    ds = dx_header(name)
    return _raw(ds, "PatientBirthDate", BIRTH_DATE.encode() + b" ")  # even length, as DICOM pads


@pytest.mark.parametrize("backend", BACKENDS)
def test_pull_prints_and_stores_no_birth_date(backend: str, tmp_path: Path) -> None:
    meta = dx_metadata("1.2.826.0.1.3680043.8.498.31.1", "1.2.826.0.1.3680043.8.498.31",
                       "1.2.826.0.1.3680043.8.498.31.2", "20261103",
                       **{"00100030": {"vr": "DA", "Value": [BIRTH_DATE]}})  # fmt: skip
    with (
        fake_pacs(studies=[Study("1.2.826.0.1.3680043.8.498.31", "20261103", [meta])]) as pacs,
        shared_store(backend, tmp_path) as store,
    ):
        pull = subprocess.run(
            [sys.executable, "-m", "beamaudit", "pull", "--dicomweb", pacs.url,
             "--since", "2026-11-01"],
            env=store.env(), capture_output=True, text=True, timeout=120,
        )  # fmt: skip
        assert pull.returncode == 0, pull.stderr
        assert "Invalid value for VR DA" in pull.stderr  # the warning is logged, without value
        _clean(pull.stdout + pull.stderr, "the pull's console")
        assert counts(store)["events"] == 1
        _clean(every_value(store), "the store")


@pytest.mark.slow
@pytest.mark.parametrize("backend", BACKENDS)
def test_listener_logs_no_birth_date(backend: str, tmp_path: Path) -> None:
    port = free_port()
    log = tmp_path / "listen.log"
    with shared_store(backend, tmp_path) as store:
        args = ["listen", "--host", "127.0.0.1", "--port", str(port)]
        with beamaudit_process(args, store, log):
            assert wait_for_tcp(port, timeout_s=60)
            ae = AE(ae_title="DR_ROOM1")
            ae.add_requested_context(DX_PRESENTATION, EXPLICIT_LE)
            assoc = open_association(ae, "127.0.0.1", port, ae_title="BEAMAUDIT")
            assert assoc.send_c_store(_header_with_birth_date("hygiene-listen")).Status == 0
            assoc.release()
            wait_spool_drained(store, port)
        assert counts(store)["events"] == 1
        _clean(every_value(store), "the store")
    text = log.read_text()
    assert "C-STORE" in text  # the listener's log was written
    _clean(text, "the listener's log")


@pytest.mark.parametrize("backend", BACKENDS)
def test_scan_and_upload_keep_no_birth_date(
    backend: str, tmp_path: Path, capsys: pytest.CaptureFixture[str],
    caplog: pytest.LogCaptureFixture,
) -> None:  # fmt: skip
    from api_support import StoreHandle

    from beamaudit.api.cli import main

    folder = tmp_path / "export"
    folder.mkdir()
    (folder / "a.dcm").write_bytes(encode(_header_with_birth_date("hygiene-scan")))
    caplog.set_level(logging.DEBUG)
    with shared_store(backend, tmp_path) as store, warnings.catch_warnings():
        warnings.simplefilter("always")  # as outside the test suite: library warnings shown
        with pytest.MonkeyPatch.context() as mp:
            for key, value in store.env().items():
                if key.startswith("BEAMAUDIT_"):
                    mp.setenv(key, value)
            assert main(["scan", str(folder)]) == 0
        handle = StoreHandle(backend, store.url, store.engine, store.sessions, {})
        for api in make_api(handle, tmp_path):
            data = encode(_header_with_birth_date("hygiene-upload"))
            reply = api.post("/upload", content=data, headers={"Content-Type": "application/dicom"})
            assert reply.json()["files"][0]["status"] == "stored", reply.text
        assert counts(store)["events"] == 2
        _clean(every_value(store), "the store")
    captured = capsys.readouterr()
    _clean(captured.out + captured.err, "the console")
    _clean(caplog.text, "the log records")


def test_a_newline_in_a_logged_value_cannot_forge_a_log_line(
    capsys: pytest.CaptureFixture[str],
) -> None:
    """Any record (ours, uvicorn's, a library's) that quotes a value sent by someone else is
    written on one line: a newline in it is written ``\\n``."""
    from beamaudit.api.logs import configure_logging

    configure_logging()
    forged = "2026-12-01 00:00:00,000 ERROR beamaudit: forged by the sender"
    logging.getLogger("beamaudit.api.web.app").error(
        "unexpected error answering %s %s", "GET", "/flags?room=RAD1\n" + forged
    )
    logging.getLogger("uvicorn.error").error("Invalid HTTP request: %r\r\n%s", "x", forged)
    err = capsys.readouterr().err
    assert "/flags?room=RAD1\\n2026-12-01" in err
    assert not any(line.startswith(forged) for line in err.splitlines())


def test_uvicorn_access_lines_keep_their_format_and_one_line() -> None:
    """uvicorn's access formatter reads the record's arguments: they stay, escaped."""
    from uvicorn.logging import AccessFormatter

    from beamaudit.api.logs import OneLineFilter

    record = logging.LogRecord(
        "uvicorn.access", logging.INFO, __file__, 1, '%s - "%s %s HTTP/%s" %d',
        ("127.0.0.1:50000", "GET", "/flags?room=RAD1\nforged", "1.1", 200), None,
    )  # fmt: skip
    assert OneLineFilter().filter(record)
    line = AccessFormatter('%(client_addr)s - "%(request_line)s" %(status_code)s').format(record)
    assert line == '127.0.0.1:50000 - "GET /flags?room=RAD1\\nforged HTTP/1.1" 200 OK'
