"""End to end: files from packages and dose reports into the store by folder scan and by C-STORE.

Real files: pydicom's bundled test files and the pydicom-data package (NEMA WG04
CR ``RG1_UNCI.dcm`` with a DAP of 1.200 dGy·cm², the anonymised Siemens CT
``bad_sequence.dcm`` with CTDIvol 29.77 mGy; values as DICOM-NOTES section 4
lists them). The C-STORE sender is dcmtk's ``storescu`` (Debian package dcmtk).
"""

from __future__ import annotations

import json
import subprocess
from pathlib import Path

import pytest
from peers import free_port, require_peer, which_or_none
from pydicom.data import get_testdata_file
from rdsr_builders import fluoroscopy_report
from sqlalchemy import func, select

from beamaudit.api.cli import main
from beamaudit.api.intake.pipeline import Pipeline
from beamaudit.api.intake.postprocess import process_new_events
from beamaudit.api.intake.receiving import make_store_handler
from beamaudit.api.store import make_engine, make_session_factory, upgrade
from beamaudit.api.store import models as m
from beamaudit.ingest.listener import ListenerConfig, start_listener
from beamaudit.ingest.pseudonym import Pseudonymiser


def _sample_folder(tmp_path: Path) -> Path:
    folder = tmp_path / "export"
    folder.mkdir()
    for name in ("RG1_UNCI.dcm", "bad_sequence.dcm", "CT_small.dcm"):
        src = Path(get_testdata_file(name))
        (folder / name.replace(".dcm", "")).write_bytes(
            src.read_bytes()
        )  # no extension, as PACS exports
    (folder / "notes.txt").write_text("not a DICOM file", encoding="utf-8")
    report = fluoroscopy_report()
    report.save_as(folder / "dose-report.dcm", enforce_file_format=True)
    return folder


def _rows(db: Path, stmt):
    engine = make_engine(f"sqlite:///{db}")
    try:
        with make_session_factory(engine)() as s:
            return s.execute(stmt).all()
    finally:
        engine.dispose()


def test_scan_stores_events_records_errors_and_exits_1(settings_env, tmp_path, capsys) -> None:
    folder = _sample_folder(tmp_path)
    assert main(["scan", str(folder), "--json"]) == 1  # one file rejected, all others stored
    out = json.loads(capsys.readouterr().out)
    assert out["files"] == 5
    assert out["events"] == 3 + 3  # two CT images, one CR, three dose-report events
    assert [e["source"].endswith("notes.txt") for e in out["errors"]] == [True]
    assert out["errors"][0]["reason"]
    # pydicom-data RG1_UNCI: ImageAndFluoroscopyAreaDoseProduct 1.200 dGy cm2 = 0.12 Gy cm2 (PS3.3)
    ((dap, kvp, status),) = _rows(
        settings_env,
        select(
            m.ExposureEventRow.dap_gy_cm2,
            m.ExposureEventRow.kvp_kv,
            m.ExposureEventRow.recon_status,
        ).where(m.ExposureEventRow.station_name == "THORAVISION"),
    )
    assert dap == pytest.approx(0.12)
    assert kvp == 150.0
    assert status == "ok"
    ((ctdi,),) = _rows(
        settings_env,
        select(m.ExposureEventRow.ctdivol_mgy).where(m.ExposureEventRow.ctdivol_mgy.is_not(None)),
    )
    assert ctdi == pytest.approx(29.7696282)  # pydicom-data bad_sequence.dcm, CTDIvol (0018,9345)
    ((n_errors,),) = _rows(settings_env, select(func.count()).select_from(m.IngestError))
    assert n_errors == 1


def test_second_scan_stores_nothing_new(settings_env, tmp_path, capsys) -> None:
    folder = _sample_folder(tmp_path)
    main(["scan", str(folder), "--json"])
    capsys.readouterr()
    main(["scan", str(folder), "--json"])
    out = json.loads(capsys.readouterr().out)
    assert out["events"] == 0
    assert out["duplicates"] == 4
    ((n,),) = _rows(settings_env, select(func.count()).select_from(m.ExposureEventRow))
    assert n == 6


def test_scan_with_workers_gives_the_same_result(settings_env, tmp_path, capsys) -> None:
    folder = _sample_folder(tmp_path)
    assert main(["scan", str(folder), "--workers", "2", "--json"]) == 1
    out = json.loads(capsys.readouterr().out)
    assert out["events"] == 6


def test_scan_of_a_missing_path_is_a_usage_error(settings_env, tmp_path, capsys) -> None:
    assert main(["scan", str(tmp_path / "nowhere")]) == 2
    assert "no such file or folder" in capsys.readouterr().err


def test_patient_names_never_reach_the_store(settings_env, tmp_path, capsys) -> None:
    folder = _sample_folder(tmp_path)
    main(["scan", str(folder)])
    raw = settings_env.read_bytes() + b"".join(
        p.read_bytes() for p in settings_env.parent.glob("beamaudit.db-*")
    )
    # RG1_UNCI carries PatientName/PatientID; CT_small PatientName "CompressedSamples^CT1"
    assert b"CompressedSamples" not in raw


@pytest.mark.peer
def test_storescu_to_the_listener_stores_each_instance_once(tmp_path) -> None:
    storescu = which_or_none("storescu")
    require_peer("dcmtk storescu", storescu is not None, "apt-get install -y dcmtk")
    db = tmp_path / "l.db"
    engine = make_engine(f"sqlite:///{db}")
    upgrade(engine)
    sessions = make_session_factory(engine)
    handler = make_store_handler(
        Pipeline(sessions),
        Pseudonymiser(b"k" * 32),
        after_store=lambda ids: process_new_events(sessions, ids),
    )
    dcmsend = which_or_none("dcmsend")
    folder = _sample_folder(tmp_path)
    (folder / "notes.txt").unlink()
    compressed = tmp_path / "compressed"
    compressed.mkdir()
    # JPEG Lossless: storescu proposes uncompressed syntaxes only; dcmsend negotiates from the file
    (folder / "bad_sequence").rename(compressed / "bad_sequence")
    port = free_port()
    with start_listener(ListenerConfig(port=port), handler):
        for _ in range(2):  # the second send is all duplicates, still answered success
            proc = subprocess.run(
                [storescu, "-aec", "BEAMAUDIT", "+sd", "127.0.0.1", str(port), str(folder)],
                capture_output=True, text=True, timeout=60,
            )  # fmt: skip
            assert proc.returncode == 0, proc.stderr
            assert "Store Failed" not in proc.stderr
            proc = subprocess.run(
                [dcmsend, "-aec", "BEAMAUDIT", "+sd", "127.0.0.1", str(port), str(compressed)],
                capture_output=True, text=True, timeout=60,
            )  # fmt: skip
            assert proc.returncode == 0, proc.stderr
    with sessions() as s:
        assert s.scalar(select(func.count()).select_from(m.SourceObjectRow)) == 4
        assert s.scalar(select(func.count()).select_from(m.ExposureEventRow)) == 6
        ok = s.scalar(select(func.count()).where(m.ExposureEventRow.recon_status == "ok"))
        assert ok >= 1
    engine.dispose()
