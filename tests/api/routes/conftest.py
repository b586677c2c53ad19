"""Fixtures of the REST API tests: the app on each backend, a token per role, seeded events.

Migrating a store takes seconds on PostgreSQL, so these tests share one migrated store per backend
for the whole session (``shared_store``, built like the suite's ``store`` fixture: SQLite always,
PostgreSQL in a schema of its own, a failure when ``CI=true`` and it is missing) and empty every
table before each test.
"""

from __future__ import annotations

import uuid
from collections.abc import Iterator
from dataclasses import dataclass, field
from datetime import datetime
from typing import Any

import httpx
import pytest
from conftest import StoreHandle, _postgres_url
from fastapi.testclient import TestClient
from sqlalchemy import delete, text

from beamaudit.api.app import create_app
from beamaudit.api.auth import create_token
from beamaudit.api.pipeline import Pipeline
from beamaudit.api.settings import load
from beamaudit.api.store import Base, make_engine, make_session_factory, upgrade
from beamaudit.ingest.events import ExposureEvent, FilterLayer, ParseResult, SourceObject

PREFIX = "/api/v1"
ROLES = ("viewer", "physicist", "admin")

DX_IMAGE = "1.2.840.10008.5.1.4.1.1.1.1"  # Digital X-Ray Image Storage - For Presentation (PS3.4)
XRAY_RDSR = "1.2.840.10008.5.1.4.1.1.88.67"  # X-Ray Radiation Dose SR Storage (PS3.4)


@dataclass
class Api:
    """A test client that speaks as one of the three roles (``as_=None``: no token)."""

    client: TestClient
    store: Any
    tokens: dict[str, str]
    token_ids: dict[str, int] = field(default_factory=dict)

    def headers(self, as_: str | None) -> dict[str, str]:
        return {} if as_ is None else {"Authorization": f"Bearer {self.tokens[as_]}"}

    def request(
        self, method: str, path: str, *, as_: str | None = "admin", **kw: Any
    ) -> httpx.Response:
        headers = {**self.headers(as_), **kw.pop("headers", {})}
        return self.client.request(method, PREFIX + path, headers=headers, **kw)

    def get(self, path: str, **kw: Any) -> httpx.Response:
        return self.request("GET", path, **kw)

    def post(self, path: str, **kw: Any) -> httpx.Response:
        return self.request("POST", path, **kw)

    def patch(self, path: str, **kw: Any) -> httpx.Response:
        return self.request("PATCH", path, **kw)

    def put(self, path: str, **kw: Any) -> httpx.Response:
        return self.request("PUT", path, **kw)

    def delete(self, path: str, **kw: Any) -> httpx.Response:
        return self.request("DELETE", path, **kw)


def make_api(store: Any, tmp_path: Any, **settings: Any) -> Iterator[Api]:
    app = create_app(
        load(database_url=store.url, secret_key_path=tmp_path / "pseudonym.key", **settings),
        engine=store.engine,
    )
    tokens: dict[str, str] = {}
    ids: dict[str, int] = {}
    with store.session_factory.begin() as session:
        for role in ROLES:
            ids[role], tokens[role] = create_token(
                session, role=role, name=f"test {role}", actor="test"
            )
    with TestClient(app) as client:
        yield Api(client, store, tokens, ids)


@pytest.fixture(
    scope="session", params=["sqlite", pytest.param("postgresql", marks=pytest.mark.postgres)]
)
def shared_store(
    request: pytest.FixtureRequest, tmp_path_factory: pytest.TempPathFactory
) -> Iterator[StoreHandle]:
    """One migrated store per backend for the whole session."""
    if request.param == "sqlite":
        url = f"sqlite:///{tmp_path_factory.mktemp('api') / 'store.db'}"
        engine = make_engine(url)
        upgrade(engine)
        yield StoreHandle("sqlite", url, engine, make_session_factory(engine), {})
        engine.dispose()
        return
    base_url = _postgres_url()
    assert base_url is not None
    schema = f"t_api_{uuid.uuid4().hex[:10]}"
    admin = make_engine(base_url)
    with admin.begin() as conn:
        conn.execute(text(f'CREATE SCHEMA "{schema}"'))
    options = {"options": f"-csearch_path={schema}"}
    engine = make_engine(base_url, connect_args={"connect_timeout": 10, **options})
    try:
        upgrade(engine)
        yield StoreHandle("postgresql", base_url, engine, make_session_factory(engine), options)
    finally:
        engine.dispose()
        with admin.begin() as conn:
            conn.execute(text(f'DROP SCHEMA "{schema}" CASCADE'))
        admin.dispose()


def empty_store(store: StoreHandle) -> None:
    """Delete every row of every table (children first); the schema stays migrated."""
    with store.session_factory.begin() as session:
        for table in reversed(Base.metadata.sorted_tables):
            session.execute(delete(table))


@pytest.fixture
def api(shared_store: StoreHandle, tmp_path: Any) -> Iterator[Api]:
    """The app on an emptied store of each backend, with one token per role."""
    empty_store(shared_store)
    yield from make_api(shared_store, tmp_path)


def parse_result(
    sop: str,
    *,
    study: str = "1.2.826.0.1.3680043.8.498.100",
    kind: str = "image_header",
    modality: str = "DX",
    station: str = "RAD1",
    when: datetime = datetime(2026, 11, 3, 9, 30),
    n_events: int = 1,
    **event_fields: Any,
) -> ParseResult:
    """An invented parsed object (demo data: names and values are made up)."""
    sop_class = DX_IMAGE if kind == "image_header" else XRAY_RDSR
    src = SourceObject(
        sop_instance_uid=sop,
        sop_class_uid=sop_class,
        kind=kind,  # type: ignore[arg-type]
        modality=modality,
        study_instance_uid=study,
    )
    events = [
        ExposureEvent(
            event_key=f"{sop}#{i}",
            sop_instance_uid=sop,
            sop_class_uid=sop_class,
            source_kind=kind,  # type: ignore[arg-type]
            event_index=i,
            modality=modality,
            study_instance_uid=study,
            station_name=station,
            manufacturer="Invented Medical",
            model_name="Model R",
            device_serial_number=f"SN-{station}",
            institution_name="Hollowbrook General (invented)",
            study_datetime=when,
            event_datetime=when,
            patient_pseudo_id="0123456789abcdef0123456789abcdef",
            patient_weight_kg=72.0,
            kvp_kv=81.0,
            exposure_mas=10.0,
            filters=(FilterLayer("aluminium", 2.5),),
            dap_gy_cm2=0.12,
            provenance={"kvp_kv": "(0018,0060) KVP"},
            **event_fields,
        )
        for i in range(n_events)
    ]
    return ParseResult(source=src, events=events)


def seed(store: Any, results: list[ParseResult]) -> list[int]:
    """Store ``results`` through the real pipeline; returns the new event ids."""
    pipeline = Pipeline(store.session_factory)
    ids: list[int] = []
    for result in results:
        outcome = pipeline.store(result, received_via="demo")
        assert outcome.status == "stored", outcome
        ids.extend(outcome.event_ids)
    return ids
