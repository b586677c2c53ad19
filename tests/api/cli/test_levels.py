"""``beamaudit levels import`` and ``export``: the store's one writer of level sets, as REST uses.

A file whose versions clash with the stored versions of their set name (another kind, the same
effective date) is refused with one line, exit 2, nothing stored, so that every later review can
still read the sets; a file ``levels export`` wrote is read back by ``levels import``. Levels are
invented.
"""

from __future__ import annotations

from sqlalchemy import select

from beamaudit.api.cli import main
from beamaudit.api.store import models as m

HEAD = "set_name,kind,version,effective_from,set_source,exam_type,quantity,value,unit,source,note\n"
LOCAL = "X (invented),local,v1,2025-01-01,tests,chest_pa,dap_gy_cm2,0.2,Gy.cm2,,\n"
NATIONAL_SAME_DAY = (
    "X (invented),national,v2,2025-01-01,tests,chest_pa,dap_gy_cm2,0.2,Gy.cm2,invented table 1,\n"
)


def _sets(store) -> list[str]:
    """The stored set versions, ``name version``."""
    with store.session_factory() as session:
        rows = session.execute(select(m.ReferenceLevelSetRow.name, m.ReferenceLevelSetRow.version))
        return sorted(f"{name} {version}" for name, version in rows)


def _one_line(err: str) -> str:
    """The refusal: one line, no traceback."""
    (line,) = err.strip().splitlines()
    return line


def test_a_version_clashing_with_a_stored_one_is_refused_in_one_line(
    cli_url, tmp_path, capsys
) -> None:
    first, second = tmp_path / "first.csv", tmp_path / "second.csv"
    first.write_text(HEAD + LOCAL, encoding="utf-8")
    second.write_text(HEAD + NATIONAL_SAME_DAY, encoding="utf-8")
    assert main(["levels", "import", str(first)]) == 0
    capsys.readouterr()
    assert main(["levels", "import", str(second)]) == 2
    line = _one_line(capsys.readouterr().err)
    assert "X (invented)" in line and "local" in line and "national" in line
    assert "Traceback" not in line
    assert _sets(cli_url) == ["X (invented) v1"]


def test_a_file_naming_one_set_both_local_and_national_is_refused(
    cli_url, tmp_path, capsys
) -> None:
    both = tmp_path / "both.csv"
    both.write_text(HEAD + LOCAL + NATIONAL_SAME_DAY, encoding="utf-8")
    assert main(["levels", "import", str(both)]) == 2
    assert "both local and national" in _one_line(capsys.readouterr().err)
    assert _sets(cli_url) == []


def test_what_levels_export_writes_levels_import_reads_again(cli_url, tmp_path, capsys) -> None:
    from beamaudit.api.review.levels import read_levels_csv

    shipped = tmp_path / "national.csv"
    from importlib import resources

    shipped.write_bytes(
        resources.files("beamaudit.api").joinpath("data", "national_levels.csv").read_bytes()
    )
    assert main(["levels", "import", str(shipped)]) == 0
    exported = tmp_path / "exported.csv"
    assert main(["levels", "export", "--output", str(exported)]) == 0
    before = read_levels_csv(exported)
    with cli_url.session_factory.begin() as session:  # a fresh store of the same catalogue
        session.query(m.ReferenceLevelRow).delete()
        session.query(m.ReferenceLevelSetRow).delete()
    capsys.readouterr()
    assert main(["levels", "import", str(exported)]) == 0, capsys.readouterr().err
    again = tmp_path / "again.csv"
    assert main(["levels", "export", "--output", str(again)]) == 0
    assert read_levels_csv(again) == before
    # importing the same versions twice is one line naming the stored one, nothing added
    n = _sets(cli_url)
    assert main(["levels", "import", str(exported)]) == 2
    assert "stored already" in _one_line(capsys.readouterr().err)
    assert _sets(cli_url) == n


def _levels_page(cli_url) -> str:
    """The levels page as a viewer sees it."""
    from fastapi.testclient import TestClient

    from beamaudit.api.settings import load
    from beamaudit.api.store.auth import create_token
    from beamaudit.api.web.app import create_app

    with cli_url.session_factory.begin() as s:
        _, viewer = create_token(s, role="viewer", name="committee")
    app = create_app(load(database_url=cli_url.url), engine=cli_url.engine)
    with TestClient(app) as client:
        return client.get("/levels", headers={"Authorization": f"Bearer {viewer}"}).text


def test_the_shipped_mammography_sets_import_and_show_on_the_levels_page(cli_url, capsys) -> None:
    assert main(["levels", "import", "--shipped", "mammography"]) == 0, capsys.readouterr().err
    assert _sets(cli_url) == [
        "European guidelines acceptable dose (PMMA 45 mm) 2006 (4th ed.)",
        "IAEA BSS 115 mammography guidance level 1996",
    ]
    page = _levels_page(cli_url)
    assert "IAEA BSS 115 mammography guidance level" in page
    assert "European guidelines acceptable dose (PMMA 45 mm)" in page
    assert "From memory, confidence medium-high" in page


def test_shipped_or_a_file_not_both_nor_an_unknown_name(cli_url, tmp_path, capsys) -> None:
    path = tmp_path / "x.csv"
    path.write_text(HEAD + LOCAL, encoding="utf-8")
    assert main(["levels", "import", str(path), "--shipped", "national"]) == 2
    assert "either FILE.csv or --shipped" in _one_line(capsys.readouterr().err)
    assert main(["levels", "import", "--shipped", "demo"]) == 2
    assert "no shipped level file 'demo'" in _one_line(capsys.readouterr().err)
    assert _sets(cli_url) == []


def test_a_mammography_levels_thickness_band_round_trips_and_shows(cli_url, tmp_path, capsys):
    head = HEAD.rstrip("\n") + ",patient_group,clinical_indication\n"
    rows = (
        "M (invented),local,v1,2025-01-01,tests,mammo_cc,mgd_mgy,2.0,mGy,,,breast_45_55mm,\n"
        "M (invented),local,v1,2025-01-01,tests,mammo_mlo,mgd_mgy,2.4,mGy,,,,\n"
    )
    first = tmp_path / "bands.csv"
    first.write_text(head + rows, encoding="utf-8")
    assert main(["levels", "import", str(first)]) == 0, capsys.readouterr().err
    exported = tmp_path / "exported.csv"
    assert main(["levels", "export", "--output", str(exported)]) == 0
    text = exported.read_text(encoding="utf-8")
    assert ",breast_45_55mm," in text
    with cli_url.session_factory.begin() as session:
        session.query(m.ReferenceLevelRow).delete()
        session.query(m.ReferenceLevelSetRow).delete()
    assert main(["levels", "import", str(exported)]) == 0, capsys.readouterr().err
    again = tmp_path / "again.csv"
    assert main(["levels", "export", "--output", str(again)]) == 0
    assert again.read_text(encoding="utf-8") == text
    page = _levels_page(cli_url)
    assert "compressed breast 45-55 mm" in page
    assert "in the review&#39;s thickness band" in page or "in the review's thickness band" in page


def test_levels_list_shows_each_stored_version_and_which_are_retired(
    cli_url, tmp_path, capsys
) -> None:
    # the listing reads the table with a plain statement (no ORM mapping at start-up): the same
    # columns as stored, on both backends
    from datetime import UTC, datetime

    two = tmp_path / "two.csv"
    two.write_text(HEAD + LOCAL + LOCAL.replace("v1,2025-01-01", "v2,2026-03-01"), encoding="utf-8")
    assert main(["levels", "import", str(two)]) == 0
    with cli_url.session_factory.begin() as session:
        first = session.scalars(
            select(m.ReferenceLevelSetRow).where(m.ReferenceLevelSetRow.version == "v1")
        ).one()
        first.retired_at = datetime(2026, 3, 1, tzinfo=UTC)
    capsys.readouterr()
    assert main(["levels", "list"]) == 0
    rows = [line for line in capsys.readouterr().out.splitlines() if "v1" in line or "v2" in line]
    assert len(rows) == 2
    v1, v2 = sorted(rows, key=lambda line: "v2" in line)
    assert "2025-01-01" in v1 and "yes" in v1 and "local" in v1
    assert "2026-03-01" in v2 and "yes" not in v2
