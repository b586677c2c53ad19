"""``beamaudit export events``: spreadsheet-safe CSV, and the UIDs a physicist traces a figure by.

A Station Name or protocol starting with ``=``, ``+``, ``-`` or ``@`` (sent by any modality) must
reach the CSV as text prefixed with ``'`` (OWASP, CSV injection); numbers stay numbers. Each row
carries the Study Instance UID and SOP Instance UID. Both backends; invented data.
"""

from __future__ import annotations

import csv
import io
import json

import pytest
from api_support import parse_result, seed
from store_support import cli_url

from beamaudit.api.cli import main

LINK = '=HYPERLINK("http://attacker.invalid","open")'


@pytest.fixture
def cli_store(store, tmp_path, monkeypatch):
    monkeypatch.setenv("BEAMAUDIT_DATABASE_URL", cli_url(store))
    monkeypatch.setenv("BEAMAUDIT_SECRET_KEY_PATH", str(tmp_path / "secret.key"))
    monkeypatch.delenv("BEAMAUDIT_CONFIG", raising=False)
    return store


def test_export_events_csv_neutralises_formulas_and_carries_uids(cli_store, capsys) -> None:
    seed(
        cli_store,
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
    assert main(["export", "events", "--format", "csv"]) == 0
    (row,) = list(csv.DictReader(io.StringIO(capsys.readouterr().out)))
    assert row["station_name"] == "'" + LINK
    assert row["protocol_name"] == "'-2+3"
    assert row["series_description"] == "'@SUM(A1)"
    assert float(row["dap_gy_cm2"]) == pytest.approx(0.12)
    assert row["study_instance_uid"] == "1.2.826.0.1.3680043.8.498.7"
    assert row["sop_instance_uid"] == "1.2.826.0.1.3680043.8.498.77"
    for value in row.values():
        assert not value.startswith(("=", "+", "@", "\t", "\r")), value

    assert main(["export", "events", "--format", "json"]) == 0
    (item,) = json.loads(capsys.readouterr().out)
    assert item["station_name"] == LINK  # JSON carries the value as it is
    assert item["sop_instance_uid"] == "1.2.826.0.1.3680043.8.498.77"
