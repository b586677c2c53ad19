"""Helpers of the REST API tests: a client that speaks as a role, invented parsed objects."""

from __future__ import annotations

from collections.abc import Iterator
from dataclasses import dataclass, field
from datetime import datetime
from typing import Any

import httpx
import pytest
from fastapi.testclient import TestClient

from beamaudit.api.intake.pipeline import Pipeline
from beamaudit.api.settings import load
from beamaudit.api.store.auth import create_token
from beamaudit.api.web.app import create_app
from beamaudit.ingest.events import ExposureEvent, FilterLayer, ParseResult, SourceObject

PREFIX = "/api/v1"
ROLES = ("viewer", "physicist", "admin")

DX_IMAGE = "1.2.840.10008.5.1.4.1.1.1.1"  # Digital X-Ray Image Storage - For Presentation (PS3.4)
XRAY_RDSR = "1.2.840.10008.5.1.4.1.1.88.67"  # X-Ray Radiation Dose SR Storage (PS3.4)


@dataclass
class StoreHandle:
    """A migrated store: its URL, engine and session factory (as the suite's ``store`` fixture)."""

    backend: str
    url: str
    engine: Any
    session_factory: Any
    connect_args: dict[str, object]


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
    settings.setdefault("notify", {"outbox": tmp_path / "outbox.jsonl"})  # digests stay here
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


#: invented technique and dose of the parsed objects (demo values)
DEFAULT_EVENT_FIELDS: dict[str, Any] = {
    "patient_pseudo_id": "0123456789abcdef0123456789abcdef",
    "patient_weight_kg": 72.0,
    "kvp_kv": 81.0,
    "exposure_mas": 10.0,
    "filters": (FilterLayer("aluminium", 2.5),),
    "dap_gy_cm2": 0.12,
    "provenance": {"kvp_kv": "(0018,0060) KVP"},
}


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
            **(DEFAULT_EVENT_FIELDS | event_fields),
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


#: for tests of request validation only, which answers before any SQL is sent: SQLite suffices
validation_only = pytest.mark.parametrize("shared_store", ["sqlite"], indirect=True)


def stored_run(store: Any, flags: list[dict[str, Any]], **fields: Any) -> int:
    """A review run of November 2026 stored as the review stores one (``fields`` over the
    defaults), with ``flags`` (the core's JSON) as occurrences of their findings; its id."""
    from datetime import date

    from beamaudit.api.runs.findings import store_flags
    from beamaudit.api.store import models as m

    with store.session_factory.begin() as session:
        run = m.ReviewRun(
            **{
                "kind": "monthly",
                "period": "2026-11",
                "period_start": date(2026, 11, 1),
                "period_end": date(2026, 12, 1),
                "software_version": "test",
                **fields,
            }
        )
        session.add(run)
        session.flush()
        store_flags(session, run, flags)
        return run.id
