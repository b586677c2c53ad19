"""Review runs through the API: start, status, result as JSON, CSV and XLSX, flags, roles.

The events are invented (demo data); the review core itself is tested against ICRP 135 in
tests/api/review. Here: what the API stores and answers, and what a viewer may not see.
"""

from __future__ import annotations

import csv
import io
from datetime import datetime

import pytest
from api_support import parse_result, seed
from openpyxl import load_workbook

LOCAL_LEVELS = {
    "name": "Hollowbrook local DRLs (invented)",
    "kind": "local",
    "version": "2026-1",
    "effective_from": "2026-01-01",
    "levels": [{"exam_type": "chest_pa", "quantity": "dap_gy_cm2", "value": 0.1}],
}


@pytest.fixture
def november(api):
    """Thirty PA chests in one room in November 2026, DAP 0.12-0.41 Gy·cm², all above 0.1."""
    seed(
        api.store,
        [
            parse_result(
                f"1.2.7.{i}",
                study=f"1.2.7.{i}00",
                when=datetime(2026, 11, 1 + i % 28, 10),
                body_part="CHEST",
                view_position="PA",
                dap_gy_cm2=0.12 + 0.01 * i,
            )
            for i in range(30)
        ],
    )
    assert api.post("/level-sets", json=LOCAL_LEVELS).status_code == 201


def test_start_a_review_and_read_its_result(api, november) -> None:
    response = api.post("/reviews", json={"period": "2026-11"}, as_="physicist")
    assert response.status_code == 201, response.text
    run = response.json()
    assert run["status"] == "done", run
    assert run["period"] == "2026-11"
    assert run["parameters"]["period"]["start"] == "2026-11-01"
    assert [s["name"] for s in run["level_sets"]] == [LOCAL_LEVELS["name"]]
    assert "estimate" in run["caution"]
    assert api.get(f"/reviews/{run['id']}", as_="viewer").json()["status"] == "done"
    listed = api.get("/reviews", as_="viewer").json()
    assert [r["id"] for r in listed["items"]] == [run["id"]]

    result = api.get(f"/reviews/{run['id']}/result", as_="physicist").json()
    assert result["n_events"] == 30
    groups = [
        g
        for g in result["groups"]
        if g["exam_type"] == "chest_pa" and g["quantity"] == "dap_gy_cm2"
    ]
    assert groups and groups[0]["n"] == 30
    assert groups[0]["reference_level"] == pytest.approx(0.1)
    assert any(f["kind"] == "group_above_level" for f in result["flags"])


def test_result_as_csv_and_xlsx(api, november) -> None:
    run_id = api.post("/reviews", json={"period": "2026-11"}).json()["id"]
    response = api.get(f"/reviews/{run_id}/result.csv", as_="viewer")
    assert response.status_code == 200
    assert response.headers["content-type"].startswith("text/csv")
    rows = list(csv.DictReader(io.StringIO(response.text)))
    assert any(r["exam_type"] == "chest_pa" and r["quantity"] == "dap_gy_cm2" for r in rows)
    xlsx = api.get(f"/reviews/{run_id}/result.xlsx", as_="viewer")
    assert xlsx.status_code == 200
    book = load_workbook(io.BytesIO(xlsx.content), read_only=True)
    assert book.sheetnames == ["about", "groups", "flags"]


def test_viewer_sees_no_study_uids_or_event_ids(api) -> None:
    from beamaudit.api.store import models as m

    # a stored run whose result and flags name an exam (as the core's exam-level flags do)
    concerns = {"event_id": 7, "study_uid": "1.2.7.300", "room": "RAD1", "exam_type": "chest_pa"}
    flag = {
        "kind": "exam_above_investigation_level",
        "severity": "warning",
        "reason": "DAP above 2 x the level",
        "numbers": {"dap_gy_cm2": 0.41},
        "concerns": concerns,
    }
    with api.store.session_factory.begin() as s:
        run = m.ReviewRun(
            kind="monthly",
            period="2026-11",
            software_version="test",
            status="done",
            result={"n_events": 30, "groups": [], "flags": [flag], "unmapped": []},
        )
        s.add(run)
        s.flush()
        s.add(
            m.FlagRow(
                review_run_id=run.id,
                kind=flag["kind"],
                severity="warning",
                reason=flag["reason"],
                numbers=flag["numbers"],
                study_instance_uid="1.2.7.300",
                room="RAD1",
                exam_type="chest_pa",
            )
        )
        run_id = run.id
    physicist = api.get(f"/reviews/{run_id}/result", as_="physicist").json()
    assert physicist["flags"][0]["concerns"]["study_uid"] == "1.2.7.300"
    viewer = api.get(f"/reviews/{run_id}/result", as_="viewer").json()
    assert viewer["flags"][0]["concerns"] == {"room": "RAD1", "exam_type": "chest_pa"}
    assert "1.2.7." not in str(viewer)
    (seen,) = api.get(f"/reviews/{run_id}/flags", as_="viewer").json()
    assert seen["event_id"] is None and seen["study_instance_uid"] is None
    assert (
        api.get(f"/reviews/{run_id}/flags", as_="physicist").json()[0]["study_instance_uid"]
        == "1.2.7.300"
    )
    workbook = api.get(f"/reviews/{run_id}/result.xlsx", as_="viewer").content
    sheet = load_workbook(io.BytesIO(workbook), read_only=True)["flags"]
    assert not any("1.2.7." in str(c) for row in sheet.iter_rows(values_only=True) for c in row)


def test_flag_status_is_changed_by_physicists_and_audited(api, november) -> None:
    run_id = api.post("/reviews", json={"period": "2026-11"}).json()["id"]
    flag = api.get(f"/reviews/{run_id}/flags", params={"kind": "group_above_level"}).json()[0]
    path = f"/reviews/{run_id}/flags/{flag['id']}"
    assert api.patch(path, json={"status": "acknowledged"}, as_="viewer").status_code == 403
    changed = api.patch(path, json={"status": "acknowledged"}, as_="physicist")
    assert changed.status_code == 200 and changed.json()["status"] == "acknowledged"
    log = api.get("/audit-log", params={"entity": "flag"}).json()["items"]
    assert [(e["before"], e["after"]) for e in log] == [
        ({"status": "open"}, {"status": "acknowledged"})
    ]
    assert (
        api.patch(f"/reviews/{run_id}/flags/424242", json={"status": "closed"}).status_code == 404
    )


def test_a_run_with_no_result_is_409(api) -> None:
    from beamaudit.api.store import models as m

    with api.store.session_factory.begin() as s:
        run = m.ReviewRun(
            kind="monthly",
            period="2026-10",
            software_version="test",
            status="failed",
            error="no events",
        )
        s.add(run)
        s.flush()
        run_id = run.id
    response = api.get(f"/reviews/{run_id}/result", as_="viewer")
    assert response.status_code == 409 and "failed: no events" in response.json()["detail"]
    assert api.get(f"/reviews/{run_id}/result.csv").status_code == 409
    assert api.get("/reviews/424242").status_code == 404


@pytest.mark.parametrize(
    ("body", "loc"),
    [
        ({"period": "2026-13"}, ["body", "period"]),
        ({"period": "November"}, ["body", "period"]),
        ({"period": "0000-01"}, ["body", "period"]),
        ({"period": "2026-11", "parameters": {"basis": "some"}}, ["body", "parameters"]),
        ({"period": "2026-11", "parameters": {"colour": "red"}}, ["body", "parameters"]),
        ({"period": "2026-11", "parameters": {"sites": 5}}, ["body", "parameters"]),
        (
            {"period": "2026-11", "parameters": {"levels_on": "soon"}},
            ["body", "parameters", "levels_on"],
        ),
        ({"period": "2026-11", "kind": "weekly"}, ["body", "kind"]),
    ],
)
def test_bad_review_requests_are_422(api, body, loc) -> None:
    response = api.post("/reviews", json=body)
    assert response.status_code == 422, response.text
    assert loc in [d["loc"] for d in response.json()["detail"]]


def test_viewer_cannot_start_a_review(api) -> None:
    assert api.post("/reviews", json={"period": "2026-11"}, as_="viewer").status_code == 403
