"""CSV imports refuse what is no table, quickly and with the reason (SECURITY.md, "Imports").

Before: a level-set CSV holding a NUL byte answered 500 (PostgreSQL refuses NUL in text), and a
header of a million columns took 47 s and 1.7 GB while ``/health`` waited. Now: 400 naming the
line, limits on columns, line length and file size (settings ``api.max_csv_*``). Both backends.
"""

from __future__ import annotations

import time

import pytest
from api_support import make_api
from sqlalchemy import select

from beamaudit.api.store import models as m

CSV = {"Content-Type": "text/csv"}
HEADER = "set_name,kind,version,effective_from,exam_type,quantity,value\n"
ROW = "Hollowbrook (invented),local,1,2026-01-01,chest_pa,dap_gy_cm2,0.1\n"
IMPORTS = [("POST", "/level-sets.csv"), ("POST", "/exam-types.csv"),
           ("PUT", "/mapping-rules.csv")]  # fmt: skip


def test_a_nul_byte_is_a_400_naming_the_line(api) -> None:
    body = (HEADER + ROW.replace("Hollowbrook", "Hollow\x00brook")).encode()
    reply = api.post("/level-sets.csv", content=body, headers=CSV, as_="physicist")
    assert reply.status_code == 400, reply.text
    assert "line 2" in reply.json()["detail"] and "NUL" in reply.json()["detail"]
    with api.store.session_factory() as s:
        assert s.scalars(select(m.ReferenceLevelSetRow)).all() == []


@pytest.mark.parametrize(("method", "path"), IMPORTS)
def test_a_million_columns_is_refused_at_once(api, method: str, path: str) -> None:
    body = ("c," * 1_000_000 + "c\n").encode()  # 2 MB: under the size limit
    start = time.monotonic()
    reply = api.request(method, path, content=body, headers=CSV)
    assert reply.status_code == 400, reply.text[:300]
    assert "longer than" in reply.json()["detail"]
    assert time.monotonic() - start < 10  # generous: the check is a split, not a parse
    assert api.get("/health", as_=None).status_code == 200


def test_limits_come_from_the_settings(shared_store, tmp_path) -> None:
    for api in make_api(shared_store, tmp_path,
                        api={"max_csv_columns": 4, "max_csv_row_chars": 300,
                             "max_csv_bytes": 2048}):  # fmt: skip
        wide = api.post("/level-sets.csv", content=(HEADER + ROW).encode(), headers=CSV)
        assert wide.status_code == 400 and "7 columns; at most 4" in wide.json()["detail"]
        long = api.post("/level-sets.csv", content=("#" + "x" * 400 + "\n").encode(),
                        headers=CSV)  # fmt: skip
        assert long.status_code == 400 and "line 1 is longer than 300" in long.json()["detail"]
        big = api.post("/level-sets.csv", content=("#\n" * 2000).encode(), headers=CSV)
        assert big.status_code == 413


def test_a_nul_byte_in_a_file_read_by_the_cli_is_a_format_error(tmp_path) -> None:
    from beamaudit.api.review.errors import CsvFormatError
    from beamaudit.api.review.levels import read_levels_csv

    path = tmp_path / "levels.csv"
    path.write_bytes((HEADER + ROW.replace("local", "lo\x00cal")).encode())
    with pytest.raises(CsvFormatError, match="NUL"):
        read_levels_csv(path)


def test_a_file_of_many_wrong_columns_reports_a_page_of_problems(tmp_path) -> None:
    from beamaudit.api.review.errors import CsvFormatError
    from beamaudit.api.review.levels import read_levels_csv

    path = tmp_path / "levels.csv"
    path.write_text(",".join(f"col{i}" for i in range(5000)) + "\n", encoding="utf-8")
    with pytest.raises(CsvFormatError) as caught:
        read_levels_csv(path)
    assert len(caught.value.problems) <= 51
