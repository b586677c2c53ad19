"""No patient name, birth date or raw patient ID in the database, the logs or the exports.

Files carrying an invented patient (corpus.PATIENT) go in through every source: folder scan (good
files and the whole malformed corpus, whose errors are recorded too), C-STORE and API upload.
Then the store is searched byte for byte (SQLite: the database file, its WAL and shared memory;
PostgreSQL: every column of every table as text), with every log record and console line
written meanwhile and the output of ``beamaudit export events`` in both formats.
"""

from __future__ import annotations

import logging
import subprocess
import sys
from pathlib import Path

import pytest
from api_support import make_api
from corpus import PATIENT, cases, dx_header, encode
from peers import free_port
from procs import SharedStore, shared_store
from pynetdicom import AE
from sqlalchemy import String, cast, select

from beamaudit.api.intake.pipeline import Pipeline
from beamaudit.api.intake.receiving import make_store_handler
from beamaudit.api.intake.scanning import scan_paths
from beamaudit.api.store import Base
from beamaudit.api.store.migrate import upgrade
from beamaudit.ingest.listener import ListenerConfig, start_listener
from beamaudit.ingest.pseudonym import Pseudonymiser, load_or_create_key
from beamaudit.ingest.sender import open_association

#: every spelling of the invented patient that must never leave ingest
SECRETS = (
    PATIENT["PatientName"],
    "Quillfeather",
    "Zephyrine",
    PATIENT["PatientID"],
    PATIENT["OtherPatientIDs"],
    PATIENT["PatientBirthDate"],
    "1937-04-12",
)
DX_PRESENTATION = "1.2.840.10008.5.1.4.1.1.1.1"
EXPLICIT_LE = "1.2.840.10008.1.2.1"


def _ingest_everywhere(store: SharedStore, tmp_path: Path) -> int:
    """Scan, C-STORE and upload objects carrying the patient; returns the objects stored."""
    key = load_or_create_key(store.key_path)
    pipeline = Pipeline(store.sessions)
    folder = tmp_path / "export"
    folder.mkdir()
    for i in range(3):
        (folder / f"good-{i}").write_bytes(encode(dx_header(f"privacy-scan-{i}")))
    for case in cases():
        (folder / f"bad-{case.id}").write_bytes(case.data)
        if case.first is not None:
            (folder / f"first-{case.id}").write_bytes(case.first)
    scan_paths([folder], pipeline=pipeline, key=key)
    port = free_port()
    with start_listener(
        ListenerConfig(port=port), make_store_handler(pipeline, Pseudonymiser(key))
    ):
        ae = AE(ae_title="PRIVACY")
        ae.add_requested_context(DX_PRESENTATION, EXPLICIT_LE)
        assoc = open_association(ae, "127.0.0.1", port, ae_title="BEAMAUDIT")
        for i in range(3):
            assert assoc.send_c_store(dx_header(f"privacy-listen-{i}")).Status == 0
        bad = dx_header("privacy-listen-bad", KVP="900")  # an error that names the object
        assert assoc.send_c_store(bad).Status != 0
        assoc.release()
    handle = _Handle(store)
    for api in make_api(handle, tmp_path):
        for i in range(3):
            data = encode(dx_header(f"privacy-upload-{i}"))
            reply = api.post("/upload", content=data, headers={"Content-Type": "application/dicom"})
            assert reply.json()["files"][0]["status"] == "stored"
        # what the API answers about the stored events carries no patient either
        for path in ("/events", "/ingest-errors", "/exams"):
            reply = api.get(path)
            if reply.status_code == 200:
                _assert_clean(reply.content, f"GET {path}")
    from sqlalchemy import func

    from beamaudit.api.store import models as m

    with store.sessions() as session:
        return int(session.scalar(select(func.count()).select_from(m.SourceObjectRow)) or 0)


class _Handle:
    """The shape make_api wants (url, engine, session_factory)."""

    def __init__(self, store: SharedStore) -> None:
        self.url = store.url
        self.engine = store.engine
        self.session_factory = store.sessions
        self.backend = store.backend


def _assert_clean(blob: bytes | str, where: str) -> None:
    data = blob.encode("utf-8", "replace") if isinstance(blob, str) else blob
    for secret in SECRETS:
        for encoded in (secret.encode("utf-8"), secret.encode("utf-16-le")):
            assert encoded not in data, f"{secret!r} found in {where}"


def _database_bytes(store: SharedStore) -> bytes:
    if store.backend == "sqlite":
        db = Path(store.url.removeprefix("sqlite:///"))
        return b"".join(p.read_bytes() for p in db.parent.glob(db.name + "*"))
    parts: list[str] = []
    with store.sessions() as session:
        for table in Base.metadata.sorted_tables:
            columns = [cast(c, String) for c in table.columns]
            for row in session.execute(select(*columns)):
                parts.extend(str(v) for v in row if v is not None)
    return "\n".join(parts).encode("utf-8")


@pytest.mark.slow
@pytest.mark.parametrize(
    "backend", ["sqlite", pytest.param("postgresql", marks=pytest.mark.postgres)]
)
def test_no_patient_identifier_in_store_logs_or_exports(
    backend: str,
    tmp_path: Path,
    caplog: pytest.LogCaptureFixture,
    capsys: pytest.CaptureFixture[str],
) -> None:
    caplog.set_level(logging.DEBUG)
    with shared_store(backend, tmp_path) as store:
        upgrade(store.engine)
        stored = _ingest_everywhere(store, tmp_path)
        assert stored >= 9 + 2  # the good files of each source and the corpus's first objects
        raw = _database_bytes(store)
        assert len(raw) > 10_000
        _assert_clean(raw, f"the {backend} database")
        # the same search finds what it is looking for: the check is not blind
        assert b"Kestrel Bay General" in raw
        for fmt in ("csv", "json"):  # a process of its own, as an export job runs
            export = subprocess.run(
                [sys.executable, "-m", "beamaudit", "export", "events", "--format", fmt],
                env=store.env(), capture_output=True, text=True, timeout=120,
            )  # fmt: skip
            assert export.returncode == 0, export.stderr
            assert "ROOM-DR1" in export.stdout
            _assert_clean(export.stdout + export.stderr, f"export events --format {fmt}")
        if backend == "sqlite":  # the database file again, after the exports' reads
            _assert_clean(_database_bytes(store), "the SQLite database after export")
    assert any("C-STORE" in r.getMessage() for r in caplog.records)  # the logs were captured
    _assert_clean(caplog.text, "the log records")
    captured = capsys.readouterr()
    _assert_clean(captured.out + captured.err, "the console")
