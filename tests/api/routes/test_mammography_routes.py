"""Mammography through the REST API and the exam page: per view our D_G beside the device's
AGD with what it was made with, and the accumulated AGD per breast (synthetic MG header and
mammography report of the ingest tests; no real MG object is available, DICOM-NOTES section 4).
"""

from __future__ import annotations

from pathlib import Path

import pytest
from fastapi.testclient import TestClient
from rdsr_builders import mammography_report
from test_mammography_paths import _mg_header

from beamaudit.api.intake.pipeline import Pipeline
from beamaudit.api.intake.postprocess import Completion
from beamaudit.api.intake.scanning import scan_paths
from beamaudit.ingest.pseudonym import load_or_create_key


@pytest.fixture
def mg(api, tmp_path: Path):
    header, report = _mg_header(), mammography_report()
    folder = tmp_path / "in"
    folder.mkdir()
    header.save_as(folder / "header.dcm", enforce_file_format=True)
    report.save_as(folder / "report.dcm", enforce_file_format=True)
    scan_paths(
        [folder],
        pipeline=Pipeline(api.store.session_factory, completion=Completion()),
        key=load_or_create_key(tmp_path / "k.key"),
    )
    return header, report


def test_event_list_and_detail_carry_the_view_and_both_doses(api, mg) -> None:
    items = api.get("/events", params={"modality": "MG"}, as_="physicist").json()["items"]
    header = next(i for i in items if i["source_kind"] == "image_header")
    assert header["view_position"] == "CC" and header["image_laterality"] == "L"
    assert header["body_part_thickness_mm"] == 49.0
    assert header["organ_dose_mgy"] == pytest.approx(1.31)  # 0.0131 dGy (DICOM PS3.3)
    assert header["agd_ratio_reported_to_recon"] == pytest.approx(1.31 / header["recon_mgd_mgy"])
    body = api.get(f"/events/{header['id']}", as_="physicist").json()
    mammo = body["mammography"]
    assert mammo["target_filter"] == "W/Rh" and mammo["acquisition"] == "2d"
    assert mammo["compressed_thickness_mm"] == 49.0 and mammo["compression_force_n"] == 104.0
    assert mammo["glandularity_assumed"] is True and 0 < mammo["glandularity_percent"] < 100
    assert mammo["coefficients"] == "beamaudit Monte Carlo"
    assert mammo["method"].startswith("Dance method") and mammo["t"] is None
    assert mammo["mgd_mgy"] == pytest.approx(header["recon_mgd_mgy"])
    rows = {r["quantity"]: r for r in body["dose_breakdown"]}
    assert rows["mgd_mgy"]["reported"] == pytest.approx(1.31)
    assert rows["mgd_mgy"]["reconstructed"] == pytest.approx(mammo["mgd_mgy"])
    assert rows["mgd_mgy"]["ratio_reported_to_reconstructed"] == pytest.approx(
        mammo["ratio_reported_to_reconstructed"]
    )
    assert body["recon_trail"]["mgd_mgy"] == pytest.approx(mammo["mgd_mgy"])
    assert "estimate" in body["caution"]


def test_a_non_mammography_event_has_no_mammography_block(api, mg) -> None:
    from api_support import parse_result, seed

    (event_id,) = seed(api.store, [parse_result("1.2.3.9", study="1.2.3.900")])
    assert api.get(f"/events/{event_id}", as_="physicist").json()["mammography"] is None


def test_the_exam_gives_the_accumulated_agd_per_breast(api, mg) -> None:
    _, report = mg
    exams = api.get("/exams", as_="physicist").json()["items"]
    exam = next(e for e in exams if e["study_instance_uid"] == report.StudyInstanceUID)
    (acc,) = api.get(f"/exams/{exam['id']}", as_="physicist").json()["accumulated"]
    assert acc["agd_left_mgy"] == pytest.approx(3.13)
    assert acc["agd_right_mgy"] == pytest.approx(1.30)
    assert acc["agd_total_mgy"] is None


def test_the_exam_page_shows_our_dose_beside_the_device_s(api, mg) -> None:
    header, _ = mg
    client: TestClient = api.client
    page = client.get(f"/exams/{header.StudyInstanceUID}", headers=api.headers("physicist"))
    assert page.status_code == 200, page.text[:300]
    text = page.text
    assert "Mean glandular dose (MGD)" in text
    assert "W/Rh" in text and "Compressed breast thickness" in text
    assert "Glandularity used" in text and "s (spectrum)" in text
    assert "1.31" in text  # the device's AGD beside ours


def test_the_exam_page_draws_the_breast_beam_and_names_the_exam_type(api, mg) -> None:
    """The view's spectrum is the beam its D_G was made with (from the stored recipe): a W
    target, the 0.05 mm Rh filter and the paddle; its HVL is the stored one; the title gives
    the catalogue's name of the exam type, not its code."""
    from sqlalchemy import select

    from beamaudit.api.store import models as m
    from beamaudit.api.web.page_data import exam_record

    header, _ = mg
    with api.store.session_factory() as s:
        record = exam_record(s, header.StudyInstanceUID)
        row = s.scalars(
            select(m.ExposureEventRow).where(m.ExposureEventRow.source_kind == "image_header")
        ).one()
    assert record is not None
    (exposure,) = record["exposures"]
    spectrum = exposure["spectrum"]
    assert spectrum is not None
    assert spectrum["hvl1_mm_al"] == pytest.approx(row.recon_hvl1_mm_al, rel=1e-9)
    energies, fluence = spectrum["energies_kev"], spectrum["fluence_per_mas_1m"]
    assert all(f == 0 for e, f in zip(energies, fluence, strict=True) if e > 28.5)  # 28 kV
    # Rh K edge 23.22 keV (X-ray Data Booklet, from memory): the filter cuts the fluence just
    # above it, so the spectrum falls across the edge
    below = max(f for e, f in zip(energies, fluence, strict=True) if 22.5 <= e < 23.2)
    above = max(f for e, f in zip(energies, fluence, strict=True) if 23.3 <= e < 24.0)
    assert above < 0.5 * below
    page = api.client.get(
        f"/exams/{header.StudyInstanceUID}", headers=api.headers("physicist")
    ).text
    assert "<title>Mammography CC" in page and "mammo_cc" not in page.split("</title>")[0]
    assert "Reconstructed spectrum, exposure 1" in page


def test_the_api_and_the_exam_page_say_screening_or_diagnostic_and_from_what(
    api, tmp_path: Path
) -> None:
    """A magnification view (CID 4015, in View Code Sequence per PS3.3 C.8.11.7): diagnostic,
    and the clue that decided is shown."""
    from pydicom.dataset import Dataset
    from pydicom.sequence import Sequence

    header = _mg_header()
    modifier = Dataset()
    modifier.CodeValue, modifier.CodingSchemeDesignator = "399163009", "SCT"
    modifier.CodeMeaning = "Magnification"
    header.ViewCodeSequence[0].ViewModifierCodeSequence = Sequence([modifier])
    folder = tmp_path / "in"
    folder.mkdir()
    header.save_as(folder / "magnified.dcm", enforce_file_format=True)
    scan_paths(
        [folder],
        pipeline=Pipeline(api.store.session_factory, completion=Completion()),
        key=load_or_create_key(tmp_path / "k.key"),
    )
    (item,) = api.get("/events", params={"modality": "MG"}, as_="physicist").json()["items"]
    mammo = api.get(f"/events/{item['id']}", as_="physicist").json()["mammography"]
    clue = "(0054,0222) ViewModifierCodeSequence (399163009, SCT) Magnification"
    assert (mammo["intent"], mammo["intent_from"]) == ("diagnostic", clue)
    page = api.client.get(f"/exams/{header.StudyInstanceUID}", headers=api.headers("physicist"))
    assert "Screening or diagnostic" in page.text and f"diagnostic, from {clue}" in page.text


def test_a_workup_study_shows_which_view_made_each_view_diagnostic(api, tmp_path: Path) -> None:
    # four plain views and a spot compression view (tests/api/test_study_intent.py): the API and
    # the exam page give each plain view's intent with the study's clue and the deciding object
    from test_study_intent import SPOT_CLUE, _four_views, _spot

    study = "1.2.826.0.1.3680043.10.1407.81"
    folder = tmp_path / "workup"
    folder.mkdir()
    for k, ds in enumerate([*_four_views(study), _spot(study)]):
        ds.save_as(folder / f"{k}.dcm", enforce_file_format=True)
    scan_paths(
        [folder],
        pipeline=Pipeline(api.store.session_factory, completion=Completion()),
        key=load_or_create_key(tmp_path / "k.key"),
    )
    items = api.get("/events", params={"modality": "MG"}, as_="physicist").json()["items"]
    intents = [api.get(f"/events/{i['id']}", as_="physicist").json()["mammography"] for i in items]
    assert {m["intent"] for m in intents} == {"diagnostic"}
    froms = sorted(m["intent_from"] for m in intents)
    assert froms[0] == SPOT_CLUE  # the spot view's own clue
    assert all(f.startswith(f"the study: {SPOT_CLUE}, of object ") for f in froms[1:])
    page = api.client.get(f"/exams/{study}", headers=api.headers("physicist")).text
    assert "diagnostic, from the study: " in page
