"""``beamaudit ct-calibration add | list``: a scanner's localizer calibration from a CSV file,
refused in one line when the file or the device is wrong. Both backends."""

from __future__ import annotations

import json
from pathlib import Path

import pytest
from sqlalchemy import select

from beamaudit.api.cli import main
from beamaudit.api.store import models as m


def _device(store, station: str = "HGH-CT9") -> int:
    with store.session_factory.begin() as s:
        device = m.Device(station_name=station, manufacturer="Invented CT")
        s.add(device)
        s.flush()
        return device.id


def _points(tmp_path: Path, text: str = "pixel_value,water_mm\n0,0\n2100,200\n3800,400\n") -> Path:
    path = tmp_path / "points.csv"
    path.write_text(text, encoding="utf-8")
    return path


def test_a_calibration_is_added_and_listed(cli_url, tmp_path: Path, capsys) -> None:
    device = _device(cli_url)
    code = main(
        ["ct-calibration", "add", "HGH-CT9", str(_points(tmp_path)), "--kv", "120",
         "--measured-on", "2026-11-02", "--source", "water cylinders, invented"]
    )  # fmt: skip
    assert code in (0, None)
    assert "stored calibration" in capsys.readouterr().out
    main(["ct-calibration", "list", "--json"])
    (listed,) = json.loads(capsys.readouterr().out)
    assert (listed["station_name"], listed["kvp_kv"], listed["view"]) == (
        "HGH-CT9",
        120.0,
        "frontal",
    )
    assert listed["points"] == 3
    with cli_url.session_factory() as s:
        row = s.scalar(select(m.CtLocalizerCalibrationRow))
        assert row is not None and row.device_id == device and row.created_by == "cli"


@pytest.mark.parametrize(
    ("station", "text", "match"),
    [
        ("HGH-CT9", "pixel,mm\n0,0\n", "needs the columns pixel_value and water_mm"),
        ("HGH-CT9", "pixel_value,water_mm\n5,0\n3,10\n", "must increase"),
        ("NO-SUCH", "pixel_value,water_mm\n0,0\n10,10\n", "no device with station name"),
    ],
)
def test_bad_input_is_one_line(cli_url, tmp_path: Path, capsys, station, text, match) -> None:
    _device(cli_url)
    code = main(["ct-calibration", "add", station, str(_points(tmp_path, text)), "--kv", "120"])
    err = capsys.readouterr().err
    assert code == 2 and match in err and "Traceback" not in err
    assert len(err.strip().splitlines()) == 1
