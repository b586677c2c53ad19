"""Mammography through every ingest path into the store: the MG fields, our mean glandular dose
per view beside the device's AGD, and the accumulated AGD per breast, on both backends.

No real MG object ships in pydicom, pydicom-data or highdicom, and the shared reference has no
samples (DICOM-NOTES section 4), so the objects are the synthetic ones of the ingest tests (to
PS3.3 and PS3.16): a Digital Mammography X-Ray header (W/Rh, 28 kV, 81 mAs, 49 mm, Organ Dose
0.0131 dGy) and a TID 10001 mammography report (a left CC, a left tomosynthesis sweep, a right
MLO; TID 10005 per breast).
"""

from __future__ import annotations

import subprocess
from collections.abc import Iterator
from datetime import datetime
from pathlib import Path
from types import SimpleNamespace
from typing import Any

import pytest
from peers import free_port, require_peer, which_or_none
from rdsr_builders import mammography_report
from sqlalchemy import select
from test_mammography_paths import _mg_header

from beamaudit.api.intake.mammography import official_coefficients, use_official_coefficients
from beamaudit.api.intake.pipeline import Pipeline
from beamaudit.api.intake.postprocess import Completion
from beamaudit.api.intake.reconstruct import RoomBeams, figures, trail_for_event
from beamaudit.api.intake.scanning import scan_paths
from beamaudit.api.settings import SettingsError, load
from beamaudit.api.store import models as m
from beamaudit.ingest.pseudonym import Pseudonymiser, load_or_create_key
from beamaudit.model import FilterSpec
from beamaudit.model.glandular_dose import TomosynthesisAcquisition, mean_glandular_dose
from beamaudit.model.mammography import MammographyTechnique

#: the columns every path must fill alike, per event
COLUMNS = (
    "source_kind", "view_position", "image_laterality", "mammography_acquisition",
    "body_part_thickness_mm", "compression_force_n", "breast_implant_present",
    "organ_dose_mgy", "exam_type", "recon_status", "recon_mgd_mgy", "recon_target_filter",
    "recon_hvl1_mm_al", "recon_glandularity_percent", "recon_glandularity_assumed",
    "recon_mgd_g", "recon_mgd_c", "recon_mgd_s", "recon_mgd_t", "recon_mgd_coefficients",
    "recon_mgd_method", "agd_ratio_reported_to_recon",
)  # fmt: skip


def _objects(tmp_path: Path) -> tuple[Path, Any, Any]:
    header, report = _mg_header(), mammography_report()
    folder = tmp_path / "in"
    folder.mkdir()
    header.save_as(folder / "header.dcm", enforce_file_format=True)
    report.save_as(folder / "report.dcm", enforce_file_format=True)
    return folder, header, report


def _stored(sessions) -> dict[tuple[Any, ...], dict[str, Any]]:
    with sessions() as s:
        rows = s.scalars(select(m.ExposureEventRow)).all()
        events = {
            (r.source_kind, r.view_position, r.mammography_acquisition): {
                c: getattr(r, c) for c in COLUMNS
            }
            for r in rows
        }
        (acc,) = s.scalars(select(m.AccumulatedDoseRow)).all()
        events[("accumulated",)] = {
            "agd_left_mgy": acc.agd_left_mgy, "agd_right_mgy": acc.agd_right_mgy,
            "in_details": sorted(k for k in acc.details if k.startswith("agd")),
        }  # fmt: skip
    return events


def _scan(sessions, folder: Path, tmp_path: Path) -> None:
    summary = scan_paths(
        [folder],
        pipeline=Pipeline(sessions, completion=Completion()),
        key=load_or_create_key(tmp_path / "k.key"),
    )
    assert summary.errors == [] and summary.events == 4


def test_scan_stores_the_mammography_columns_and_our_dose_per_view(store, tmp_path) -> None:
    folder, _, _ = _objects(tmp_path)
    _scan(store.session_factory, folder, tmp_path)
    stored = _stored(store.session_factory)
    header = stored[("image_header", "CC", "2d")]
    # Organ Dose (0040,0316) is in dGy (DICOM PS3.3, X-Ray Acquisition Dose module)
    assert header["organ_dose_mgy"] == pytest.approx(1.31)
    assert header["image_laterality"] == "L" and header["breast_implant_present"] is False
    assert header["compression_force_n"] == 104.0 and header["body_part_thickness_mm"] == 49.0
    assert header["exam_type"] == "mammo_cc" and header["recon_status"] == "ok"
    assert header["recon_target_filter"] == "W/Rh"
    # EUREF typical clinical HVL with the paddle, W/Rh at 28 kV: 0.54 +- 0.03 mm Al (European
    # guidelines for breast screening, 4th ed. 2006; PUBLISHED-VALUES m, high)
    assert 0.51 <= header["recon_hvl1_mm_al"] <= 0.57
    # the same figure as the model gives for the header's technique (beamaudit mgd)
    direct = mean_glandular_dose(
        MammographyTechnique(kv=28, anode="W", filters=(FilterSpec("Rh", 0.05),),
                             thickness_mm=49),
        exposure_mas=81, age_years=61,
    )  # fmt: skip
    assert header["recon_mgd_mgy"] == pytest.approx(direct.mgd_mgy, rel=1e-9)
    assert header["recon_glandularity_percent"] == pytest.approx(100 * direct.glandularity)
    assert header["recon_glandularity_assumed"] is True
    assert (header["recon_mgd_g"], header["recon_mgd_c"], header["recon_mgd_s"]) == (
        pytest.approx(direct.g),
        pytest.approx(direct.c),
        pytest.approx(direct.s),
    )
    assert header["recon_mgd_t"] is None
    assert header["recon_mgd_coefficients"] == "beamaudit Monte Carlo"
    assert header["recon_mgd_method"].startswith("Dance method")
    assert header["agd_ratio_reported_to_recon"] == pytest.approx(1.31 / direct.mgd_mgy)
    mlo = stored[("rdsr", "MLO", "2d")]
    assert mlo["image_laterality"] == "R" and mlo["exam_type"] == "mammo_mlo"
    assert mlo["agd_ratio_reported_to_recon"] == pytest.approx(1.30 / mlo["recon_mgd_mgy"])
    assert stored[("accumulated",)] == {
        "agd_left_mgy": pytest.approx(3.13),
        "agd_right_mgy": pytest.approx(1.30),
        "in_details": [],
    }


def test_a_sweep_without_its_arc_fails_with_the_reason(store, tmp_path) -> None:
    folder, _, _ = _objects(tmp_path)
    _scan(store.session_factory, folder, tmp_path)
    with store.session_factory() as s:
        (tomo,) = s.scalars(
            select(m.ExposureEventRow).where(
                m.ExposureEventRow.mammography_acquisition == "tomosynthesis"
            )
        ).all()
        assert tomo.recon_status == "failed" and tomo.recon_mgd_mgy is None
        assert "arc and number of projections" in tomo.notes[-1]


def _event(**values: Any) -> SimpleNamespace:
    base = {c.name: None for c in m.ExposureEventRow.__table__.columns}
    base.update(room_id=None, modality="MG", modality_family="projection", kvp_kv=30.0,
                exposure_mas=100.0, filters=[{"material": "rhodium", "thickness_mm": 0.05}],
                anode_material="tungsten", body_part_thickness_mm=55.0, patient_age_years=55.0,
                provenance={}, notes=[])  # fmt: skip
    base.update(values)
    return SimpleNamespace(**base)


def test_tomosynthesis_takes_t_for_its_sweep() -> None:
    event = _event(mammography_acquisition="tomosynthesis", tomo_scan_arc_deg=50.0,
                   tomo_projections=25)  # fmt: skip
    (values,) = figures([event], RoomBeams())
    direct = mean_glandular_dose(
        MammographyTechnique(kv=30, anode="W", filters=(FilterSpec("Rh", 0.05),),
                             thickness_mm=55),
        exposure_mas=100, age_years=55,
        tomosynthesis=TomosynthesisAcquisition.uniform(50.0, 25),
    )  # fmt: skip
    assert values["recon_mgd_t"] == pytest.approx(direct.tomo_factor)
    assert values["recon_mgd_mgy"] == pytest.approx(direct.mgd_mgy, rel=1e-9)
    assert values["recon_mgd_method"].endswith("K g c s T")


def test_an_event_without_a_filter_takes_the_room_s_and_says_so() -> None:
    rooms = RoomBeams()
    rooms.rooms[1] = m.Room(id=1, name="x", anode_material="tungsten",
                            filtration=[{"material": "silver", "thickness_mm": 0.05}])  # fmt: skip
    rooms.recipes[1] = {"kind": "recipe"}
    (values,) = figures([_event(room_id=1, filters=None, anode_material=None)], rooms)
    assert values["recon_target_filter"] == "W/Ag"
    assert any("room's filtration" in n for n in values["recon_trail"]["mammography"])


def test_no_thickness_is_a_failure_with_its_reason() -> None:
    (values,) = figures([_event(body_part_thickness_mm=None)], RoomBeams())
    assert values["recon_status"] == "failed"
    assert "compressed breast thickness" in values["notes"][-1]


def test_the_trail_is_made_again_with_the_stored_figure(store, tmp_path) -> None:
    folder, _, _ = _objects(tmp_path)
    _scan(store.session_factory, folder, tmp_path)
    with store.session_factory() as s:
        row = s.scalars(
            select(m.ExposureEventRow).where(m.ExposureEventRow.source_kind == "image_header")
        ).one()
        trail = trail_for_event(s, row)
    assert trail is not None
    assert trail["mgd_mgy"] == pytest.approx(row.recon_mgd_mgy, rel=1e-9)
    assert trail["reported_mgd_mgy"] == pytest.approx(1.31)
    assert "notes" not in trail  # made by this version: nothing to say


@pytest.mark.peer
def test_c_store_gives_the_columns_of_the_scan(store, tmp_path) -> None:
    folder, _, _ = _objects(tmp_path)
    _send_with_storescu(store, folder)
    received = _stored(store.session_factory)
    scanned_store = tmp_path / "scanned"
    scanned_store.mkdir()
    assert received == _scan_elsewhere(folder, scanned_store)


def _send_with_storescu(store, folder: Path) -> None:
    """Every file of ``folder`` from dcmtk's storescu to the listener, stored in ``store``."""
    from beamaudit.api.intake.receiving import make_store_handler
    from beamaudit.ingest.listener import ListenerConfig, start_listener

    storescu = which_or_none("storescu")
    require_peer("dcmtk storescu", storescu is not None, "apt-get install -y dcmtk")
    handler = make_store_handler(
        Pipeline(store.session_factory, completion=Completion()), Pseudonymiser(b"k" * 32)
    )
    port = free_port()
    with start_listener(ListenerConfig(port=port), handler):
        proc = subprocess.run(
            [storescu, "-aec", "BEAMAUDIT", "+sd", "127.0.0.1", str(port), str(folder)],
            capture_output=True, text=True, timeout=60, env={"TCP_NODELAY": "1"},
        )  # fmt: skip
    assert proc.returncode == 0, proc.stderr


def _scan_elsewhere(folder: Path, tmp_path: Path) -> dict[tuple[Any, ...], dict[str, Any]]:
    from beamaudit.api.store import make_engine, make_session_factory, upgrade

    engine = make_engine(f"sqlite:///{tmp_path / 'scan.db'}")
    upgrade(engine)
    try:
        sessions = make_session_factory(engine)
        _scan(sessions, folder, tmp_path)
        return _stored(sessions)
    finally:
        engine.dispose()


BACKENDS = ["sqlite", pytest.param("postgresql", marks=pytest.mark.postgres)]


@pytest.mark.parametrize("backend", BACKENDS)
def test_a_dicomweb_pull_gives_the_columns_of_the_scan(backend: str, tmp_path: Path) -> None:
    from fake_pacs import Study, fake_pacs
    from procs import shared_store

    from beamaudit.api.intake.pulling import pull_source

    folder, header, report = _objects(tmp_path)
    studies = [
        Study(ds.StudyInstanceUID, "20261103", [ds.to_json_dict()], ds.SeriesInstanceUID)
        for ds in (header, report)
    ]
    with fake_pacs(studies=studies) as pacs, shared_store(backend, tmp_path) as shared:
        pull_source(
            shared.sessions, url=pacs.url, since="2026-11-01", modalities=None,
            pseudonymiser=Pseudonymiser(b"k" * 32),
        )  # fmt: skip
        pulled = _stored(shared.sessions)
    scanned_store = tmp_path / "scanned"
    scanned_store.mkdir()
    assert pulled == _scan_elsewhere(folder, scanned_store)


def _standard_objects(tmp_path: Path) -> Path:
    """The standard-built Digital Mammography image (``tests/ingest/mg_standard.py``: PS3.3 A.27,
    checked by dciodvfy) and a mammography dose report (TID 10001 with TID 10003 events and
    TID 10005 per breast) of the same study, patient and device, as a site sends them."""
    from mg_standard import standard_mammogram

    image = standard_mammogram()
    report = mammography_report(
        study_uid=image.StudyInstanceUID, study_datetime=datetime(2024, 3, 12, 10, 20),
        patient_id=image.PatientID, patient_age="057Y", manufacturer=image.Manufacturer,
        model_name=image.ManufacturerModelName, device_serial_number=image.DeviceSerialNumber,
        station_name=image.StationName, institution_name=image.InstitutionName,
    )  # fmt: skip
    folder = tmp_path / "standard"
    folder.mkdir()
    image.save_as(folder / "image.dcm", enforce_file_format=True)
    report.save_as(folder / "report.dcm", enforce_file_format=True)
    return folder


@pytest.mark.peer
def test_the_standard_built_image_and_a_report_by_c_store_as_scanned(store, tmp_path) -> None:
    folder = _standard_objects(tmp_path)
    _send_with_storescu(store, folder)
    received = _stored(store.session_factory)
    assert received[("image_header", "CC", "2d")]["organ_dose_mgy"] == pytest.approx(1.48)
    assert received[("rdsr", "MLO", "2d")]["recon_status"] == "ok"
    (tmp_path / "scanned").mkdir()
    assert received == _scan_elsewhere(folder, tmp_path / "scanned")


@pytest.mark.peer
def test_the_standard_built_image_and_a_report_pulled_from_orthanc_as_scanned(
    store, tmp_path
) -> None:
    # Orthanc with its DICOMweb plugin (Debian orthanc, orthanc-dicomweb) as the PACS: QIDO-RS
    # and WADO-RS metadata, as a site's archive answers them
    from peers import orthanc_missing, start_orthanc

    from beamaudit.api.intake.pulling import pull_source

    reason = orthanc_missing()
    require_peer("Orthanc with DICOMweb", reason is None, reason or "")
    folder = _standard_objects(tmp_path)
    peer = start_orthanc(tmp_path / "orthanc")
    try:
        for path in sorted(folder.iterdir()):
            peer.upload(path.read_bytes())
        outcome = pull_source(
            store.session_factory, url=peer.dicomweb_url, since="2024-03-01", modalities=None,
            pseudonymiser=Pseudonymiser(b"k" * 32),
        )  # fmt: skip
    finally:
        peer.stop()
    assert not outcome.errors
    pulled = _stored(store.session_factory)
    assert pulled[("image_header", "CC", "2d")]["organ_dose_mgy"] == pytest.approx(1.48)
    (tmp_path / "scanned").mkdir()
    assert pulled == _scan_elsewhere(folder, tmp_path / "scanned")


def test_a_stored_review_groups_the_views_by_thickness_band(store, tmp_path) -> None:
    from beamaudit.api.review import Period, ReviewParameters
    from beamaudit.api.runs.reviews import run_review

    folder, _, _ = _objects(tmp_path)
    _scan(store.session_factory, folder, tmp_path)
    run_id = run_review(store.session_factory, ReviewParameters(period=Period.month(2024, 3)))
    with store.session_factory() as s:
        run = s.get(m.ReviewRun, run_id)
        assert run is not None and run.status == "done"
        groups = {
            (g["exam_type"], g["patient_group"]): g["n"]
            for g in run.result["groups"]
            if g["quantity"] == "mgd_mgy"
        }
    # the report's views: CC 52 mm in the band, the sweep (protocol "Tomo CC": an exam type of
    # its own) 52 mm in the band, MLO 48 mm outside it
    assert groups == {
        ("mammo_cc", "breast_50_60mm"): 1,
        ("mammo_tomo_cc", "breast_50_60mm"): 1,
        ("mammo_mlo", "breast_outside_thickness_band"): 1,
    }


def test_explain_and_export_name_the_mammography_figures(settings_env, tmp_path, capsys) -> None:
    import csv
    import io
    import json

    from beamaudit.api.cli import main

    folder, _, _ = _objects(tmp_path)
    assert main(["scan", str(folder)]) == 0
    capsys.readouterr()
    assert main(["export", "events", "--format", "csv"]) == 0
    rows = list(csv.DictReader(io.StringIO(capsys.readouterr().out)))
    header = next(r for r in rows if r["source_kind"] == "image_header")
    for column in ("recon_mgd_mgy", "organ_dose_mgy", "agd_ratio_reported_to_recon",
                   "recon_glandularity_percent", "recon_target_filter", "recon_mgd_coefficients",
                   "recon_mgd_method", "image_laterality", "compression_force_n"):  # fmt: skip
        assert header[column] != "", column
    assert main(["explain", header["id"], "--json"]) == 0
    explained = json.loads(capsys.readouterr().out)
    assert explained["mammography"]["mgd_mgy"] == pytest.approx(float(header["recon_mgd_mgy"]))
    assert explained["mammography"]["reported_mgd_mgy"] == pytest.approx(1.31)
    assert main(["explain", header["id"]]) == 0
    text = capsys.readouterr().out
    assert "mean glandular dose (MGD)" in text and "W/Rh" in text


def test_stored_events_map_2d_and_tomosynthesis_by_their_acquisition(store, tmp_path) -> None:
    """With descriptions that name no tomosynthesis, the stored ``mammography_acquisition``
    still sends the report's sweep to the tomosynthesis exam type (a rule field, not a
    description)."""
    from sqlalchemy import update

    from beamaudit.api.store.review_rows import map_stored_events

    folder, _, _ = _objects(tmp_path)
    _scan(store.session_factory, folder, tmp_path)
    E = m.ExposureEventRow
    with store.session_factory.begin() as s:
        s.execute(update(E).values(study_description="Mammogram", series_description=None,
                                   protocol_name=None, exam_type=None))  # fmt: skip
        map_stored_events(s)
    with store.session_factory() as s:
        mapped = {
            (r.view_position, r.mammography_acquisition, r.exam_type)
            for r in s.scalars(select(E).where(E.source_kind != "image"))
        }
    assert ("CC", "tomosynthesis", "mammo_tomo_cc") in mapped
    assert ("CC", "2d", "mammo_cc") in mapped
    assert ("MLO", "2d", "mammo_mlo") in mapped


# ---- an official coefficient table named in the settings ---------------------------------------
# The table below is a FORMAT TEST ONLY: its numbers are invented (g 0.5, c 1.0, s 1.0
# everywhere), chosen so that the expected D_G is K x 0.5 exactly; they are no published values.
# The layout is the one beamaudit.model.dance_coefficients.load_official_coefficients documents.
TITLE = "FORMAT TEST ONLY: invented numbers, not a published table"


def _table_text() -> str:
    rows = ["factor,key,hvl_mm_al,thickness_mm,glandularity_percent,value"]
    for hvl in (0.2, 1.0):
        for t in (20, 110):
            rows.append(f"g,,{hvl},{t},,0.5")
            rows += [f"c,,{hvl},{t},{gl},1.0" for gl in (0.1, 100)]
    rows += ["s,W/Rh,,,,1.0", "s,W/Ag,,,,1.0"]
    header = f"# title: {TITLE}\n# source: invented for beamaudit's tests\n"
    return header + "\n".join(rows) + "\n"


@pytest.fixture
def table(tmp_path: Path) -> Iterator[Path]:
    path = tmp_path / "official.csv"
    path.write_text(_table_text(), encoding="utf-8")
    use_official_coefficients(path)
    try:
        yield path
    finally:
        use_official_coefficients(None)


def test_the_official_table_takes_precedence_and_is_named(table: Path) -> None:
    (values,) = figures([_event()], RoomBeams())
    assert values["recon_status"] == "ok"
    factors = (values["recon_mgd_g"], values["recon_mgd_c"], values["recon_mgd_s"])
    assert factors == pytest.approx((0.5, 1.0, 1.0))
    assert values["recon_mgd_mgy"] == pytest.approx(0.5 * values["recon_incident_air_kerma_mgy"])
    assert values["recon_mgd_coefficients"].startswith(TITLE)


def test_without_the_setting_the_monte_carlo_s_tables_are_used() -> None:
    assert official_coefficients() is None
    (values,) = figures([_event()], RoomBeams())
    assert values["recon_mgd_coefficients"] == "beamaudit Monte Carlo"


def test_scanned_views_store_which_table(store, table: Path, tmp_path: Path) -> None:
    folder, _, _ = _objects(tmp_path)
    _scan(store.session_factory, folder, tmp_path)
    E = m.ExposureEventRow
    with store.session_factory() as s:
        stored = s.execute(
            select(E.recon_mgd_coefficients, E.recon_mgd_g).where(E.recon_status == "ok")
        ).all()
    assert stored
    assert all(name.startswith(TITLE) for name, _ in stored)
    assert [g for _, g in stored] == pytest.approx([0.5] * len(stored))


def test_a_broken_table_is_a_one_line_settings_error(tmp_path: Path) -> None:
    from beamaudit.api.web.app import create_app

    path = tmp_path / "broken.csv"
    path.write_text("# title: x\nfactor,key,value\ng,,abc\n", encoding="utf-8")
    settings = load(
        database_url=f"sqlite:///{tmp_path / 'x.db'}", mammography_coefficients_file=path
    )
    with pytest.raises(SettingsError, match=r"^mammography_coefficients_file: ") as caught:
        create_app(settings)
    assert "\n" not in str(caught.value)
    assert official_coefficients() is None
