"""``beamaudit review``: scoped runs, and refusals instead of empty answers.

An unknown room or exam type is one line naming the closest known name, exit 2; a month without
events is one line saying so, exit 1; neither stores a run. Events are invented.
"""

from __future__ import annotations

from datetime import datetime

import pytest
from api_support import parse_result, seed
from sqlalchemy import func, select

from beamaudit.api.cli import main
from beamaudit.api.store import models as m


@pytest.fixture
def cli_store(cli_url):
    """The store, reachable by URL from the command line (``conftest.py``); ten PA chests in two
    rooms."""
    seed(
        cli_url,
        [
            parse_result(f"1.2.9.{i}", study=f"1.2.9.{i}00", station=("RAD1", "RAD2")[i % 2],
                         when=datetime(2026, 11, 2 + i, 10), body_part="CHEST", view_position="PA")
            for i in range(10)
        ],
    )  # fmt: skip
    return cli_url


def _runs(store) -> int:
    with store.session_factory() as session:
        return session.scalar(select(func.count()).select_from(m.ReviewRun)) or 0


def _one_line(err: str) -> str:
    lines = [line for line in err.splitlines() if line.strip()]
    assert len(lines) == 1, err
    return lines[0]


def test_an_unknown_room_is_one_line_naming_the_closest_and_exit_2(cli_store, capsys) -> None:
    assert main(["review", "--month", "2026-11", "--room", "RAD 1"]) == 2
    line = _one_line(capsys.readouterr().err)
    assert "RAD 1" in line and "RAD1" in line
    assert _runs(cli_store) == 0


def test_an_unknown_exam_type_is_one_line_and_exit_2(cli_store, capsys) -> None:
    assert main(["review", "--month", "2026-11", "--exam-type", "chest_pq"]) == 2
    assert "chest_pa" in _one_line(capsys.readouterr().err)
    assert _runs(cli_store) == 0


def test_a_month_without_events_is_one_line_and_exit_1(cli_store, capsys) -> None:
    assert main(["review", "--month", "2026-12"]) == 1
    out = capsys.readouterr()
    line = _one_line(out.err)
    assert "no events" in line and "2026-12" in line
    assert out.out == ""  # no empty table
    assert _runs(cli_store) == 0


def test_a_room_run_says_its_scope(cli_store, capsys) -> None:
    assert main(["review", "--month", "2026-11", "--room", "RAD2"]) == 0
    out = capsys.readouterr().out
    assert "room RAD2, 2026-11" in out and "5 events" in out
    with cli_store.session_factory() as session:
        run = session.scalars(select(m.ReviewRun)).one()
        assert run.scope == {"rooms": ["RAD2"]} and not run.whole_site


def test_the_ct_size_bands_are_a_setting_of_the_command(cli_store, capsys, monkeypatch) -> None:
    # api/review/ct_size.py: the edges come from the settings and are kept with the run
    monkeypatch.setenv("BEAMAUDIT_CT_SIZE_BAND_EDGES_CM", "[20, 25, 30]")
    assert main(["review", "--month", "2026-11"]) == 0
    with cli_store.session_factory() as session:
        run = session.scalars(select(m.ReviewRun)).one()
        assert run.parameters["ct_size_band_edges_cm"] == [20.0, 25.0, 30.0]
    monkeypatch.setenv("BEAMAUDIT_CT_SIZE_BAND_EDGES_CM", "[30, 20]")
    capsys.readouterr()
    assert main(["review", "--month", "2026-11"]) == 2
    assert "ct_size_band_edges_cm" in _one_line(capsys.readouterr().err)
