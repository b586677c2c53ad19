"""``beamaudit explain`` and ``beamaudit export events`` on a scanned real file."""

from __future__ import annotations

import csv
import io
import json
from pathlib import Path

import pytest
from pydicom.data import get_testdata_file

from beamaudit.api.cli import main


@pytest.fixture
def scanned(settings_env, tmp_path, capsys) -> int:
    src = Path(get_testdata_file("RG1_UNCI.dcm"))  # pydicom-data, NEMA WG04 CR with DAP
    main(["scan", str(src), "--json"])
    capsys.readouterr()
    return 1


def test_explain_json_puts_reported_beside_reconstructed(scanned, capsys) -> None:
    assert main(["explain", "1", "--json"]) == 0
    data = json.loads(capsys.readouterr().out)
    # RG1_UNCI: ImageAndFluoroscopyAreaDoseProduct 1.200 dGy cm2 -> 0.12 Gy cm2 (DICOM PS3.3)
    assert data["reported"]["dap_gy_cm2"] == pytest.approx(0.12)
    assert data["reconstructed"]["dap_gy_cm2"] > 0
    assert data["dap_ratio_reported_to_recon"] == pytest.approx(
        0.12 / data["reconstructed"]["dap_gy_cm2"]
    )
    assert data["technique"]["kvp_kv"] == 150.0
    assert any("uncalibrated" in a for a in data["why"]["assumptions"])
    assert data["provenance"]["kvp_kv"].startswith("(0018,0060)")


def test_explain_text_and_unknown_id(scanned, capsys) -> None:
    assert main(["explain", "1"]) == 0
    assert "reconstructed" in capsys.readouterr().out
    assert main(["explain", "99"]) == 2
    assert "no exposure event with id 99" in capsys.readouterr().err


def test_export_csv_and_json_agree_and_carry_no_patient_identifier(scanned, capsys) -> None:
    assert main(["export", "events", "--format", "csv"]) == 0
    rows = list(csv.DictReader(io.StringIO(capsys.readouterr().out)))
    assert main(["export", "events", "--format", "json"]) == 0
    items = json.loads(capsys.readouterr().out)
    assert len(rows) == len(items) == 1
    assert float(rows[0]["dap_gy_cm2"]) == pytest.approx(items[0]["dap_gy_cm2"])
    assert "patient_pseudo_id" not in rows[0]


def test_export_bad_options(scanned, capsys) -> None:
    assert main(["export", "events", "--format", "xml"]) == 2
    assert main(["export", "events", "--since", "yesterday"]) == 2


def test_explain_shows_b_with_its_source_and_uncertainty(scanned, capsys) -> None:
    assert main(["explain", "1", "--json"]) == 0
    why = json.loads(capsys.readouterr().out)["why"]
    assert why["backscatter_factor"] > 1.0
    assert why["backscatter_factor_standard_uncertainty"] > 0
    assert "Monte Carlo backscatter kernels" in why["backscatter_factor_source"]
    assert main(["explain", "1"]) == 0
    text = " ".join(capsys.readouterr().out.split())
    assert "backscatter factor B = " in text and "one standard uncertainty" in text
    assert "Monte Carlo backscatter kernels" in text
