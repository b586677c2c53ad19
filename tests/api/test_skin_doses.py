"""Peak skin dose on the store: computed after ingest from a dose report with geometry.

The dose reports are built to DICOM PS3.16 TID 10001/10003 by tests/ingest/rdsr_builders.py
(invented data; no Radiation Dose SR ships in any installed package). Both backends.
"""

from __future__ import annotations

from datetime import datetime
from pathlib import Path

import pytest
from ingest_samples import to_bytes
from rdsr_builders import EventGeometry, FluoroEvent, fluoroscopy_report
from sqlalchemy import select

from beamaudit.api.intake.pipeline import Pipeline
from beamaudit.api.intake.postprocess import Completion
from beamaudit.api.intake.scanning import scan_paths
from beamaudit.api.store import models as m
from beamaudit.api.store.skin_doses import cumulative_skin_doses, followup_rows, set_followup
from beamaudit.ingest.pseudonym import load_or_create_key


def run(kar_gy: float, primary_deg: float) -> FluoroEvent:
    return FluoroEvent(
        dose_rp_gy=kar_gy,
        # DAP = K_a,r x the field at the reference point (160 mm at 1150 mm is 91.8 mm at 660 mm)
        dap_gy_m2=kar_gy * (0.16 * 660.0 / 1150.0) ** 2,
        field_area_m2=0.04,
        pulses=900,
        geometry=EventGeometry(primary_angle_deg=primary_deg, secondary_angle_deg=0.0),
    )


def write_reports(folder: Path) -> None:
    folder.mkdir(parents=True, exist_ok=True)
    # the same 6 Gy of K_a,r in each: two overlapping projections, six spread around
    hot = fluoroscopy_report(
        [run(3.0, -4.0), run(3.0, 4.0)], study_uid="1.2.826.0.1.3680043.10.1.991"
    )
    cool = fluoroscopy_report(
        [run(1.0, a) for a in (-120, -60, 0, 60, 120, 180)],
        study_uid="1.2.826.0.1.3680043.10.1.992",
    )
    light = fluoroscopy_report([run(0.2, 0.0)], study_uid="1.2.826.0.1.3680043.10.1.993")
    for name, report in (("hot", hot), ("cool", cool), ("light", light)):
        (folder / f"{name}.dcm").write_bytes(to_bytes(report))


def scan(store, folder: Path, tmp_path: Path) -> None:
    scan_paths(
        [folder],
        pipeline=Pipeline(store.session_factory, completion=Completion()),
        key=load_or_create_key(tmp_path / "k.key"),
    )


def rows(store) -> dict[str, m.SkinDoseRow]:
    with store.session_factory() as s:
        pairs = s.execute(
            select(m.Study.study_instance_uid, m.SkinDoseRow).join(
                m.SkinDoseRow, m.SkinDoseRow.study_id == m.Study.id
            )
        ).all()
        for _, row in pairs:
            s.expunge(row)
    return {uid[-3:]: row for uid, row in pairs}


def test_a_scanned_dose_report_gets_its_skin_dose_and_ncrp_168_levels(store, tmp_path) -> None:
    write_reports(tmp_path / "in")
    scan(store, tmp_path / "in", tmp_path)
    found = rows(store)
    assert set(found) == {"991", "992", "993"}
    hot, cool, light = found["991"], found["992"], found["993"]
    assert all(r.status == "ok" for r in (hot, cool, light))
    # NCRP 168: PSD 3 Gy, K_a,r 5 Gy (from memory, medium-high; model/data)
    assert hot.peak_skin_dose_mgy > 3000.0 > cool.peak_skin_dose_mgy
    assert (
        "peak_skin_dose" in hot.levels_crossed and "reference_point_air_kerma" in hot.levels_crossed
    )
    assert "peak_skin_dose" not in cool.levels_crossed
    assert "reference_point_air_kerma" in cool.levels_crossed
    assert light.levels_crossed == []
    assert hot.area_above_3gy_cm2 > 0 and cool.area_above_3gy_cm2 == 0
    assert sorted(c["event_index"] for c in hot.events_at_peak) == [0, 1]
    assert 15.0 <= hot.uncertainty_pct <= 60.0
    assert hot.record is not None and hot.record["map"]["dose_mgy"]
    # the room's table transmission and the Monte Carlo backscatter were used
    assert any("Monte Carlo" in s for s in hot.record["factor_sources"])


def test_scanning_again_keeps_the_follow_up_and_the_list_shows_it(store, tmp_path) -> None:
    write_reports(tmp_path / "in")
    scan(store, tmp_path / "in", tmp_path)
    with store.session_factory.begin() as s:
        study_id = s.scalar(select(m.Study.id).where(m.Study.study_instance_uid.endswith("991")))
        set_followup(s, study_id, status="patient_informed", note="told at discharge", by="phys")
    with store.session_factory() as s:
        listed = followup_rows(s)
    assert [r["study_instance_uid"][-3:] for r in listed] == ["991", "992"] or [
        r["study_instance_uid"][-3:] for r in listed
    ] == ["992", "991"]
    hot = next(r for r in listed if r["study_instance_uid"].endswith("991"))
    assert hot["followup_status"] == "patient_informed"
    with store.session_factory.begin() as s, pytest.raises(ValueError, match="one of"):
        set_followup(s, study_id, status="done", note=None, by=None)


def test_cumulative_skin_dose_adds_one_patients_procedures_in_the_window(store, tmp_path) -> None:
    write_reports(tmp_path / "in")
    scan(store, tmp_path / "in", tmp_path)
    with store.session_factory.begin() as s:
        studies = s.scalars(select(m.Study)).all()
        for study in studies:  # one patient, three procedures a week apart
            study.patient_pseudo_id = "P-ONE"
        for k, study in enumerate(sorted(studies, key=lambda x: x.study_instance_uid)):
            study.study_datetime = datetime(2026, 11, 1 + 7 * k, 10, 0)
    with store.session_factory() as s:
        (entry,) = cumulative_skin_doses(s, window_days=60.0, as_of=datetime(2026, 11, 30))
        single = max(r.peak_skin_dose_mgy for r in rows(store).values())
    assert entry.patient_pseudo_id == "P-ONE" and len(entry.study_uids) == 3
    # the cumulative peak lies between the highest single PSD and the sum of the PSDs
    assert single <= entry.peak_skin_dose_mgy + 1e-6 <= entry.upper_bound_mgy + 1e-6
    with store.session_factory() as s:
        assert cumulative_skin_doses(s, window_days=5.0, as_of=datetime(2026, 11, 30)) == []


def test_the_skin_command_prints_psd_areas_levels_and_the_caution(
    settings_env, tmp_path, capsys
) -> None:
    # the command line end to end on SQLite (the store functions run on both backends above)
    import json

    from beamaudit.api.cli import main

    write_reports(tmp_path / "in")
    assert main(["scan", str(tmp_path / "in")]) == 0
    capsys.readouterr()
    from sqlalchemy import create_engine

    engine = create_engine(f"sqlite:///{settings_env}")
    with engine.connect() as conn:
        uids = [r[0] for r in conn.execute(select(m.Study.study_instance_uid))]
    engine.dispose()
    outputs = {}
    for uid in uids:
        assert main(["skin", uid, "--json"]) == 0
        data = json.loads(capsys.readouterr().out)
        for key in ("peak_skin_dose_mgy", "area_above_3gy_cm2", "events_used", "assumptions"):
            assert key in data
        outputs[uid] = data
    hot_uid = max(outputs, key=lambda u: outputs[u]["peak_skin_dose_mgy"])
    hot = outputs[hot_uid]
    assert hot["peak_skin_dose_mgy"] > 3000.0 and "peak_skin_dose" in hot["levels_crossed"]
    assert hot["uncertainty_pct"] > 0
    assert main(["skin", hot_uid]) == 0
    out = capsys.readouterr().out
    assert "peak skin dose" in out and "NCRP 168" in out
    assert "qualified medical physicist" in out
    assert main(["skin", "1.2.3.nothing"]) == 2
    err = capsys.readouterr().err
    assert "no study" in err and "Traceback" not in err


def test_a_review_flags_the_procedure_whose_psd_reached_3_gy(store, tmp_path) -> None:
    from beamaudit.api.review import Period, ReviewParameters
    from beamaudit.api.runs.reviews import run_review

    folder = tmp_path / "in"
    folder.mkdir()
    # PSD above 3 Gy while K_a,r (4.4 Gy), DAP and time stay below their NCRP 168 levels:
    # only the skin dose can flag it
    hot = fluoroscopy_report(
        [run(2.2, -2.0), run(2.2, 2.0)], study_uid="1.2.826.0.1.3680043.10.1.994"
    )
    (folder / "hot.dcm").write_bytes(to_bytes(hot))
    scan(store, folder, tmp_path)
    found = rows(store)["994"]
    with store.session_factory.begin() as s:
        when = s.scalar(select(m.ExposureEventRow.event_datetime))
    assert found.peak_skin_dose_mgy > 3000.0, found.peak_skin_dose_mgy
    assert found.levels_crossed == ["peak_skin_dose"]
    run_id = run_review(
        store.session_factory, ReviewParameters(period=Period.month(when.year, when.month))
    )
    with store.session_factory() as s:
        run_row = s.get(m.ReviewRun, run_id)
        flags = [f for f in run_row.result["flags"] if f["kind"] == "srdl_exceeded"]
    (flag,) = flags
    assert flag["concerns"]["study_uid"].endswith("994")
    assert flag["numbers"]["peak_skin_dose_mgy"] == pytest.approx(found.peak_skin_dose_mgy)
    assert "peak skin dose" in flag["reason"] and "Follow the patient up" in flag["reason"]
    assert "(exam type not mapped in room ROOM1)" in flag["reason"]  # words, not a code


def test_events_stored_without_completion_get_their_map_when_completed(store, tmp_path) -> None:
    # a listener node storing as read (the demo's): the maps come with process_new_events
    from beamaudit.api.intake.postprocess import process_new_events

    write_reports(tmp_path / "in")
    summary = scan_paths(
        [tmp_path / "in"],
        pipeline=Pipeline(store.session_factory),
        key=load_or_create_key(tmp_path / "k.key"),
    )
    assert summary.objects == 3 and rows(store) == {}
    with store.session_factory() as s:
        ids = list(s.scalars(select(m.ExposureEventRow.id)))
    process_new_events(store.session_factory, ids)
    found = rows(store)
    assert set(found) == {"991", "992", "993"}
    assert found["991"].peak_skin_dose_mgy > 3000.0


def test_a_pulled_dose_report_gets_its_skin_dose(store) -> None:
    # DICOMweb pull from a scripted loopback server (tests/ingest/fake_pacs.py): the report's
    # metadata as DICOM JSON (PS3.18 F.2), read and stored through the pull path
    from fake_pacs import Study, fake_pacs

    from beamaudit.api.intake.pulling import pull_source
    from beamaudit.ingest.pseudonym import Pseudonymiser

    report = fluoroscopy_report(
        [run(3.0, -4.0), run(3.0, 4.0)], study_uid="1.2.826.0.1.3680043.10.1.996"
    )
    meta = report.to_json_dict()
    meta["00080016"] = {"vr": "UI", "Value": [str(report.SOPClassUID)]}
    meta["00080018"] = {"vr": "UI", "Value": [str(report.SOPInstanceUID)]}
    day = str(report.get("StudyDate") or "20261103")
    with fake_pacs(studies=[Study(str(report.StudyInstanceUID), day, [meta])]) as pacs:
        outcome = pull_source(
            store.session_factory,
            url=pacs.url,
            since="2000-01-01",
            modalities=None,
            pseudonymiser=Pseudonymiser(b"k" * 32),
        )
    assert outcome is not None
    found = rows(store)
    assert set(found) == {"996"}, outcome
    assert found["996"].peak_skin_dose_mgy > 3000.0
    assert "peak_skin_dose" in found["996"].levels_crossed


@pytest.mark.peer
@pytest.mark.slow
@pytest.mark.parametrize(
    "backend", ["sqlite", pytest.param("postgresql", marks=pytest.mark.postgres)]
)
def test_storescu_to_beamaudit_listen_stores_the_skin_dose(backend: str, tmp_path: Path) -> None:
    # the command path end to end: dcmtk's storescu (Debian package dcmtk) sends a dose report
    # with TID 10003 geometry to `beamaudit listen` running as its own process; the listener's
    # completion in the storing transaction writes the skin_doses row
    import os
    import subprocess

    from peers import free_port, require_peer, wait_for_tcp, which_or_none
    from procs import beamaudit_process, shared_store, wait_spool_drained

    storescu = which_or_none("storescu")
    require_peer("dcmtk storescu", storescu is not None, "apt-get install -y dcmtk")
    folder = tmp_path / "in"
    folder.mkdir()
    # PSD above 3 Gy from two overlapping projections while K_a,r (4.4 Gy) stays below 5 Gy
    hot = fluoroscopy_report(
        [run(2.2, -2.0), run(2.2, 2.0)], study_uid="1.2.826.0.1.3680043.10.1.997"
    )
    (folder / "hot.dcm").write_bytes(to_bytes(hot))
    port = free_port()
    log = tmp_path / "listen.log"
    with shared_store(backend, tmp_path) as shared:
        args = ["listen", "--host", "127.0.0.1", "--port", str(port)]
        with beamaudit_process(args, shared, log):
            assert wait_for_tcp(port, timeout_s=60), log.read_text()[-3000:]
            sent = subprocess.run(
                [storescu, "-aec", "BEAMAUDIT", "+sd", "127.0.0.1", str(port), str(folder)],
                capture_output=True, text=True, timeout=120,
                env={"TCP_NODELAY": "1", "PATH": os.environ.get("PATH", "/usr/bin:/bin")},
            )  # fmt: skip
            if sent.returncode == 0:
                wait_spool_drained(shared, port)  # stored after its answer, from the spool
        assert sent.returncode == 0, sent.stderr
        assert "Store Failed" not in sent.stderr
        with shared.sessions() as s:
            received = s.scalars(select(m.SourceObjectRow.received_via)).all()
            found = s.execute(
                select(m.Study.study_instance_uid, m.SkinDoseRow).join(
                    m.SkinDoseRow, m.SkinDoseRow.study_id == m.Study.id
                )
            ).all()
    assert received == ["listen"]
    ((uid, skin),) = found
    assert uid.endswith("997")
    assert skin.status == "ok", skin.reason
    # NCRP 168: PSD 3 Gy, K_a,r 5 Gy (from memory, medium-high; model/data)
    assert skin.peak_skin_dose_mgy > 3000.0
    assert skin.levels_crossed == ["peak_skin_dose"]
    assert sorted(c["event_index"] for c in skin.events_at_peak) == [0, 1]
    assert skin.followup_status == "open"
    assert skin.record is not None and skin.record["map"]["dose_mgy"]


def test_the_skin_command_writes_the_map_as_a_png(settings_env, tmp_path, capsys) -> None:
    # the command line on SQLite; PNG signature ISO/IEC 15948 section 5.2
    import io
    import json
    from datetime import timedelta

    from PIL import Image
    from sqlalchemy import create_engine

    from beamaudit.api.cli import main
    from beamaudit.api.store.base import utcnow
    from beamaudit.dashboards.skin_image import SKIN_DOSE_PNG_SIZE_PX

    write_reports(tmp_path / "in")
    assert main(["scan", str(tmp_path / "in")]) == 0
    engine = create_engine(f"sqlite:///{settings_env}")
    with engine.begin() as conn:
        uids = sorted(r[0] for r in conn.execute(select(m.Study.study_instance_uid)))
        for k, uid in enumerate(uids):  # one patient's three procedures, this month
            conn.execute(
                m.Study.__table__.update()
                .where(m.Study.study_instance_uid == uid)
                .values(patient_pseudo_id="P-CLI", study_datetime=utcnow() - timedelta(days=k))
            )
    engine.dispose()
    capsys.readouterr()
    target = tmp_path / "map.png"
    assert main(["skin", uids[0], "--png", str(target), "--json"]) == 0
    data = json.loads(capsys.readouterr().out)
    assert data["png"] == str(target)
    assert target.read_bytes().startswith(b"\x89PNG\r\n\x1a\n")
    with Image.open(target) as image:
        assert image.size == SKIN_DOSE_PNG_SIZE_PX
    both = tmp_path / "patient.png"
    assert main(["skin", "--patient", "P-CLI", "--png", str(both)]) == 0
    out = capsys.readouterr().out
    assert "cumulative peak skin dose" in out and "maps added" in out
    assert "qualified medical physicist" in out
    with Image.open(io.BytesIO(both.read_bytes())) as image:
        assert image.format == "PNG"
    # bad arguments: one line each, exit 2, nothing written
    for argv, words in (
        (["skin", uids[0], "--png", str(tmp_path / "map.jpg")], "must end in .png"),
        (["skin", uids[0], "--png", str(tmp_path / "no" / "map.png")], "no folder"),
        (["skin"], "either STUDY or --patient"),
        (["skin", uids[0], "--patient", "P-CLI"], "either STUDY or --patient"),
        (["skin", "--patient", "P-NOBODY"], "no procedure"),
        (["skin", "--patient", "P-CLI", "--window-days", "0"], "more than 0"),
    ):
        assert main(argv) == 2, argv
        err = capsys.readouterr().err
        assert words in err and "Traceback" not in err, (argv, err)
        assert len(err.strip().splitlines()) == 1, err
    assert not (tmp_path / "map.jpg").exists()
