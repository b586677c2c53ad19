"""Exams and exposure events: filters, cursor pages, one event's breakdown, roles."""

from __future__ import annotations

from datetime import datetime

import pytest
from api_support import parse_result, seed, stored_run, validation_only
from sqlalchemy import update

from beamaudit.api.store import models as m


@pytest.fixture
def events(api):
    """Three studies in two rooms over two months; the first event has a reconstruction."""
    ids = seed(
        api.store,
        [
            parse_result(
                "1.2.3.1", study="1.2.3.100", station="RAD1", when=datetime(2026, 10, 5, 8)
            ),
            parse_result(
                "1.2.3.2",
                study="1.2.3.200",
                station="RAD2",
                when=datetime(2026, 11, 3, 9),
                n_events=2,
            ),
            parse_result(
                "1.2.3.3",
                study="1.2.3.300",
                station="RAD1",
                when=datetime(2026, 11, 20, 16),
                modality="CR",
            ),
        ],
    )
    with api.store.session_factory.begin() as s:
        s.execute(
            update(m.ExposureEventRow)
            .where(m.ExposureEventRow.id == ids[0])
            .values(
                recon_status="ok",
                recon_dap_gy_cm2=0.10,
                recon_dap_u_gy_cm2=0.02,
                recon_hvl1_mm_al=3.0,
                hvl_mm_al=3.3,
                recon_esak_mgy=0.5,
                dap_ratio_reported_to_recon=1.2,
                recon_trail={
                    "steps": [{"name": "incident air kerma", "equation": "inverse-square law"}]
                },
            )
        )
    return ids


def test_list_events_newest_first_with_study_and_room(api, events) -> None:
    body = api.get("/events", as_="physicist").json()
    assert [e["id"] for e in body["items"]] == sorted(events, reverse=True)
    assert body["next_cursor"] is None


def test_cursor_pages_cover_every_event_once(api, events) -> None:
    seen, cursor = [], None
    while True:
        params = {"limit": 1} | ({"cursor": cursor} if cursor else {})
        body = api.get("/events", params=params, as_="physicist").json()
        seen += [e["id"] for e in body["items"]]
        cursor = body["next_cursor"]
        if cursor is None:
            break
    assert sorted(seen) == sorted(events) and len(seen) == len(set(seen))


@pytest.mark.parametrize(
    ("params", "expected"),
    [
        ({"period": "2026-11"}, [1, 2, 3]),
        ({"period": "2026-10"}, [0]),
        ({"from": "2026-11-03", "to": "2026-11-03"}, [1, 2]),
        ({"from": "2026-11-04"}, [3]),
        ({"modality": "CR"}, [3]),
        ({"period": "2026-11", "modality": "DX"}, [1, 2]),
    ],
)
def test_event_filters(api, events, params, expected) -> None:
    body = api.get("/events", params=params, as_="physicist").json()
    assert sorted(e["id"] for e in body["items"]) == [events[i] for i in expected]


def test_room_site_and_device_filters(api, events) -> None:
    rooms = {r["name"]: r for r in api.get("/rooms").json()}
    rad1 = rooms["RAD1"]["id"]
    by_room = api.get("/events", params={"room_id": rad1}, as_="physicist").json()["items"]
    assert sorted(e["id"] for e in by_room) == [events[0], events[3]]
    site = rooms["RAD1"]["site_id"]
    assert len(api.get("/events", params={"site_id": site}).json()["items"]) == 4
    device = by_room[0]["device_id"]
    by_device = api.get("/events", params={"device_id": device}).json()["items"]
    assert {e["room_id"] for e in by_device} == {rad1}


def test_flag_filter_finds_flagged_events(api, events) -> None:
    flag = {
        "kind": "dap_ratio",
        "severity": "warning",
        "reason": "reported DAP 20 % above reconstruction",
        "concerns": {"event_id": events[0]},
    }
    stored_run(api.store, [flag])
    body = api.get("/events", params={"flag": "dap_ratio"}).json()
    assert [e["id"] for e in body["items"]] == [events[0]]
    exams = api.get("/exams", params={"flag": "dap_ratio"}).json()["items"]
    assert [x["study_instance_uid"] for x in exams] == ["1.2.3.100"]
    detail = api.get(f"/events/{events[0]}").json()
    assert [f["kind"] for f in detail["flags"]] == ["dap_ratio"]


def test_event_detail_puts_reported_beside_reconstructed(api, events) -> None:
    body = api.get(f"/events/{events[0]}", as_="physicist").json()
    assert body["study_instance_uid"] == "1.2.3.100"
    assert body["sop_instance_uid"] == "1.2.3.1"
    assert body["technique"]["kvp_kv"] == 81.0
    assert body["technique"]["filters"] == [{"material": "aluminium", "thickness_mm": 2.5}]
    assert body["reported"]["dap_gy_cm2"] == 0.12
    assert body["reconstructed"]["dap_gy_cm2"] == 0.10
    rows = {r["quantity"]: r for r in body["dose_breakdown"]}
    assert rows["dap_gy_cm2"] == {
        "quantity": "dap_gy_cm2",
        "unit": "Gy·cm²",
        "reported": 0.12,
        "reconstructed": 0.10,
        "reconstructed_uncertainty": 0.02,
        "ratio_reported_to_reconstructed": 1.2,
    }
    assert rows["hvl_mm_al"]["ratio_reported_to_reconstructed"] == pytest.approx(1.1)
    assert rows["esak_mgy"]["reported"] is None
    assert body["recon_trail"]["steps"][0]["equation"] == "inverse-square law"
    assert body["provenance"] == {"kvp_kv": "(0018,0060) KVP"}
    assert "estimate" in body["caution"]


def test_exam_list_and_detail(api, events) -> None:
    items = api.get("/exams", params={"period": "2026-11"}, as_="physicist").json()["items"]
    assert [x["study_instance_uid"] for x in items] == ["1.2.3.300", "1.2.3.200"]
    detail = api.get(f"/exams/{items[1]['id']}").json()
    assert [e["id"] for e in detail["events"]] == [events[1], events[2]]
    rooms = {r["name"]: r["id"] for r in api.get("/rooms").json()}
    by_room = api.get("/exams", params={"room_id": rooms["RAD2"]}).json()["items"]
    assert [x["study_instance_uid"] for x in by_room] == ["1.2.3.200"]


def test_viewer_reads_no_events_or_exams(api, events) -> None:
    for path in ("/events", f"/events/{events[0]}", "/exams"):
        response = api.get(path, as_="viewer")
        assert response.status_code == 403, path
        assert "physicist" in response.json()["detail"]


@pytest.mark.parametrize("path", ["/events/999999", "/exams/999999"])
def test_unknown_ids_are_404(api, path) -> None:
    assert api.get(path).status_code == 404


@validation_only
@pytest.mark.parametrize(
    ("params", "field"),
    [
        ({"cursor": "not-a-cursor"}, "cursor"),
        ({"limit": 501}, "limit"),
        ({"limit": 0}, "limit"),
        ({"period": "2026-13"}, "period"),
        ({"period": "2026-11", "from": "2026-11-01"}, "period"),
        ({"from": "2026-11-05", "to": "2026-11-01"}, "to"),
        ({"room_id": "x"}, "room_id"),
        ({"modality": "D\x00X"}, "modality"),
    ],
)
def test_bad_queries_are_422_naming_the_field(api, params, field) -> None:
    response = api.get("/events", params=params)
    assert response.status_code == 422
    assert field in [d["loc"][-1] for d in response.json()["detail"]]


def test_events_carry_study_and_sop_instance_uids_for_physicists_only(api, events) -> None:
    """A physicist traces a figure back to PACS by its UIDs; a viewer reads no event at all."""
    items = api.get("/events", as_="physicist").json()["items"]
    by_sop = {i["sop_instance_uid"]: i["study_instance_uid"] for i in items}
    assert by_sop == {"1.2.3.1": "1.2.3.100", "1.2.3.2": "1.2.3.200", "1.2.3.3": "1.2.3.300"}
    detail = api.get(f"/events/{events[0]}", as_="physicist").json()
    assert (detail["study_instance_uid"], detail["sop_instance_uid"]) == ("1.2.3.100", "1.2.3.1")
    assert api.get("/events", as_="viewer").status_code == 403
    assert api.get(f"/events/{events[0]}", as_="viewer").status_code == 403
