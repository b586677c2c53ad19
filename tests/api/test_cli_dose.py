"""``beamaudit dose``: figures, JSON, and one-line errors with exit 2."""

from __future__ import annotations

import json

import pytest
import typer
from typer.testing import CliRunner

from beamaudit.api.cli.dose import parse_field_cm, register

BASE = [
    "dose",
    "--kv",
    "81",
    "--mas",
    "10",
    "--sid-mm",
    "1800",
    "--field-cm",
    "35x43",
    "--thickness-mm",
    "220",
]


@pytest.fixture(scope="module")
def app() -> typer.Typer:
    app = typer.Typer()
    register(app)

    @app.callback()
    def _root() -> None:  # a group, as in the real command line
        pass

    return app


def run(app: typer.Typer, *args: str):
    return CliRunner().invoke(app, [*BASE, *args])


def test_text_report(app: typer.Typer) -> None:
    result = run(app)
    assert result.exit_code == 0, result.stderr
    out = result.stdout
    for label in (
        "DAP",
        "incident air kerma",
        "backscatter factor",
        "entrance surface air kerma",
        "entrance surface dose",
        "focus-to-skin distance",
        "assumptions:",
        "estimate",
    ):
        assert label in out
    assert "uncalibrated" in out


def test_json_has_the_promised_keys(app: typer.Typer) -> None:
    result = run(app, "--json", "--filter", "2.5:Al", "--filter", "0.1:Cu")
    assert result.exit_code == 0, result.stderr
    data = json.loads(result.stdout)
    for key in (
        "dap_gy_cm2",
        "incident_air_kerma_mgy",
        "esak_mgy",
        "entrance_dose_mgy",
        "backscatter_factor",
        "fsd_mm",
        "hvl1_mm_al",
        "calibrated",
        "assumptions",
    ):
        assert key in data
    assert isinstance(data["assumptions"], list)
    assert all(isinstance(a, str) for a in data["assumptions"])
    assert data["calibrated"] is False
    assert data["filters"] == [
        {"material": "Al", "thickness_mm": 2.5},
        {"material": "Cu", "thickness_mm": 0.1},
    ]
    # FSD = 1800 - 50 (default gap, assumed) - 220
    assert data["fsd_mm"] == pytest.approx(1530.0)
    # DAP by hand from the JSON's own output: K(1800) · 1505 cm² · f, f the field's mean kerma
    # over its axis kerma (off-axis inverse-square law, by quadrature of its definition)
    from scipy.integrate import dblquad

    f = dblquad(lambda y, x: 180.0**2 / (180.0**2 + x * x + y * y), -17.5, 17.5, -21.5, 21.5)[0]
    k_sid_mgy = data["output_ugy_per_mas_1m"] * 10 / 1.8**2 / 1000
    assert data["dap_gy_cm2"] == pytest.approx(k_sid_mgy * f / 1000, rel=1e-7)
    assert data["esak_mgy"] == pytest.approx(
        data["incident_air_kerma_mgy"] * data["backscatter_factor"]
    )


def test_fsd_overrides_the_thickness_rule(app: typer.Typer) -> None:
    result = run(app, "--fsd-mm", "1500", "--json")
    data = json.loads(result.stdout)
    assert data["fsd_mm"] == 1500.0
    assert data["distance_source"] == "source_to_entrance"
    # inverse-square law from the JSON's own output
    assert data["incident_air_kerma_mgy"] == pytest.approx(
        data["output_ugy_per_mas_1m"] * 10 / 1.5**2 / 1000
    )


def test_more_filtration_hardens_the_beam(app: typer.Typer) -> None:
    soft = json.loads(run(app, "--json", "--filter", "2.5:Al").stdout)
    hard = json.loads(run(app, "--json", "--filter", "2.5:Al", "--filter", "0.2:Cu").stdout)
    assert hard["hvl1_mm_al"] > soft["hvl1_mm_al"]
    assert hard["incident_air_kerma_mgy"] < soft["incident_air_kerma_mgy"]


def _one_error_line(result) -> str:
    assert result.exit_code == 2
    lines = [line for line in result.stderr.splitlines() if line.strip()]
    assert len(lines) == 1, result.stderr
    assert "Traceback" not in result.stderr
    return lines[0]


@pytest.mark.parametrize(
    ("args", "message"),
    [
        (["--thickness-mm", "1900"], "impossible geometry"),
        (["--field-cm", "35x0"], "zero area"),
        (["--field-cm", "big"], "WIDTHxHEIGHT"),
        (["--fsd-mm", "1700"], "impossible geometry"),
        (["--filter", "2.5"], "THICKNESS_MM:MATERIAL"),
        (["--filter", "2.5:Unobtainium"], "Unobtainium"),
        (["--mas", "-3"], "exposure_mas"),
    ],
)
def test_bad_input_is_one_line_and_exit_2(app: typer.Typer, args: list[str], message: str) -> None:
    line = _one_error_line(run(app, *args))
    assert message in line


def test_kv_out_of_range_is_one_line(app: typer.Typer) -> None:
    line = _one_error_line(run(app, "--kv", "500"))
    assert "kV" in line or "kv" in line


def test_parse_field_cm() -> None:
    assert parse_field_cm("35x43") == (35.0, 43.0)
    assert parse_field_cm(" 24 X 30 ") == (24.0, 30.0)
    assert parse_field_cm("18.5×24") == (18.5, 24.0)
    with pytest.raises(ValueError, match="zero area"):
        parse_field_cm("0x10")


def _rooms(settings_env, *rooms: dict) -> None:
    """Store rooms (Room columns as dicts; ``output_scale`` adds an active calibration)."""
    from beamaudit.api.store import make_engine, make_session_factory, upgrade
    from beamaudit.api.store import models as m

    engine = make_engine(f"sqlite:///{settings_env}")
    upgrade(engine)
    with make_session_factory(engine).begin() as s:
        site = m.Site(name="Fernmoor Infirmary (invented)")
        s.add(site)
        s.flush()
        for columns in rooms:
            scale = columns.pop("output_scale", None)
            room = m.Room(site_id=site.id, **columns)
            s.add(room)
            s.flush()
            if scale is not None:
                calibration = m.RoomCalibrationRow(
                    room_id=room.id, output_scale=scale, n_measurements=3, residuals=[]
                )
                s.add(calibration)
    engine.dispose()


def test_room_option_uses_the_stored_calibration(settings_env, capsys) -> None:
    import json

    from beamaudit.api.cli import main

    _rooms(settings_env, {"name": "RAD A", "output_scale": 0.8})
    base = ["dose", "--kv", "81", "--mas", "10", "--sid-mm", "1800", "--field-cm", "35x43",
            "--thickness-mm", "220", "--json"]  # fmt: skip
    assert main([*base, "--room", "RAD A"]) == 0
    assert json.loads(capsys.readouterr().out)["calibrated"] is True
    assert main([*base, "--room", "NOWHERE"]) == 2
    assert "no room of that name" in capsys.readouterr().err


def test_room_option_says_which_filtration_it_used(settings_env, capsys) -> None:
    # a room with its own total filtration: the report names it, never "default (assumed)"
    import json

    from beamaudit.api.cli import main

    filtration = [{"material": "aluminium", "thickness_mm": 3.0},
                  {"material": "copper", "thickness_mm": 0.1}]  # fmt: skip
    _rooms(settings_env, {"name": "RAD B", "filtration": filtration}, {"name": "RAD C"})
    base = ["dose", "--kv", "81", "--mas", "10", "--sid-mm", "1800", "--field-cm", "35x43",
            "--thickness-mm", "220"]  # fmt: skip
    assert main([*base, "--room", "RAD B"]) == 0
    out = capsys.readouterr().out
    assert "filtration 3 mm Al + 0.1 mm Cu," in out and "assumed)" not in out.split("\n")[0]
    assert main([*base, "--room", "RAD B", "--json"]) == 0
    data = json.loads(capsys.readouterr().out)
    assert data["filters"] == [
        {"material": "Al", "thickness_mm": 3.0},
        {"material": "Cu", "thickness_mm": 0.1},
    ]
    assert data["filtration_assumed"] is False
    # a room without filtration: the default, said to be assumed
    assert main([*base, "--room", "RAD C"]) == 0
    first = capsys.readouterr().out.split("\n")[0]
    assert "filtration 2.5 mm Al (assumed)" in first
