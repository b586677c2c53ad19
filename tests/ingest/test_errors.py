"""IngestError: code, reason, source."""

from __future__ import annotations

import pickle

import pytest

from beamaudit.ingest import ERROR_CODES, IngestError


def test_error_carries_code_reason_and_source() -> None:
    err = IngestError("truncated", "the object ends inside (0018,0060)", "/data/x")
    assert (err.code, err.reason, err.source) == (
        "truncated",
        "the object ends inside (0018,0060)",
        "/data/x",
    )
    assert str(err) == "/data/x: the object ends inside (0018,0060) [truncated]"


def test_with_source_keeps_an_existing_source() -> None:
    assert IngestError("bad_value", "r").with_source("a").source == "a"
    assert IngestError("bad_value", "r", "b").with_source("a").source == "b"


def test_unknown_code_is_a_programming_error() -> None:
    with pytest.raises(ValueError, match="unknown ingest error code"):
        IngestError("oops", "r")


def test_error_pickles_for_worker_processes() -> None:
    err = pickle.loads(pickle.dumps(IngestError("not_dicom", "r", "s")))
    assert (err.code, err.reason, err.source) == ("not_dicom", "r", "s")


def test_codes_named_in_the_issue_exist() -> None:
    assert {"not_dicom", "truncated", "missing_attribute", "out_of_range", "bad_value",
            "unsupported_sop_class", "broken_template"} <= ERROR_CODES  # fmt: skip
