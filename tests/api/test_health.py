"""``GET /api/v1/health`` on both backends, and with the database gone."""

from __future__ import annotations

from fastapi.testclient import TestClient

from beamaudit import __version__
from beamaudit.api.settings import load
from beamaudit.api.store import make_engine
from beamaudit.api.web.app import create_app


def test_health_ok(store) -> None:
    settings = load(database_url=store.url)
    with TestClient(create_app(settings, engine=store.engine)) as client:
        response = client.get("/api/v1/health")
    assert response.status_code == 200
    assert response.json() == {"status": "ok", "version": __version__, "database": store.backend}


def test_health_503_when_database_is_down() -> None:
    url = "postgresql+psycopg://nobody@127.0.0.1:1/none"
    settings = load(database_url=url)
    with TestClient(create_app(settings, engine=make_engine(url))) as client:
        response = client.get("/api/v1/health")
    assert response.status_code == 503
    body = response.json()
    assert body["status"] == "unavailable"
    assert body["database"] == "postgresql"
    assert "cannot reach the database" in body["detail"]


def test_openapi_schema_is_served() -> None:
    settings = load(database_url="sqlite://")
    with TestClient(create_app(settings)) as client:
        schema = client.get("/api/v1/openapi.json").json()
    assert schema["paths"]["/api/v1/health"]["get"]["operationId"] == "get_health"


def test_cors_is_off_by_default_and_on_for_configured_origins() -> None:
    origin = {"Origin": "https://ward.example", "Access-Control-Request-Method": "GET"}
    with TestClient(create_app(load(database_url="sqlite://"))) as client:
        r = client.options("/api/v1/health", headers=origin)
        assert "access-control-allow-origin" not in r.headers
    settings = load(database_url="sqlite://", api={"cors_origins": ["https://ward.example"]})
    with TestClient(create_app(settings)) as client:
        r = client.options("/api/v1/health", headers=origin)
        assert r.headers["access-control-allow-origin"] == "https://ward.example"
