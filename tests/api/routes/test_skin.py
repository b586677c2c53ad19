"""Skin-dose routes: a dose report with geometry uploaded, its map record, the NCRP 168
follow-up list and an audited follow-up step. Both backends; reports built to PS3.16 by
tests/ingest/rdsr_builders.py (invented data)."""

from __future__ import annotations

from ingest_samples import to_bytes
from rdsr_builders import EventGeometry, FluoroEvent, fluoroscopy_report

DICOM = {"Content-Type": "application/dicom"}


def _run(kar_gy: float, primary_deg: float) -> FluoroEvent:
    return FluoroEvent(
        dose_rp_gy=kar_gy,
        dap_gy_m2=kar_gy * (0.16 * 660.0 / 1150.0) ** 2,
        pulses=900,
        geometry=EventGeometry(primary_angle_deg=primary_deg),
    )


def _upload_hot_and_light(api) -> None:
    # two overlapping projections of 3 Gy K_a,r each, and one light run
    hot = to_bytes(fluoroscopy_report([_run(3.0, -4.0), _run(3.0, 4.0)]))
    light = to_bytes(fluoroscopy_report([_run(0.2, 0.0)]))
    for data in (hot, light):
        assert api.post("/upload", content=data, headers=DICOM, as_="physicist").status_code == 200


def test_uploaded_report_has_a_skin_map_and_a_follow_up(api) -> None:
    _upload_hot_and_light(api)
    exams = api.get("/exams", as_="physicist").json()["items"]
    records = {e["id"]: api.get(f"/exams/{e['id']}/skin-dose", as_="physicist") for e in exams}
    assert all(r.status_code == 200 for r in records.values())
    by_psd = sorted((r.json() for r in records.values()), key=lambda r: r["peak_skin_dose_mgy"])
    low, high = by_psd
    assert high["peak_skin_dose_mgy"] > 3000.0 > low["peak_skin_dose_mgy"]
    assert "peak_skin_dose" in high["levels_crossed"] and low["levels_crossed"] == []
    assert high["record"]["map"]["dose_mgy"] and "physicist" in high["caution"]
    listed = api.get("/skin-doses/follow-up", as_="physicist").json()
    assert [i["study_instance_uid"] for i in listed["items"]] == [high["study_instance_uid"]]
    assert listed["window_days"] == 60.0
    step = api.patch(
        f"/exams/{high['exam_id']}/skin-dose/follow-up",
        json={"status": "follow_up_booked", "note": "dermatology in 3 weeks"},
        as_="physicist",
    )
    assert step.status_code == 200 and step.json()["followup_status"] == "follow_up_booked"
    bad = api.patch(
        f"/exams/{high['exam_id']}/skin-dose/follow-up", json={"status": "done"}, as_="physicist"
    )
    assert bad.status_code == 422
    assert api.get(f"/exams/{high['exam_id']}/skin-dose", as_="viewer").status_code == 403
    closed = api.patch(
        f"/exams/{high['exam_id']}/skin-dose/follow-up",
        json={"status": "closed", "note": "no skin effect at 6 weeks"},
        as_="physicist",
    )
    assert closed.status_code == 200
    assert api.get("/skin-doses/follow-up", as_="physicist").json()["items"] == []
    assert api.get("/exams/999999/skin-dose", as_="physicist").status_code == 404


def test_committee_report_lists_the_period_s_procedures_to_follow_up(api) -> None:
    # the report's follow-up section: the procedure at an NCRP 168 level with its state, closed
    # ones included; neither the pseudonym nor the free-text note is shown (viewers read it)
    from sqlalchemy import select

    from beamaudit.api.review import Period, ReviewParameters
    from beamaudit.api.runs.reviews import run_review
    from beamaudit.api.store import models as m

    _upload_hot_and_light(api)
    exams = api.get("/exams", as_="physicist").json()["items"]
    skins = [api.get(f"/exams/{e['id']}/skin-dose", as_="physicist").json() for e in exams]
    high = max(skins, key=lambda r: r["peak_skin_dose_mgy"])
    low = min(skins, key=lambda r: r["peak_skin_dose_mgy"])
    note = "told at discharge, dermatology in 3 weeks"
    step = api.patch(
        f"/exams/{high['exam_id']}/skin-dose/follow-up",
        json={"status": "follow_up_booked", "note": note},
        as_="physicist",
    )
    assert step.status_code == 200
    with api.store.session_factory() as s:
        when = s.scalar(select(m.ExposureEventRow.event_datetime))
        pseudonyms = set(s.scalars(select(m.Study.patient_pseudo_id)))
    period = Period.month(when.year, when.month)
    run_review(api.store.session_factory, ReviewParameters(period=period))
    month = f"{when.year:04d}-{when.month:02d}"
    viewer = api.headers("viewer")
    page = api.client.get(f"/reports/{month}", headers=viewer)
    assert page.status_code == 200, page.text[:500]
    section = page.text.split('id="follow-up"', 1)[1].split("</section>", 1)[0]
    assert high["study_instance_uid"] in section and low["study_instance_uid"] not in section
    assert "follow-up booked" in section and "peak skin dose" in section
    assert f"{high['peak_skin_dose_mgy']:,.0f} mGy" in section
    assert note not in page.text
    # the flags page's own srdl_exceeded row of the procedure carries its follow-up state
    flags_page = api.client.get("/flags", headers=viewer).text
    assert "Patient follow-up: <strong>follow-up booked</strong>" in flags_page
    assert not any(p and p in page.text for p in pseudonyms)
    # closed procedures stay in their period's report
    closed = api.patch(
        f"/exams/{high['exam_id']}/skin-dose/follow-up",
        json={"status": "closed", "note": "no skin effect at 6 weeks"},
        as_="physicist",
    )
    assert closed.status_code == 200
    page = api.client.get(f"/reports/{month}", headers=viewer).text
    assert high["study_instance_uid"] in page.split('id="follow-up"', 1)[1]
    assert ">closed<" in page.split('id="follow-up"', 1)[1]


def _one_patient_now(api) -> str:
    """Both uploaded procedures made one pseudonymised patient's, this week."""
    from datetime import timedelta

    from sqlalchemy import select

    from beamaudit.api.store import models as m
    from beamaudit.api.store.base import utcnow

    with api.store.session_factory.begin() as s:
        for k, study in enumerate(s.scalars(select(m.Study).order_by(m.Study.id))):
            study.patient_pseudo_id = "P-ROUTE"
            study.study_datetime = utcnow() - timedelta(days=3 - k)
    return "P-ROUTE"


def test_the_map_as_a_png_for_an_exam_and_for_a_patient(api) -> None:
    # PNG signature: ISO/IEC 15948 section 5.2; the size is the module's A4 at 150 dpi
    import io

    from PIL import Image

    from beamaudit.dashboards.skin_image import SKIN_DOSE_PNG_SIZE_PX

    _upload_hot_and_light(api)
    exam = api.get("/exams", as_="physicist").json()["items"][0]["id"]
    answer = api.get(f"/exams/{exam}/skin-dose/map.png", as_="physicist")
    assert answer.status_code == 200 and answer.headers["content-type"] == "image/png"
    assert answer.content.startswith(b"\x89PNG\r\n\x1a\n")
    with Image.open(io.BytesIO(answer.content)) as image:
        assert image.size == SKIN_DOSE_PNG_SIZE_PX
    # as the JSON record: physicists only; an unknown exam is a 404
    assert api.get(f"/exams/{exam}/skin-dose/map.png", as_="viewer").status_code == 403
    assert api.get("/exams/999999/skin-dose/map.png", as_="physicist").status_code == 404
    patient = _one_patient_now(api)
    summary = api.get(f"/skin-doses/patients/{patient}", as_="physicist")
    assert summary.status_code == 200
    body = summary.json()
    assert body["method"].startswith("maps_added") and len(body["exam_ids"]) == 2
    assert body["lower_bound_mgy"] <= body["peak_skin_dose_mgy"] <= body["upper_bound_mgy"]
    assert "physicist" in body["caution"] and body["window_days"] == 60.0
    cumulative = api.get(f"/skin-doses/patients/{patient}/map.png", as_="physicist")
    assert cumulative.status_code == 200 and cumulative.content.startswith(b"\x89PNG")
    assert api.get("/skin-doses/patients/P-NOBODY/map.png", as_="physicist").status_code == 404
    assert api.get(f"/skin-doses/patients/{patient}", as_="viewer").status_code == 403


def test_a_failed_map_gives_409_not_an_empty_picture(api) -> None:
    from sqlalchemy import select

    from beamaudit.api.store import models as m

    _upload_hot_and_light(api)
    with api.store.session_factory.begin() as s:
        skin = s.scalars(select(m.SkinDoseRow)).first()
        skin.status, skin.reason, skin.record = "failed", "skin-dose map not computed: x", None
        exam = skin.study_id
    answer = api.get(f"/exams/{exam}/skin-dose/map.png", as_="physicist")
    assert answer.status_code == 409 and "not computed" in answer.json()["detail"]
