"""Sites, rooms (beam configuration), devices: reads, changes, the audit log, roles."""

from __future__ import annotations

import pytest
from api_support import parse_result, seed, validation_only
from sqlalchemy import select

from beamaudit.api.store import models as m


@pytest.fixture
def room(api):
    seed(api.store, [parse_result("1.2.4.1", station="RAD1", n_events=2)])
    return api.get("/rooms").json()[0]


def audit_entries(api, entity):
    with api.store.session_factory() as s:
        return list(
            s.scalars(
                select(m.AuditLogEntry)
                .where(m.AuditLogEntry.entity == entity)
                .order_by(m.AuditLogEntry.id)  # PostgreSQL returns rows in no set order
            )
        )


def test_first_seen_device_has_a_default_room(api, room) -> None:
    assert room["name"] == "RAD1"
    assert room["anode_material"] == "tungsten"
    detail = api.get(f"/rooms/{room['id']}", as_="physicist").json()
    assert detail["site_name"] == "Hollowbrook General (invented)"
    assert [d["station_name"] for d in detail["devices"]] == ["RAD1"]
    assert detail["active_calibration"] is None


def test_update_beam_configuration_is_audited(api, room) -> None:
    change = {
        "anode_angle_deg": 10,
        "filtration": [
            {"material": "Al", "thickness_mm": 2.5},
            {"material": "copper", "thickness_mm": 0.1},
        ],
        "table_to_detector_mm": 40,
        "dap_ratio_tolerance": 0.25,
    }
    response = api.patch(f"/rooms/{room['id']}", json=change, as_="physicist")
    assert response.status_code == 200, response.text
    body = response.json()
    assert body["filtration"] == [
        {"material": "aluminium", "thickness_mm": 2.5},
        {"material": "copper", "thickness_mm": 0.1},
    ]
    assert body["anode_angle_deg"] == 10.0 and body["name"] == "RAD1"
    (entry,) = audit_entries(api, "room")
    assert entry.action == "update" and entry.entity_id == str(room["id"])
    assert entry.actor.startswith(f"token:{api.token_ids['physicist']}")
    assert entry.before["anode_angle_deg"] == 12.0 and entry.before["filtration"] is None
    assert entry.after["anode_angle_deg"] == 10.0
    assert entry.after["filtration"][1] == {"material": "copper", "thickness_mm": 0.1}


def test_unchanged_update_writes_no_audit_entry(api, room) -> None:
    assert api.patch(f"/rooms/{room['id']}", json={"name": "RAD1"}).status_code == 200
    assert audit_entries(api, "room") == []


@validation_only
@pytest.mark.parametrize(
    ("change", "field"),
    [
        ({"anode_angle_deg": 0}, "anode_angle_deg"),
        ({"anode_angle_deg": None}, "anode_angle_deg"),
        ({"ripple_percent": 101}, "ripple_percent"),
        ({"anode_material": "unobtainium"}, "anode_material"),
        ({"filtration": [{"material": "cheese", "thickness_mm": 1}]}, "material"),
        ({"filtration": [{"material": "Al", "thickness_mm": -1}]}, "thickness_mm"),
        ({"name": ""}, "name"),
        ({"colour": "blue"}, "colour"),
    ],
)
def test_bad_room_changes_are_422_naming_the_field(api, room, change, field) -> None:
    response = api.patch(f"/rooms/{room['id']}", json=change)
    assert response.status_code == 422
    assert field in [str(p) for d in response.json()["detail"] for p in d["loc"]]
    assert audit_entries(api, "room") == []


def test_create_site_and_room_then_move_the_device(api, room) -> None:
    site = api.post("/sites", json={"name": "Eastmoor Clinic (invented)"}, as_="physicist")
    assert site.status_code == 201
    new_room = api.post(
        "/rooms", json={"site_id": site.json()["id"], "name": "DR 2", "modality": "DX"}
    )
    assert new_room.status_code == 201
    device = api.get("/devices", params={"room_id": room["id"]}).json()[0]
    moved = api.patch(
        f"/devices/{device['id']}", json={"room_id": new_room.json()["id"]}, as_="physicist"
    )
    assert moved.status_code == 200 and moved.json()["room_id"] == new_room.json()["id"]
    events = api.get("/events", params={"room_id": new_room.json()["id"]}).json()["items"]
    assert len(events) == 2
    (entry,) = audit_entries(api, "device")
    assert entry.before == {"room_id": room["id"]}
    assert entry.after == {"room_id": new_room.json()["id"], "events_moved": 2}
    assert [e.action for e in audit_entries(api, "site")] == ["create"]


def test_duplicate_names_are_409(api, room) -> None:
    assert api.post("/sites", json={"name": "Hollowbrook General (invented)"}).status_code == 409
    other = api.post("/rooms", json={"site_id": room["site_id"], "name": "RAD2"}).json()
    assert api.patch(f"/rooms/{other['id']}", json={"name": "RAD1"}).status_code == 409


def test_viewer_cannot_read_or_change_rooms(api, room) -> None:
    assert api.get("/rooms", as_="viewer").status_code == 403
    assert api.patch(f"/rooms/{room['id']}", json={"name": "X"}, as_="viewer").status_code == 403


@pytest.mark.parametrize(
    ("method", "path", "body"),
    [
        ("GET", "/rooms/424242", None),
        ("PATCH", "/rooms/424242", {"name": "X"}),
        ("GET", "/devices/424242", None),
        ("PATCH", "/devices/424242", {"room_id": 1}),
        ("POST", "/rooms", {"site_id": 424242, "name": "X"}),
    ],
)
def test_unknown_ids_are_404(api, method, path, body) -> None:
    assert api.request(method, path, json=body).status_code == 404
