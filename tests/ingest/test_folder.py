"""The folder source: recursion, content sniffing, DICOMDIR skipped.

One bad file never stops a scan.
"""

from __future__ import annotations

import os
import shutil
from pathlib import Path

import pytest
from ingest_samples import DICOMDIR_TESTS, PSEUDONYMISER, header, sample, to_bytes

from beamaudit.ingest import ScanSummary, classify, iter_candidate_files, scan
from beamaudit.ingest.reader import classify_head


@pytest.fixture
def export(tmp_path: Path) -> Path:
    """A PACS-like export: files without extensions, nested folders, a DICOMDIR, junk."""
    root = tmp_path / "export"
    (root / "A" / "B").mkdir(parents=True)
    (root / "C").mkdir()
    shutil.copy(sample("CT_small.dcm"), root / "A" / "IM0001")
    shutil.copy(DICOMDIR_TESTS / "77654033" / "CR1" / "6154", root / "A" / "B" / "IM0002")
    shutil.copy(DICOMDIR_TESTS / "DICOMDIR", root / "DICOMDIR")
    (root / "C" / "readme.txt").write_text("export notes\n")
    data = to_bytes(header(KVP="80"))
    (root / "C" / "cut").write_bytes(data[: len(data) // 2])
    (root / "C" / "bad_kvp").write_bytes(to_bytes(header(KVP="400")))
    os.symlink(root, root / "A" / "loop")  # a link back to the top must not loop
    os.symlink(root / "A" / "IM0001", root / "C" / "same_file")  # counted once
    return root


def test_walk_is_recursive_deterministic_and_loop_free(export: Path) -> None:
    files = [p.relative_to(export).as_posix() for p in iter_candidate_files([export])]
    assert files == ["A/B/IM0002", "A/IM0001", "C/bad_kvp", "C/cut", "C/readme.txt", "DICOMDIR"]
    assert files == [p.relative_to(export).as_posix() for p in iter_candidate_files([export])]


def test_classify_by_content(export: Path) -> None:
    assert classify(export / "A" / "IM0001") == "dicom"
    assert classify(export / "DICOMDIR") == "dicomdir"
    assert classify(export / "C" / "readme.txt") == "not_dicom"
    assert classify_head(b"") == "not_dicom"


def test_scan_records_errors_and_goes_on(export: Path) -> None:
    summary = ScanSummary()
    outcomes = list(scan([export], pseudonymiser=PSEUDONYMISER, summary=summary))
    by_name = {o.path.name: o for o in outcomes}
    assert (
        by_name["IM0001"].result is not None and by_name["IM0001"].result.events[0].kvp_kv == 120.0
    )
    assert by_name["IM0002"].result is not None
    assert by_name["DICOMDIR"].skipped and by_name["DICOMDIR"].error is None
    assert (
        by_name["readme.txt"].error is not None and by_name["readme.txt"].error.code == "not_dicom"
    )
    assert by_name["cut"].error is not None and by_name["cut"].error.code in (
        "truncated",
        "missing_attribute",
    )
    assert by_name["bad_kvp"].error is not None and by_name["bad_kvp"].error.code == "out_of_range"
    assert by_name["bad_kvp"].error.source == str(export / "C" / "bad_kvp")
    assert (summary.files, summary.parsed, summary.dicomdirs, summary.errors) == (6, 2, 1, 3)
    assert summary.events == 2


def test_missing_path_is_an_outcome_not_a_crash(tmp_path: Path) -> None:
    (outcome,) = scan([tmp_path / "nowhere"], pseudonymiser=PSEUDONYMISER)
    assert outcome.error is not None and outcome.error.code == "unreadable"


def test_pydicom_dicomdir_tree_scans_without_errors() -> None:
    summary = ScanSummary()
    for _ in scan([DICOMDIR_TESTS / "77654033"], pseudonymiser=PSEUDONYMISER, summary=summary):
        pass
    assert summary.errors == 0 and summary.parsed == summary.files == 7  # 3 CR + 4 CT
