"""``beamaudit beam`` in-process: table, JSON, plot and one-line errors."""

from __future__ import annotations

import json
from pathlib import Path

import pytest
import typer
from typer.testing import CliRunner

from beamaudit.api.cli import beam as beam_cli


@pytest.fixture(scope="module")
def app() -> typer.Typer:
    """The real application when it registers ``beam``; otherwise ``beam`` on its own app."""
    from beamaudit.api import cli

    if "beam" in getattr(cli, "COMMAND_MODULES", ()):
        return cli.app
    own = typer.Typer()
    beam_cli.register(own)

    @own.callback()
    def _root() -> None:
        """Test application."""

    return own


runner = CliRunner()


def test_text_output_is_a_table(app: typer.Typer) -> None:
    result = runner.invoke(app, ["beam", "--kv", "80", "--filter", "2.5:Al", "--filter", "0.1:Cu"])
    assert result.exit_code == 0, result.output
    assert "first HVL (mm Al)" in result.output
    assert "2.5 mm Al + 0.1 mm Cu" in result.output
    assert "calibrated: NO" in result.output


def test_json_has_the_promised_fields(app: typer.Typer) -> None:
    result = runner.invoke(app, ["beam", "--kv", "80", "--json"])
    assert result.exit_code == 0, result.output
    data = json.loads(result.output)
    for key in (
        "kv",
        "hvl1_mm_al",
        "hvl2_mm_al",
        "homogeneity",
        "hvl1_mm_cu",
        "mean_energy_kev",
        "output_ugy_per_mas_1m",
        "calibrated",
        "energies_kev",
        "fluence_per_mas_1m",
    ):
        assert key in data
    assert data["calibrated"] is False
    assert data["filtration_assumed"] is True
    assert data["kv"] == 80.0


def test_options_reach_the_model(app: typer.Typer) -> None:
    flat = json.loads(runner.invoke(app, ["beam", "--kv", "80", "--json"]).output)
    rippled = json.loads(
        runner.invoke(
            app,
            [
                "beam",
                "--kv",
                "80",
                "--ripple",
                "20",
                "--anode-angle",
                "16",
                "--anode",
                "W",
                "--json",
            ],
        ).output
    )
    assert rippled["ripple_percent"] == 20.0
    assert rippled["anode_angle_deg"] == 16.0
    assert rippled["hvl1_mm_al"] != flat["hvl1_mm_al"]


def test_plot_writes_self_contained_html(app: typer.Typer, tmp_path: Path) -> None:
    target = tmp_path / "spectrum.html"
    result = runner.invoke(app, ["beam", "--kv", "70", "--plot", str(target)])
    assert result.exit_code == 0, result.output
    html = target.read_text("utf-8")
    assert "<html" in html
    assert '<script src="http' not in html  # plotly.js inline: the machines have no internet
    assert len(html) > 1_000_000


@pytest.mark.parametrize(
    ("args", "message"),
    [
        (["--kv", "0"], "outside 20-150 kV"),
        (["--kv", "400"], "outside 20-150 kV"),
        (["--kv", "80", "--filter", "1:unobtainium"], "unknown material"),
        (["--kv", "80", "--filter", "-1:Al"], "non-negative"),
        (["--kv", "80", "--filter", "2.5"], "THICKNESS_MM:MATERIAL"),
        (["--kv", "80", "--anode-angle", "40"], "anode angle"),
    ],
)
def test_impossible_input_is_one_line_and_exit_2(
    app: typer.Typer, args: list[str], message: str
) -> None:
    result = runner.invoke(app, ["beam", *args])
    assert result.exit_code == 2
    err = result.stderr
    assert message in err
    assert len(err.strip().splitlines()) == 1
    assert "Traceback" not in result.output


def test_summary_leads_with_what_a_dose_audit_uses(app: typer.Typer) -> None:
    result = runner.invoke(app, ["beam", "--kv", "80"])
    assert result.exit_code == 0, result.output
    out = result.output
    rows = [out.index(label) for label in ("output at 1 m", "first HVL (mm Al)", "mean energy")]
    assert rows == sorted(rows)
    assert "second HVL (mm Al)" not in out and "homogeneity coefficient" not in out
    # the anode angle is stated with the angle the model was checked at
    assert "12° (the angle the model was checked at)" in out


def test_all_shows_the_rest_and_the_anode_angle_check(app: typer.Typer) -> None:
    result = runner.invoke(app, ["beam", "--kv", "80", "--all", "--anode-angle", "16"])
    assert result.exit_code == 0, result.output
    out = " ".join(result.output.split())
    for label in ("second HVL (mm Al)", "homogeneity coefficient", "first HVL (mm Cu)",
                  "effective energy (keV)"):  # fmt: skip
        assert label in out
    assert "checked at 12 degrees against the IEC 61267:2005 RQR 2-10" in out
    assert "anode angle 16 degrees: the model was checked at 12 degrees" in out
