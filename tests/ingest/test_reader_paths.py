"""The common-case read path gives what ``dcmread`` gives, file for file.

:func:`beamaudit.ingest.reader.read_open_file` reads a plain Part 10 file with pydicom's
``read_dataset`` directly and leaves every other file to ``dcmread``. Both must make the same
events, the same errors and the same warnings: checked on every file pydicom and pydicom-data
ship (real files from many devices and writers; nothing is downloaded) and on every case of the
malformed corpus (``tests/reliability/corpus.py``).
"""

from __future__ import annotations

import io
import os
import warnings
from pathlib import Path

import data_store
import pydicom
import pytest
from corpus import cases, tolerated
from ingest_samples import PSEUDONYMISER

from beamaudit.ingest import IngestError, reader
from beamaudit.ingest.events import ParseResult

_SHIPPED = sorted(
    p
    for folder in (
        Path(os.path.dirname(pydicom.data.__file__)) / "test_files",
        Path(os.path.dirname(data_store.__file__)) / "data",
    )
    for p in folder.rglob("*")
    if p.is_file() and p.suffix not in {".py", ".pyc", ".json", ".txt", ".gz", ".bz2", ".zip"}
)


def _outcome(data: bytes, *, common: bool, monkeypatch: pytest.MonkeyPatch) -> object:
    with monkeypatch.context() as patch:
        if not common:
            patch.setattr(reader, "_read_common", lambda fh, head, size: None)
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            try:
                result: ParseResult | IngestError = reader.read_open_file(
                    io.BytesIO(data), pseudonymiser=PSEUDONYMISER, source="x"
                )
            except IngestError as exc:
                result = exc
    said = sorted({str(w.message) for w in caught if issubclass(w.category, UserWarning)})
    if isinstance(result, IngestError):
        return ("error", result.code, result.reason, said)
    return ("parsed", result, said)


def _copy_in_memory(path: Path) -> bytes:
    return path.read_bytes()


def test_the_shipped_files_are_many() -> None:
    # pydicom 3.0's test_files and pydicom-data 1.0 (counts seen in the installed packages)
    assert len(_SHIPPED) > 150


@pytest.mark.parametrize("path", _SHIPPED, ids=lambda p: p.name)
def test_shipped_files_read_alike(path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    # pydicom's and pydicom-data's bundled files (real devices and writers)
    data = _copy_in_memory(path)
    if len(data) > 8 << 20:
        pytest.skip("larger than 8 MiB: pixel data only adds reading time")
    assert _outcome(data, common=True, monkeypatch=monkeypatch) == _outcome(
        data, common=False, monkeypatch=monkeypatch
    )


@pytest.mark.parametrize("case", [*cases(), *tolerated()], ids=lambda c: c.id)
def test_malformed_corpus_reads_alike(case: object, monkeypatch: pytest.MonkeyPatch) -> None:
    data = case.data  # type: ignore[attr-defined]
    assert _outcome(data, common=True, monkeypatch=monkeypatch) == _outcome(
        data, common=False, monkeypatch=monkeypatch
    )


def test_plain_files_take_the_common_path(monkeypatch: pytest.MonkeyPatch) -> None:
    from corpus import dx_header, encode

    seen: list[object] = []
    original = reader._read_common

    def spy(fh: object, head: bytes, size: int | None) -> object:
        out = original(fh, head, size)  # type: ignore[arg-type]
        seen.append(out)
        return out

    monkeypatch.setattr(reader, "_read_common", spy)
    reader.read_open_file(
        io.BytesIO(encode(dx_header("plain"))), pseudonymiser=PSEUDONYMISER, source="x"
    )
    assert seen and seen[0] is not None


@pytest.mark.parametrize("path", _SHIPPED, ids=lambda p: p.name)
def test_file_meta_is_the_one_dcmread_reads(path: Path) -> None:
    # the common path takes the file meta group from the file's first bytes itself
    data = path.read_bytes()[: 1 << 20]
    common = reader._read_common(io.BytesIO(data), data[: reader.HEAD_BYTES], len(data))
    if common is None:
        return  # not a plain Part 10 file: dcmread reads it (test_shipped_files_read_alike)
    ours = common[0].file_meta
    theirs = pydicom.dcmread(io.BytesIO(data), stop_before_pixels=True).file_meta
    assert [(e.tag, e.VR, e.value) for e in ours] == [(e.tag, e.VR, e.value) for e in theirs]
