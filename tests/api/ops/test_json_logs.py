"""``--log-format json``: one JSON object per line, and still no birth date or patient name.

A pull (from a loopback DICOMweb server) of a header whose Patient's Birth Date is written
``1943-11-07`` (so pydicom warns and quotes it) runs in a process of its own with JSON logs;
every stderr line must parse as JSON and hold no spelling of the date and no patient name.
Invented patient.
"""

from __future__ import annotations

import json
import logging
import subprocess
import sys
from pathlib import Path

import pytest
from fake_pacs import Study, dx_metadata, fake_pacs

BIRTH_DATE = "1943-11-07"
SPELLINGS = ("1943-11-07", "19431107", "1943/11/07", "1943.11.07")


def test_json_log_lines_are_json_and_hold_no_patient_data(tmp_path: Path) -> None:
    name = {"vr": "PN", "Value": [{"Alphabetic": "Quillfeather^Imogen"}]}
    meta = dx_metadata("1.2.826.0.1.3680043.8.498.41.1", "1.2.826.0.1.3680043.8.498.41",
                       "1.2.826.0.1.3680043.8.498.41.2", "20261103",
                       **{"00100030": {"vr": "DA", "Value": [BIRTH_DATE]},
                          "00100010": name,
                          "00100020": {"vr": "LO", "Value": ["HB-000123"]}})  # fmt: skip
    env = {
        "BEAMAUDIT_DATABASE_URL": f"sqlite:///{tmp_path / 'store.db'}",
        "BEAMAUDIT_SECRET_KEY_PATH": str(tmp_path / "key"),
        "PATH": "/usr/bin:/bin",
    }
    with fake_pacs(studies=[Study("1.2.826.0.1.3680043.8.498.41", "20261103", [meta])]) as pacs:
        run = subprocess.run(
            [sys.executable, "-m", "beamaudit", "--log-format", "json", "pull", "--dicomweb",
             pacs.url, "--since", "2026-11-01"],
            env=env, capture_output=True, text=True, timeout=120,
        )  # fmt: skip
    assert run.returncode == 0, run.stderr
    lines = [line for line in run.stderr.splitlines() if line.strip()]
    records = [json.loads(line) for line in lines]  # every line is one JSON object
    assert any("Invalid value for VR DA" in r["message"] for r in records), run.stderr
    assert all({"time", "level", "logger", "message"} <= r.keys() for r in records)
    for text in (run.stderr, run.stdout):
        for spelling in SPELLINGS:
            assert spelling not in text
        assert "Quillfeather" not in text and "HB-000123" not in text


def test_json_formatter_keeps_one_line_and_removes_values_from_tracebacks() -> None:
    from beamaudit.api.logs import JsonFormatter, OneLineFilter

    try:
        raise ValueError("bad birth date '1943-11-07'")
    except ValueError:
        record = logging.LogRecord(
            "beamaudit.test", logging.ERROR, __file__, 1, "failed on %s", ("a\nforged",),
            sys.exc_info(),
        )  # fmt: skip
    assert OneLineFilter().filter(record)
    line = JsonFormatter().format(record)
    assert "\n" not in line
    body = json.loads(line)
    assert body["message"] == "failed on a\\nforged"
    assert "ValueError" in body["exception"] and BIRTH_DATE not in body["exception"]


def test_unknown_log_format_is_one_line_error(capsys: pytest.CaptureFixture[str]) -> None:
    from beamaudit.api.cli import main

    assert main(["--log-format", "xml", "token", "--help"]) == 2
    err = capsys.readouterr().err
    assert "--log-format must be one of text, json" in err and len(err.strip().splitlines()) == 1
