"""The skin-dose section of the exam page and the follow-up section of the flags page
(invented records, shaped as the API hands them over)."""

from __future__ import annotations

from datetime import datetime
from typing import Any

from test_skin_figure import make_record

from beamaudit.dashboards import render_exam, render_flags

LEVEL = {
    "key": "peak_skin_dose",
    "crossed": True,
    "text": "peak skin dose 4000 mGy, 1.33 x the 3000 mGy level (at or above)",
}


def skin(**changes: Any) -> dict[str, Any]:
    values = {
        "status": "ok",
        "reason": None,
        "peak_skin_dose_mgy": 4000.0,
        "area_above_2gy_cm2": 120.0,
        "area_above_3gy_cm2": 90.0,
        "area_above_5gy_cm2": 0.0,
        "uncertainty_pct": 48.0,
        "events_used": 2,
        "level_checks": [LEVEL],
        "followup_status": "open",
        "record": make_record(),
    }
    values.update(changes)
    return values


def test_exam_page_draws_the_map_and_names_the_levels_reached(demo_exam) -> None:
    page = render_exam(demo_exam, skin_dose=skin())
    assert 'id="skin-dose"' in page and 'data-figure="skin-map"' in page
    assert "4,000 mGy (± 48 %, k = 2)" in page
    assert "follow the patient up" in page and LEVEL["text"] in page
    assert render_exam(demo_exam).count('id="skin-dose"') == 0
    assert "to follow up" in page


def test_exam_page_says_no_follow_up_is_needed_below_every_level(demo_exam) -> None:
    # NCRP Report 168 (2010): follow-up is asked for from a substantial radiation dose level
    quiet = {**LEVEL, "crossed": False, "text": "peak skin dose 900 mGy, below 3000 mGy"}
    page = render_exam(demo_exam, skin_dose=skin(peak_skin_dose_mgy=900.0, level_checks=[quiet]))
    assert "not needed (no follow-up level reached)" in page and "to follow up" not in page


def test_exam_page_says_why_a_map_is_missing(demo_exam) -> None:
    page = render_exam(
        demo_exam,
        skin_dose=skin(status="failed", reason="skin-dose map not computed: x", exam_id=7),
    )
    assert "skin-dose map not computed: x" in page and 'data-figure="skin-map"' not in page
    assert "map.png" not in page


def test_exam_page_links_the_map_as_a_png_image(demo_exam) -> None:
    page = render_exam(demo_exam, skin_dose=skin(exam_id=7))
    assert 'href="/api/v1/exams/7/skin-dose/map.png" download' in page
    assert "map.png" not in render_exam(demo_exam, skin_dose=skin())


def test_flags_page_lists_patients_to_follow_up(demo_flags) -> None:
    followup = {
        "items": [
            {
                "study_instance_uid": "1.2.3.4",
                "study_datetime": datetime(2026, 11, 3, 10),
                "peak_skin_dose_mgy": 4000.0,
                "level_checks": [LEVEL],
                "followup_status": "follow_up_booked",
                "followup_note": "dermatology in 3 weeks",
            }
        ],
        "window_days": 60.0,
        "cumulative": [
            {
                "patient_pseudo_id": "P-1",
                "procedures": 2,
                "peak_skin_dose_mgy": 5200.0,
                "upper_bound_mgy": 6100.0,
                "method": "maps_added",
            }
        ],
    }
    page = render_flags(demo_flags, followup=followup)
    assert 'id="follow-up"' in page and 'href="/exams/1.2.3.4#skin-dose"' in page
    assert "follow-up booked" in page and "dermatology in 3 weeks" in page
    assert "within 60 days" in page and "5,200 mGy" in page and "maps added" in page
    # the added map as a PNG; no link where only the peaks could be added
    assert 'href="/api/v1/skin-doses/patients/P-1/map.png" download' in page
    followup["cumulative"][0]["method"] = "peaks_added"
    assert "map.png" not in render_flags(demo_flags, followup=followup)
    assert 'id="follow-up"' not in render_flags(demo_flags)


def test_committee_report_lists_procedures_to_follow_up_without_pseudonym_or_note(
    demo_groups,
) -> None:
    from beamaudit.dashboards import render_committee_report

    item = {
        "study_instance_uid": "1.2.3.4",
        "study_datetime": datetime(2026, 10, 3, 10),
        "room": "ANGIO 1",
        "exam_type": "angio_cardiac",
        "patient_pseudo_id": "9f3c0d7e5a1b4c2d",
        "peak_skin_dose_mgy": 4000.0,
        "uncertainty_pct": 48.0,
        "level_checks": [LEVEL],
        "followup_status": "patient_informed",
        "followup_note": "told at discharge",
        "followup_at": datetime(2026, 10, 5, 9),
    }

    def report(followup: Any) -> str:
        return render_committee_report(
            demo_groups, period="2026-10", method="ICRP 135.", software_version="1.0",
            followup=followup,
        )  # fmt: skip

    page = report([item])
    section = page.split('id="follow-up"', 1)[1].split("</section>", 1)[0]
    assert "<code>1.2.3.4</code>" in section and "ANGIO 1" in section
    assert "4,000 mGy" in section and "± 48 %" in section and LEVEL["text"] in section
    assert "patient informed" in section and "since 2026-10-05" in section
    assert "9f3c0d7e5a1b4c2d" not in page and "told at discharge" not in page
    assert "None in this period." in report([])
    assert 'id="follow-up"' not in report(None)


def test_flags_page_shows_the_follow_up_state_on_its_srdl_rows() -> None:
    flag = {
        "kind": "srdl_exceeded", "severity": "action", "period": "2026-10", "status": "open",
        "room": "ANGIO 1", "exam_type": "angio_cardiac", "study_uid": "1.2.3.4",
        "reason": "Study 1.2.3.4 exceeds the NCRP 168 substantial radiation dose level.",
        "flag_id": "", "event_id": None, "raised_at": None, "note": None, "changed": None,
        "run_id": None, "quantity": None, "numbers": {},
    }  # fmt: skip
    other = {**flag, "kind": "above_level", "study_uid": "1.2.3.5", "reason": "above"}
    page = render_flags(
        [flag, other], followup_states={"1.2.3.4": "follow_up_booked", "1.2.3.5": "closed"}
    )
    assert page.count("Patient follow-up:") == 1
    assert "Patient follow-up: <strong>follow-up booked</strong>" in page
    assert "Patient follow-up:" not in render_flags([flag])
