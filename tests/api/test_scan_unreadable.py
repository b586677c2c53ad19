"""A folder the scan may not read becomes an ingest error naming it and the reason.

Before, a subfolder the service could not list was skipped silently: its files were lost with
no record. Both backends; invented data. (As root every folder is readable, so there the
refusal is made by the listing call itself, exactly as the kernel answers a user without
permission.)
"""

from __future__ import annotations

import errno
import os
from pathlib import Path

import pytest
from corpus import dx_header, encode
from sqlalchemy import select

import beamaudit.ingest.folder as folder
from beamaudit.api.intake.pipeline import Pipeline
from beamaudit.api.intake.scanning import scan_paths
from beamaudit.api.store import models as m
from beamaudit.ingest.pseudonym import load_or_create_key


def _deny(tmp_path: Path, locked: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    if os.geteuid() != 0:
        locked.chmod(0)
        return
    real = os.scandir

    def scandir(path: object) -> object:
        if Path(str(path)) == locked:
            raise PermissionError(errno.EACCES, os.strerror(errno.EACCES), str(path))
        return real(path)  # type: ignore[arg-type]

    monkeypatch.setattr(folder.os, "scandir", scandir)


def test_an_unreadable_subfolder_is_an_ingest_error_with_its_reason(
    store, tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    export = tmp_path / "export"
    locked = export / "room-2"
    locked.mkdir(parents=True)
    (export / "a.dcm").write_bytes(encode(dx_header("unreadable-a")))
    (locked / "b.dcm").write_bytes(encode(dx_header("unreadable-b")))
    _deny(tmp_path, locked, monkeypatch)
    try:
        summary = scan_paths(
            [export],
            pipeline=Pipeline(store.session_factory),
            key=load_or_create_key(tmp_path / "k.key"),
        )
    finally:
        locked.chmod(0o755)
    assert summary.objects == 1
    (error,) = summary.errors
    assert error["source"] == str(locked)
    assert "Permission denied" in error["reason"] and "not scanned" in error["reason"]
    with store.session_factory() as s:
        (row,) = s.scalars(select(m.IngestError)).all()
    assert row.source == str(locked) and "Permission denied" in row.reason
    assert row.code == "unreadable"


def test_the_library_scan_reports_the_folder_too(tmp_path: Path, monkeypatch) -> None:
    from beamaudit.ingest.pseudonym import Pseudonymiser

    export = tmp_path / "export"
    locked = export / "locked"
    locked.mkdir(parents=True)
    (export / "a.dcm").write_bytes(encode(dx_header("library-a")))
    _deny(tmp_path, locked, monkeypatch)
    try:
        summary = folder.ScanSummary()
        outcomes = list(
            folder.scan([export], pseudonymiser=Pseudonymiser(b"k" * 32), summary=summary)
        )
    finally:
        locked.chmod(0o755)
    errors = [o for o in outcomes if o.error is not None]
    assert [o.path for o in errors] == [locked]
    assert summary.errors == 1 and summary.parsed == 1


def test_a_scan_never_opens_the_stores_own_database_files(store, tmp_path: Path) -> None:
    # SQLite's locks are POSIX locks, per process: closing any descriptor of the database
    # file drops them all (https://sqlite.org/howtocorrupt.html, section 2.2), so a scan of a
    # folder that holds the store must not open the store's files, as it did before.
    (tmp_path / "export").mkdir()
    (tmp_path / "export" / "a.dcm").write_bytes(encode(dx_header("own-files-a")))
    opened: list[str] = []
    real = folder.scan_file

    def scan_file(path: Path, pseudonymiser: object) -> object:
        opened.append(path.name)
        return real(path, pseudonymiser)  # type: ignore[arg-type]

    with pytest.MonkeyPatch.context() as patch:
        patch.setattr(folder, "scan_file", scan_file)
        summary = scan_paths(
            [tmp_path],
            pipeline=Pipeline(store.session_factory),
            key=load_or_create_key(tmp_path / "k.key"),
        )
    assert summary.objects == 1
    with store.session_factory() as s:
        assert s.scalar(select(m.ExposureEventRow.id)) is not None
    if store.backend == "sqlite":
        assert not any(name.startswith("store.db") for name in opened)
        skipped = {Path(p).name for p in summary.store_files_skipped}
        assert "store.db" in skipped and skipped <= {
            "store.db",
            "store.db-wal",
            "store.db-shm",
            "store.db-writer.lock",
        }
        assert summary.as_dict()["store_files_skipped"] == summary.store_files_skipped
    else:
        assert summary.store_files_skipped == []
