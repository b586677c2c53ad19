"""``beamaudit export events``: spreadsheet-safe CSV, and the UIDs a physicist traces a figure by.

A Station Name or protocol starting with ``=``, ``+``, ``-`` or ``@`` (sent by any modality) must
reach the CSV as text prefixed with ``'`` (OWASP, CSV injection); numbers stay numbers. Each row
carries the Study Instance UID and SOP Instance UID. Both backends; invented data.
"""

from __future__ import annotations

import csv
import io
import json
import subprocess
import sys

import pytest
from api_support import parse_result, seed
from procs import shared_store

LINK = '=HYPERLINK("http://attacker.invalid","open")'


class _Handle:
    def __init__(self, store) -> None:
        self.session_factory = store.sessions


def _export(store, fmt: str) -> str:
    done = subprocess.run(
        [sys.executable, "-m", "beamaudit", "export", "events", "--format", fmt],
        env=store.env(), capture_output=True, text=True, timeout=120,
    )  # fmt: skip
    assert done.returncode == 0, done.stderr
    return done.stdout


@pytest.mark.parametrize(
    "backend", ["sqlite", pytest.param("postgresql", marks=pytest.mark.postgres)]
)
def test_export_events_csv_neutralises_formulas_and_carries_uids(backend, tmp_path) -> None:
    with shared_store(backend, tmp_path) as store:
        _check(store)


def _check(store) -> None:
    seed(
        _Handle(store),
        [
            parse_result(
                "1.2.826.0.1.3680043.8.498.77",
                study="1.2.826.0.1.3680043.8.498.7",
                station=LINK,
                protocol_name="-2+3",
                series_description="@SUM(A1)",
            )
        ],
    )
    (row,) = list(csv.DictReader(io.StringIO(_export(store, "csv"))))
    assert row["station_name"] == "'" + LINK
    assert row["protocol_name"] == "'-2+3"
    assert row["series_description"] == "'@SUM(A1)"
    assert float(row["dap_gy_cm2"]) == pytest.approx(0.12)
    assert row["study_instance_uid"] == "1.2.826.0.1.3680043.8.498.7"
    assert row["sop_instance_uid"] == "1.2.826.0.1.3680043.8.498.77"
    for value in row.values():
        assert not value.startswith(("=", "+", "@", "\t", "\r")), value

    (item,) = json.loads(_export(store, "json"))
    assert item["station_name"] == LINK  # JSON carries the value as it is
    assert item["sop_instance_uid"] == "1.2.826.0.1.3680043.8.498.77"
