"""``beamaudit mgd`` in-process: the promised fields, the table, and one-line errors."""

from __future__ import annotations

import json
from pathlib import Path

import pytest
import typer
from typer.testing import CliRunner

from beamaudit.api import cli

runner = CliRunner()
BASE = ["mgd", "--kv", "28", "--anode", "W", "--filter", "0.05:Rh", "--thickness-mm", "50"]


@pytest.fixture(scope="module")
def app() -> typer.Typer:
    return cli.app


def test_json_has_the_promised_fields(app: typer.Typer) -> None:
    result = runner.invoke(app, [*BASE, "--mas", "80", "--glandularity", "0.3", "--json"])
    assert result.exit_code == 0, result.output
    data = json.loads(result.output)
    for key in ("mgd_mgy", "incident_air_kerma_mgy", "hvl1_mm_al", "g", "c", "s", "assumptions"):
        assert key in data
    assert data["mgd_mgy"] == pytest.approx(
        data["incident_air_kerma_mgy"] * data["g"] * data["c"] * data["s"]
    )
    assert data["glandularity_percent"] == pytest.approx(30.0)
    assert data["tomo_factor"] is None
    assert data["coefficients"] == "beamaudit Monte Carlo"
    assert "quality assurance" in data["notice"]


def test_age_gives_a_typical_glandularity_recorded_as_assumed(app: typer.Typer) -> None:
    result = runner.invoke(app, [*BASE, "--mas", "80", "--age", "55", "--json"])
    assert result.exit_code == 0, result.output
    data = json.loads(result.output)
    assert any("typical glandularity" in a and "50-64" in a for a in data["assumptions"])


def test_mgd_is_proportional_to_mas(app: typer.Typer) -> None:
    one, two = (
        json.loads(runner.invoke(app, [*BASE, "--mas", m, "--age", "55", "--json"]).output)
        for m in ("40", "80")
    )
    assert two["mgd_mgy"] == pytest.approx(2.0 * one["mgd_mgy"])


def test_text_output_is_a_table(app: typer.Typer) -> None:
    result = runner.invoke(app, [*BASE, "--mas", "80", "--age", "55"])
    assert result.exit_code == 0, result.output
    for text in ("mean glandular dose D_G (mGy)", "g (50 % glandular)", "s (spectrum)",
                 "calibrated: NO", "qualified medical physicist"):  # fmt: skip
        assert text in result.output


def test_tomosynthesis_adds_t(app: typer.Typer) -> None:
    args = [*BASE, "--mas", "80", "--age", "55", "--tomo-arc", "30", "--tomo-projections", "15"]
    data = json.loads(runner.invoke(app, [*args, "--json"]).output)
    assert 0.8 < data["tomo_factor"] <= 1.0
    assert data["mgd_mgy"] == pytest.approx(
        data["incident_air_kerma_mgy"] * data["g"] * data["c"] * data["s"] * data["tomo_factor"]
    )


def test_official_table_takes_precedence_and_is_named(app: typer.Typer, tmp_path: Path) -> None:
    table = tmp_path / "official.csv"
    table.write_text(
        "# title: Test table\n# source: invented for this test\n"
        "factor,key,hvl_mm_al,thickness_mm,glandularity_percent,value\n"
        "s,W/Rh,,,,1.042\n",
        encoding="utf-8",
    )
    data = json.loads(
        runner.invoke(
            app, [*BASE, "--mas", "80", "--age", "55", "--coefficients", str(table), "--json"]
        ).output
    )
    assert data["s"] == 1.042
    assert data["coefficients"].startswith("Test table (invented for this test; sha256 ")
    assert data["monte_carlo"]["s"] != 1.042
    assert any("official table lists no g" in a for a in data["assumptions"])


@pytest.mark.parametrize(
    ("extra", "message"),
    [
        (["--mas", "80", "--glandularity", "0.3", "--age", "55"], "not both"),
        ([], "exactly one of --mas and --kerma-mgy"),
        (["--mas", "80", "--glandularity", "30"], "glandularity 30.0 is outside"),
        (["--mas", "80", "--tomo-arc", "30"], "needs both"),
        (["--mas", "-5"], "not a positive number"),
    ],
)
def test_bad_input_is_one_line(app: typer.Typer, extra: list[str], message: str) -> None:
    result = runner.invoke(app, [*BASE, *extra])
    assert result.exit_code == 2
    assert message in result.output
    assert "Traceback" not in result.output


def test_bad_technique_is_one_line(app: typer.Typer) -> None:
    result = runner.invoke(
        app, ["mgd", "--kv", "80", "--anode", "W", "--filter", "0.05:Rh", "--thickness-mm",
              "50", "--mas", "80"],
    )  # fmt: skip
    assert result.exit_code == 2
    assert "outside 20-40 kV for mammography" in result.output


def test_unreadable_official_table_is_one_line(app: typer.Typer, tmp_path: Path) -> None:
    bad = tmp_path / "bad.csv"
    bad.write_text("# title: x\n# source: y\nfactor,key,hvl_mm_al,thickness_mm,"
                   "glandularity_percent,value\nq,,0.3,20,,0.4\n", encoding="utf-8")  # fmt: skip
    result = runner.invoke(app, [*BASE, "--mas", "80", "--coefficients", str(bad)])
    assert result.exit_code == 2
    assert "bad.csv line 4: factor 'q' is not g, c, s or T" in result.output
