"""Proposed local DRLs of a stored run, adopting them as an audited local set version, and the
recurrent-exposure list (pseudonyms, counts and sums only)."""

from __future__ import annotations

from datetime import UTC, date, datetime

import pytest
from sqlalchemy import insert, select
from stored_rows import add_event

from beamaudit.api.store import models as m


def _site_value(exam_type: str, quantity: str, value: float | None, **more) -> dict:
    status = "proposed" if value is not None else "too_few_rooms"
    return {"site": "Hollowbrook (invented)", "exam_type": exam_type, "quantity": quantity,
            "clinical_indication": None, "patient_group": None, "unit": "Gy.cm2",
            "n_rooms": 10 if value is not None else 3, "typical_value": 0.1,
            "proposal_status": status, "proposed_local_drl": value, **more}  # fmt: skip


@pytest.fixture
def run_id(api) -> int:
    """A done run whose result keeps site values (invented numbers)."""
    rows = [
        _site_value("chest_pa", "dap_gy_cm2", 0.12),
        _site_value("chest_pa", "dap_gy_cm2", 0.04, patient_group="weight_15_30kg"),
        _site_value("abdomen_ap", "dap_gy_cm2", None),
    ]
    with api.store.session_factory.begin() as s:
        s.execute(
            insert(m.ReviewRun),
            {"id": 71, "kind": "monthly", "period": "2026-03", "period_start": date(2026, 3, 1),
             "period_end": date(2026, 4, 1), "scope": {}, "whole_site": True, "parameters": {},
             "level_sets": [], "software_version": "test", "status": "done",
             "result": {"site_values": rows, "flags": []}},
        )  # fmt: skip
    return 71


ADOPT = {
    "site": "Hollowbrook (invented)",
    "set_name": "Hollowbrook local DRLs (invented)",
    "version": "2026-2",
    "effective_from": "2026-05-01",
    "source": "dose committee, minute 12 (invented)",
}


def test_proposals_are_shown_beside_the_levels(api, run_id) -> None:
    body = api.get("/local-level-proposals", as_="viewer").json()
    assert body["run_id"] == run_id
    assert [r["proposal_status"] for r in body["rows"]] == ["proposed", "proposed", "too_few_rooms"]
    assert "estimate" in body["caution"]


def test_adopting_stores_a_new_audited_version_of_the_local_set(api, run_id) -> None:
    choice = {"exam_type": "chest_pa", "quantity": "dap_gy_cm2", "patient_group": "weight_15_30kg"}
    response = api.post(
        "/local-level-proposals/adopt",
        json=ADOPT | {"run_id": run_id, "choices": [choice]},
        as_="physicist",
    )
    assert response.status_code == 201, response.text
    levels = response.json()["levels"]
    assert [(x["patient_group"], x["value"]) for x in levels] == [("weight_15_30kg", 0.04)]
    assert "review run 71" in levels[0]["source"]
    # all proposals of the site, as a later version: the band's level is kept, adults added
    again = api.post(
        "/local-level-proposals/adopt",
        json=ADOPT | {"run_id": run_id, "version": "2026-3", "effective_from": "2026-06-01"},
        as_="physicist",
    )
    assert again.status_code == 201, again.text
    assert sorted((x["patient_group"], x["value"]) for x in again.json()["levels"]) == [
        ("", 0.12),
        ("weight_15_30kg", 0.04),
    ]
    with api.store.session_factory() as s:
        entries = s.scalars(
            select(m.AuditLogEntry).where(m.AuditLogEntry.action == "adopt_proposals")
        ).all()
    assert [e.after["review_run"] for e in entries] == [71, 71]
    assert entries[1].before["version"] == "2026-2"


def test_what_is_not_proposed_cannot_be_adopted(api, run_id) -> None:
    choice = {"exam_type": "abdomen_ap", "quantity": "dap_gy_cm2"}
    response = api.post(
        "/local-level-proposals/adopt",
        json=ADOPT | {"run_id": run_id, "choices": [choice]},
        as_="physicist",
    )
    assert response.status_code == 409
    assert "no proposed local level for abdomen_ap" in response.json()["detail"]
    viewer = api.post("/local-level-proposals/adopt", json=ADOPT | {"run_id": run_id}, as_="viewer")
    assert viewer.status_code == 403
    assert api.get("/level-sets").json() == []


def test_the_recurrent_list_shows_pseudonyms_counts_and_sums_only(api) -> None:
    with api.store.session_factory.begin() as s:
        for n, dose in enumerate((60.0, 45.0), start=1):
            when = datetime(2026, n, 5, tzinfo=UTC)
            add_event(s, n, study_uid=f"2.25.81{n}", modality="CT", event_datetime=when,
                      patient_pseudo_id="PSEUDO-R", effective_dose_msv=dose)  # fmt: skip
    body = api.get("/recurrent-exposure?as_of=2026-03-01", as_="physicist").json()
    assert [p["patient_key"] for p in body["patients"]] == ["PSEUDO-R"]
    assert body["patients"][0]["cumulative_dose_msv"] == 105.0
    assert set(body["patients"][0]) == {
        "patient_key", "n_exams", "n_exams_in_window", "n_without_estimate",
        "cumulative_dose_msv", "peak_window_dose_msv",
    }  # fmt: skip
    assert "must never decide" in body["caution"]
    assert api.get("/recurrent-exposure", as_="viewer").status_code == 403
    assert api.get("/recurrent-exposure?as_of=0001-01-01", as_="physicist").status_code == 422
