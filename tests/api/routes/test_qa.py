"""QA measurements and room calibrations through the API, checked against the model itself."""

from __future__ import annotations

import pytest
from api_support import parse_result, seed, validation_only

from beamaudit.model.calibration import QAMeasurement, calibrate_room
from beamaudit.model.filtration import FilterSpec

# Invented QA results of a radiographic room (demo values, in the range of a typical tube).
MEASUREMENTS = [
    {"measured_on": "2026-09-01", "kvp_kv": 60, "distance_mm": 1000, "output_ugy_per_mas": 25.0},
    {"measured_on": "2026-09-01", "kvp_kv": 80, "distance_mm": 1000, "output_ugy_per_mas": 45.0},
    {"measured_on": "2026-09-01", "kvp_kv": 100, "distance_mm": 1000, "output_ugy_per_mas": 70.0},
]


@pytest.fixture
def room_id(api):
    seed(api.store, [parse_result("1.2.5.1")])
    return api.get("/rooms").json()[0]["id"]


def test_measurements_round_trip(api, room_id) -> None:
    for body in MEASUREMENTS:
        response = api.post(f"/rooms/{room_id}/qa-measurements", json=body, as_="physicist")
        assert response.status_code == 201, response.text
    listed = api.get(f"/rooms/{room_id}/qa-measurements").json()
    assert sorted(x["kvp_kv"] for x in listed) == [60.0, 80.0, 100.0]


def test_calibration_is_the_models_fit_and_becomes_active(api, room_id) -> None:
    ids = [api.post(f"/rooms/{room_id}/qa-measurements", json=b).json()["id"] for b in MEASUREMENTS]
    response = api.post(f"/rooms/{room_id}/calibrations", json={}, as_="physicist")
    assert response.status_code == 201, response.text
    body = response.json()
    expected = calibrate_room(
        [
            QAMeasurement(
                kv=b["kvp_kv"],
                filters=None,
                distance_mm=1000,
                measured_output_ugy_per_mas=b["output_ugy_per_mas"],
            )
            for b in MEASUREMENTS
        ]
    )
    assert body["output_scale"] == pytest.approx(expected.output_scale, rel=1e-12)
    assert body["inherent_filtration_mm_al"] is None
    assert body["n_measurements"] == 3 and body["active"] is True
    assert len(body["residuals"]) == 3
    room = api.get(f"/rooms/{room_id}").json()
    assert room["active_calibration"]["id"] == body["id"]
    # a second fit on one measurement replaces it as the active one
    second = api.post(f"/rooms/{room_id}/calibrations", json={"measurement_ids": ids[:1]}).json()
    listed = api.get(f"/rooms/{room_id}/calibrations").json()
    assert [(c["id"], c["active"]) for c in listed] == [(second["id"], True), (body["id"], False)]
    back = api.patch(f"/rooms/{room_id}/calibrations/{body['id']}", json={"active": True})
    assert back.status_code == 200
    assert api.get(f"/rooms/{room_id}").json()["active_calibration"]["id"] == body["id"]


def test_calibration_with_hvl_fits_inherent_filtration(api, room_id) -> None:
    for b, hvl in zip(MEASUREMENTS, (2.2, 3.0, 3.9), strict=True):
        api.post(
            f"/rooms/{room_id}/qa-measurements",
            json=b | {"hvl_mm_al": hvl, "filtration": [{"material": "Al", "thickness_mm": 1.0}]},
        )
    body = api.post(f"/rooms/{room_id}/calibrations", json={}).json()
    expected = calibrate_room(
        [
            QAMeasurement(
                kv=b["kvp_kv"],
                filters=(FilterSpec("Al", 1.0),),
                distance_mm=1000,
                measured_output_ugy_per_mas=b["output_ugy_per_mas"],
                measured_hvl_mm_al=h,
            )
            for b, h in zip(MEASUREMENTS, (2.2, 3.0, 3.9), strict=True)
        ]
    )
    assert body["inherent_filtration_mm_al"] == pytest.approx(
        expected.inherent_filtration_mm_al, rel=1e-9
    )


def test_calibration_without_measurements_is_422(api, room_id) -> None:
    response = api.post(f"/rooms/{room_id}/calibrations", json={})
    assert response.status_code == 422
    assert response.json()["detail"][0]["loc"] == ["body", "measurement_ids"]


def test_measurement_of_another_room_is_422(api, room_id) -> None:
    other = api.post(
        "/rooms", json={"site_id": api.get("/sites").json()[0]["id"], "name": "RAD9"}
    ).json()
    mid = api.post(f"/rooms/{other['id']}/qa-measurements", json=MEASUREMENTS[0]).json()["id"]
    response = api.post(f"/rooms/{room_id}/calibrations", json={"measurement_ids": [mid]})
    assert response.status_code == 422
    assert api.delete(f"/rooms/{room_id}/qa-measurements/{mid}").status_code == 404
    assert api.delete(f"/rooms/{other['id']}/qa-measurements/{mid}").status_code == 204


@validation_only
@pytest.mark.parametrize(
    ("change", "field"),
    [
        ({"kvp_kv": 180}, "kvp_kv"),  # ARCHITECTURE.md: outside 20-150 kV is rejected
        ({"output_ugy_per_mas": 0}, "output_ugy_per_mas"),
        ({"distance_mm": -5}, "distance_mm"),
        ({"measured_on": "0001-01-01"}, "measured_on"),
        ({"hvl_mm_al": 0}, "hvl_mm_al"),
    ],
)
def test_bad_measurements_are_422(api, room_id, change, field) -> None:
    response = api.post(f"/rooms/{room_id}/qa-measurements", json=MEASUREMENTS[0] | change)
    assert response.status_code == 422
    assert field in [d["loc"][-1] for d in response.json()["detail"]]


def test_viewer_cannot_add_measurements(api, room_id) -> None:
    response = api.post(f"/rooms/{room_id}/qa-measurements", json=MEASUREMENTS[0], as_="viewer")
    assert response.status_code == 403
