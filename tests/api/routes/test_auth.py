"""Every route answers 401 without a valid token and 403 to a too-low role (the route list comes
from the app itself, so a new route cannot escape), and every operation has a stable id."""

from __future__ import annotations

import re

import pytest

from beamaudit.api.store.auth import ROLES
from beamaudit.api.web.routes.openapi import ApiOperation, api_operations

PUBLIC = {("GET", "/api/v1/health")}


def _url(op: ApiOperation) -> str:
    url = op.path
    for param in op.route.dependant.path_params:
        value = "1" if param.field_info.annotation is int else "x"
        url = url.replace("{" + param.name + "}", value)
    return url


def _operations(api) -> list[ApiOperation]:
    ops = [op for op in api_operations(api.client.app) if op.path.startswith("/api/v1/")]
    assert len(ops) > 20  # the flattening found the included routers
    return ops


@pytest.mark.parametrize(
    "headers",
    [
        {},
        {"Authorization": "Bearer bat_not-a-token"},
        {"Authorization": "Basic dXNlcjpwYXNz"},
        {"Cookie": "beamaudit_session=bat_forged"},
    ],
    ids=["none", "unknown", "basic", "cookie"],
)
def test_every_route_but_health_needs_a_valid_token(api, headers) -> None:
    for op in _operations(api):
        if op.path.startswith("/api/v1/docs"):
            continue
        response = api.client.request(op.method, _url(op), headers=headers)
        if (op.method, op.path) in PUBLIC:
            assert response.status_code == 200, op
            continue
        assert op.role is not None, f"{op.method} {op.path} checks no role"
        assert response.status_code == 401, (op.method, op.path, response.status_code)
        assert response.headers["www-authenticate"] == "Bearer"


def test_too_low_roles_get_403(api) -> None:
    checked = 0
    for op in _operations(api):
        if op.role is None:
            continue
        for role in ROLES[: ROLES.index(op.role)]:
            response = api.client.request(op.method, _url(op), headers=api.headers(role))
            assert response.status_code == 403, (role, op.method, op.path, response.status_code)
            assert op.role in response.json()["detail"]
            checked += 1
    assert checked > 20


def test_revoked_token_is_401(api) -> None:
    assert api.get("/tokens").status_code == 200
    assert api.post(f"/tokens/{api.token_ids['viewer']}/revoke").status_code == 200
    assert api.get("/tokens", as_="viewer").status_code == 401


def test_session_cookie_authenticates(api) -> None:
    signed_in = api.client.post(
        "/login", data={"token": api.tokens["physicist"]}, follow_redirects=False
    )
    assert signed_in.status_code == 303
    try:
        assert api.get("/rooms", as_=None).status_code == 200
    finally:
        api.client.cookies.clear()


def test_operation_ids_are_explicit_unique_and_snake_case(api) -> None:
    schema = api.client.get("/api/v1/openapi.json").json()
    ids = [op["operationId"] for item in schema["paths"].values() for op in item.values()]
    assert len(ids) == len(set(ids))
    assert all(re.fullmatch(r"[a-z]+(_[a-z0-9]+)*", i) for i in ids), ids
    for op in _operations(api):
        if op.route.include_in_schema:
            assert op.route.operation_id, f"{op.method} {op.path} has no explicit operation_id"


def test_schema_states_each_operations_role(api) -> None:
    schema = api.client.get("/api/v1/openapi.json").json()
    assert schema["components"]["securitySchemes"]["bearerToken"]["scheme"] == "bearer"
    events = schema["paths"]["/api/v1/events"]["get"]
    assert events["x-required-role"] == "physicist"
    assert events["security"] == [{"bearerToken": []}]
    assert "security" not in schema["paths"]["/api/v1/health"]["get"]


def test_malformed_body_is_401_without_a_token_and_403_to_a_too_low_role(api) -> None:
    # FastAPI decodes a JSON body before the token is checked; the answer must still be 401/403
    garbage = {"content": b"{not json", "headers": {"Content-Type": "application/json"}}
    assert api.post("/sites", as_=None, **garbage).status_code == 401
    assert api.post("/sites", as_="viewer", **garbage).status_code == 403
    response = api.post("/sites", as_="physicist", **garbage)
    assert response.status_code == 422 and response.json()["detail"][0]["type"] == "json_invalid"
