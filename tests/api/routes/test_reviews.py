"""Review runs through the API: start, status, result as JSON, CSV and XLSX, flags, roles.

The events are invented (demo data); the review core itself is tested against ICRP 135 in
tests/api/review. Here: what the API stores and answers, and what a viewer may not see.
"""

from __future__ import annotations

import csv
import io
from datetime import datetime

import pytest
from api_support import parse_result, seed, stored_run
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


def test_a_review_started_by_the_api_sends_the_digest_of_its_new_findings(
    api, november, tmp_path
) -> None:
    import json

    run_id = api.post("/reviews", json={"period": "2026-11"}).json()["id"]
    flags = api.get(f"/reviews/{run_id}/flags").json()
    lines = (tmp_path / "outbox.jsonl").read_text().splitlines()  # no server configured
    [digest] = [json.loads(line) for line in lines]
    assert (digest["trigger"], digest["review_run_id"]) == ("review", run_id)
    assert digest["new_findings"] == len({f["finding_id"] for f in flags}) > 0
    api.post("/reviews", json={"period": "2026-11"})  # found again: nothing new, no digest
    assert len((tmp_path / "outbox.jsonl").read_text().splitlines()) == 1


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

    # a stored run whose result and flags name an exam (as the core's exam-level flags do)
    concerns = {"event_id": 7, "study_uid": "1.2.7.300", "room": "RAD1", "exam_type": "chest_pa"}
    flag = {
        "kind": "exam_above_investigation_level",
        "severity": "warning",
        "reason": "DAP above 2 x the level",
        "numbers": {"dap_gy_cm2": 0.41},
        "concerns": concerns,
    }
    stored = {k: v for k, v in concerns.items() if k != "event_id"}  # no such event stored
    run_id = stored_run(
        api.store,
        [{**flag, "concerns": stored}],
        status="done",
        result={"n_events": 30, "groups": [], "flags": [flag], "unmapped": []},
    )
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


def _group_flag(api, run_id: int) -> dict:
    flags = api.get(f"/reviews/{run_id}/flags", params={"kind": "group_above_level"}).json()
    assert len(flags) == 1, flags
    return flags[0]


NOTE = "DAP meter checked on 2026-12-02; the chest protocol is under review"


def test_flag_triage_needs_a_physicist_and_a_note_and_is_audited(api, november) -> None:
    run_id = api.post("/reviews", json={"period": "2026-11"}).json()["id"]
    flag = _group_flag(api, run_id)
    path = f"/reviews/{run_id}/flags/{flag['id']}"
    assert (
        api.patch(path, json={"status": "acknowledged", "note": NOTE}, as_="viewer").status_code
        == 403
    )
    for body in ({"status": "acknowledged"}, {"status": "closed", "note": "  "}):
        refused = api.patch(path, json=body, as_="physicist")
        assert refused.status_code == 422, refused.text
        assert ["body", "note"] in [d["loc"] for d in refused.json()["detail"]]
    changed = api.patch(path, json={"status": "acknowledged", "note": NOTE}, as_="physicist")
    assert changed.status_code == 200, changed.text
    read = changed.json()
    assert (read["status"], read["note"]) == ("acknowledged", NOTE)
    assert read["status_by"].startswith(f"token:{api.token_ids['physicist']}")
    assert read["status_at"] is not None
    log = api.get("/audit-log", params={"entity": "finding"}).json()["items"]
    assert [(e["entity_id"], e["before"], e["after"]) for e in log] == [
        (
            str(flag["finding_id"]),
            {"status": "open", "note": None},
            {"status": "acknowledged", "note": NOTE, "flag_id": flag["id"]},
        )
    ]
    reopened = api.patch(path, json={"status": "open"}, as_="physicist")  # no note needed
    assert reopened.status_code == 200 and reopened.json()["status"] == "open"
    assert api.patch(f"/reviews/{run_id}/flags/424242", json={"status": "open"}).status_code == 404


def test_triage_carries_over_to_a_later_run_with_what_changed(api, november) -> None:
    first = api.post("/reviews", json={"period": "2026-11"}).json()["id"]
    flag = _group_flag(api, first)
    assert flag["status"] == "open" and flag["changes"] is None  # found for the first time
    path = f"/reviews/{first}/flags/{flag['id']}"
    assert api.patch(path, json={"status": "acknowledged", "note": NOTE}).status_code == 200
    # five more exams arrive; the month is reviewed again (by hand, then by the nightly run)
    seed(
        api.store,
        [
            parse_result(f"1.2.8.{i}", study=f"1.2.8.{i}00", when=datetime(2026, 11, 20, 10),
                         body_part="CHEST", view_position="PA", dap_gy_cm2=0.9)
            for i in range(5)
        ],
    )  # fmt: skip
    second = api.post("/reviews", json={"period": "2026-11"}).json()["id"]
    again = _group_flag(api, second)
    assert again["id"] != flag["id"] and again["finding_id"] == flag["finding_id"]
    assert (again["status"], again["note"]) == ("acknowledged", NOTE)
    assert again["changes"]["n_used"] == {"before": 30, "after": 35}
    assert again["changes"]["median"]["before"] == pytest.approx(flag["numbers"]["median"])
    assert "level_set" not in again["changes"]  # what did not change is not listed
    nightly = api.post("/reviews", json={"period": "2026-11-01/2026-11-30", "kind": "nightly"})
    assert nightly.status_code == 201, nightly.text
    third = _group_flag(api, nightly.json()["id"])
    assert third["finding_id"] == flag["finding_id"] and third["status"] == "acknowledged"
    # the first run's flag is the same finding: it shows the same triage
    assert _group_flag(api, first)["status"] == "acknowledged"


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


def test_runs_keep_their_scope_and_only_a_whole_site_month_is_the_record(api, november) -> None:
    whole = api.post("/reviews", json={"period": "2026-11"}).json()
    assert whole["scope"] == {} and whole["whole_site"] and whole["record"]
    assert whole["scope_text"] == "whole site, 2026-11"
    room = api.post("/reviews", json={"period": "2026-11", "parameters": {"rooms": ["RAD1"]}})
    assert room.status_code == 201, room.text
    assert room.json()["scope"] == {"rooms": ["RAD1"]}
    assert not room.json()["whole_site"] and not room.json()["record"]
    assert room.json()["scope_text"] == "room RAD1, 2026-11"
    ranged = api.post("/reviews", json={"period": "2026-10-15/2026-12-01"}).json()
    assert ranged["whole_site"] and not ranged["record"]
    assert ranged["scope_text"] == "whole site, 2026-10-15 to 2026-11-30"
    assert (ranged["period_start"], ranged["period_end"]) == ("2026-10-15", "2026-12-01")
    listed = {r["id"]: r["record"] for r in api.get("/reviews", as_="viewer").json()["items"]}
    assert listed == {whole["id"]: True, room.json()["id"]: False, ranged["id"]: False}


def test_unknown_room_or_exam_type_is_404_naming_the_closest_and_stores_nothing(
    api, november
) -> None:
    for parameters, closest in (
        ({"rooms": ["RAD 1"]}, "RAD1"),
        ({"exam_types": ["chest_pq"]}, "chest_pa"),
        ({"sites": ["Holowbrook General (invented)"]}, "Hollowbrook General (invented)"),
    ):
        r = api.post("/reviews", json={"period": "2026-11", "parameters": parameters})
        assert r.status_code == 404, r.text
        assert closest in r.json()["detail"]
    assert api.get("/reviews").json()["items"] == []


def test_a_period_without_events_is_refused_and_stores_nothing(api, november) -> None:
    r = api.post("/reviews", json={"period": "2026-12"})
    assert r.status_code == 409, r.text
    assert "no events" in r.json()["detail"] and "2026-12" in r.json()["detail"]
    assert api.get("/reviews").json()["items"] == []


def test_admin_supersedes_and_deletes_runs_and_both_are_audited(api, november) -> None:
    first = api.post("/reviews", json={"period": "2026-11"}).json()["id"]
    second = api.post("/reviews", json={"period": "2026-11"}).json()["id"]
    assert api.get(f"/reviews/{second}").json()["record"]
    reason = {"reason": "run before the corrected local levels were imported"}
    assert api.post(f"/reviews/{second}/supersede", json=reason, as_="physicist").status_code == 403
    assert api.post(f"/reviews/{second}/supersede", json={}).status_code == 422
    superseded = api.post(f"/reviews/{second}/supersede", json=reason)
    assert superseded.status_code == 200, superseded.text
    body = superseded.json()
    assert body["superseded_at"] and not body["record"]
    assert body["superseded_by"].startswith(f"token:{api.token_ids['admin']}")
    assert api.get(f"/reviews/{first}").json()["record"]  # the earlier run is the record again
    assert api.post(f"/reviews/{second}/supersede", json=reason).status_code == 409
    n_flags = len(api.get(f"/reviews/{first}/flags").json())
    assert n_flags > 0
    assert api.delete(f"/reviews/{first}", as_="physicist").status_code == 403
    assert api.delete(f"/reviews/{first}").status_code == 422  # a reason is required
    gone = api.delete(f"/reviews/{first}", params={"reason": "a test run"})
    assert gone.status_code == 204, gone.text
    assert api.get(f"/reviews/{first}").status_code == 404
    assert api.get(f"/reviews/{first}/flags").status_code == 404
    log = api.get("/audit-log", params={"entity": "review_run"}).json()["items"]
    actions = {(e["action"], e["entity_id"]) for e in log}
    assert {("supersede", str(second)), ("delete", str(first))} <= actions
    deleted = next(e for e in log if e["action"] == "delete")
    assert deleted["before"]["n_flags"] == n_flags and deleted["after"] == {"reason": "a test run"}
