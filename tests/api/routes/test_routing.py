"""How a request reaches its route's body: blocking work in one worker thread, never in the loop.

Before (issue #24): a synchronous route went to a worker thread for its body and again for the
check of its answer, and each synchronous dependency (the page and period parameters, the role
check, the session) took a hop of its own: seven or eight thread hand-overs for one list. The
loaded API then answered 0.37 of one client's health rate.
"""

from __future__ import annotations

import asyncio
import inspect
import threading
from typing import Any

import pytest
from api_support import make_api, validation_only
from fastapi import Depends, Request
from fastapi.routing import APIRoute, iter_route_contexts
from fastapi.testclient import TestClient
from sqlalchemy.orm import Session

from beamaudit.api.web.deps import get_principal, get_session, get_settings, require_role
from beamaudit.api.web.routes._common import get_session_factory, page_params, period_params
from beamaudit.api.web.routes.events import event_filters
from beamaudit.api.web.routing import Router


def test_every_route_body_runs_off_the_event_loop_in_one_hop(api) -> None:
    """Every route of the API and the pages is a coroutine for FastAPI: a synchronous body was
    wrapped to run in one worker thread, so the answer is checked in the loop, not in a
    second hop."""
    contexts = list(iter_route_contexts(api.client.app.routes))
    routes = [(c.path_format, c.original_route) for c in contexts]
    routes = [(path, r) for path, r in routes if isinstance(r, APIRoute)]
    assert len(routes) > 50 and any(path == "/flags" for path, _ in routes)  # pages too
    # the app's own few (no response model to check, so one hop already): health, docs, metrics
    own = {"/api/v1/health", "/api/v1/docs", "/api/v1/docs/{name}", "/metrics"}
    for path, route in routes:
        assert path in own or inspect.iscoroutinefunction(route.endpoint), path


def test_dependencies_without_blocking_work_run_in_the_loop() -> None:
    for dependency in (page_params, period_params, event_filters, get_settings,
                       get_session_factory, require_role("viewer"), get_principal):  # fmt: skip
        assert inspect.iscoroutinefunction(dependency), dependency
    assert inspect.isasyncgenfunction(get_session)


def test_a_synchronous_body_runs_in_a_worker_thread_with_its_dependencies() -> None:
    from fastapi import Depends, FastAPI

    seen: dict[str, Any] = {}

    async def loop_thread() -> int:
        return threading.get_ident()

    router = Router()

    @router.get("/where")
    def where(n: int, loop: int = Depends(loop_thread)) -> dict[str, Any]:
        seen["body"] = threading.get_ident()
        seen["loop"] = loop
        with pytest.raises(RuntimeError):  # no event loop runs in this thread
            asyncio.get_running_loop()
        return {"n": n * 2}

    app = FastAPI()
    app.include_router(router)
    with TestClient(app) as client:
        reply = client.get("/where", params={"n": 21})
        assert reply.status_code == 200 and reply.json() == {"n": 42}
        assert client.get("/where", params={"n": "x"}).status_code == 422  # still validated
    assert seen["body"] != seen["loop"]
    assert where.__name__ == "where"  # the decorator keeps the function itself


@validation_only
def test_the_worker_threads_setting_limits_the_loops_thread_pool(shared_store, tmp_path) -> None:
    import anyio.to_thread

    for api in make_api(shared_store, tmp_path, api={"worker_threads": 3}):
        app = api.client.app

        @app.get("/test-threads")
        async def threads() -> dict[str, float]:
            return {"tokens": anyio.to_thread.current_default_thread_limiter().total_tokens}

        assert api.client.get("/test-threads").json() == {"tokens": 3}
        assert api.get("/rooms").status_code == 200


def test_the_worker_threads_default_and_bounds() -> None:
    from pydantic import ValidationError

    from beamaudit.api.settings import ApiSettings

    assert ApiSettings().worker_threads == 8
    for bad in (0, 1000):
        with pytest.raises(ValidationError):
            ApiSettings(worker_threads=bad)


def test_a_read_only_body_runs_in_the_loop_on_sqlite_and_in_a_thread_on_postgresql(store) -> None:
    """A route marked reads_only, on SQLite, runs where its async dependencies ran (a local
    read is CPU work, which holds the GIL in a thread as well); on PostgreSQL, where the body
    waits for the server, in a worker thread."""
    from fastapi import FastAPI
    from sqlalchemy import text

    from beamaudit.api.web.routing import reads_only

    seen: dict[str, Any] = {}

    async def loop_thread() -> int:
        return threading.get_ident()

    def session() -> Any:
        with store.session_factory() as s:
            yield s

    router = Router()

    @router.get("/count")
    @reads_only
    def count(
        s: Session = Depends(session),  # noqa: B008 (local dependencies: not in the annotations)
        loop: int = Depends(loop_thread),
    ) -> dict[str, int]:
        seen["body"], seen["loop"] = threading.get_ident(), loop
        return {"n": int(s.execute(text("SELECT count(*) FROM exposure_events")).scalar_one())}

    app = FastAPI()
    app.include_router(router)
    with TestClient(app) as client:
        assert client.get("/count").json() == {"n": 0}
    assert (seen["body"] == seen["loop"]) is (store.backend == "sqlite")


def test_the_busiest_read_routes_are_marked_read_only_and_async_ones_cannot_be() -> None:
    from beamaudit.api.web.routes import events, ingest
    from beamaudit.api.web.routing import _READS_ONLY, reads_only

    for endpoint in (events.list_events, events.get_event, events.list_exams, events.get_exam,
                     ingest.list_ingest_errors, ingest.get_ingest_error):  # fmt: skip
        assert getattr(endpoint, _READS_ONLY, False), endpoint.__name__

    async def already_in_the_loop() -> None:
        return None

    with pytest.raises(TypeError):
        reads_only(already_in_the_loop)


def test_the_caller_is_read_in_the_loop_on_sqlite_and_its_use_noted_in_a_thread(
    store, monkeypatch: pytest.MonkeyPatch
) -> None:
    """The token is read where the async dependencies run on SQLite (in a worker thread on
    PostgreSQL); its last use, written at most once a minute, is noted in a worker thread."""
    from datetime import timedelta

    from fastapi import FastAPI
    from sqlalchemy import select

    from beamaudit.api.store import auth
    from beamaudit.api.store import models as m
    from beamaudit.api.web import deps

    with store.session_factory.begin() as s:
        _, token = auth.create_token(s, role="viewer", name="reader", actor="test")
    seen: dict[str, list[int]] = {"read": [], "noted": []}
    authenticate, note = auth.authenticate, auth.note_token_use

    def read(*args: Any, **kwargs: Any) -> Any:
        seen["read"].append(threading.get_ident())
        return authenticate(*args, **kwargs)

    def noted(*args: Any) -> None:
        seen["noted"].append(threading.get_ident())
        note(*args)

    monkeypatch.setattr(deps, "authenticate", read)
    monkeypatch.setattr(deps, "note_token_use", noted)

    async def loop_thread() -> int:
        return threading.get_ident()

    def session() -> Any:
        with store.session_factory() as s:
            yield s

    app = FastAPI()

    @app.get("/who")
    async def who(
        request: Request,
        s: Session = Depends(session),  # noqa: B008 (local dependencies: not in the annotations)
        loop: int = Depends(loop_thread),
    ) -> dict[str, Any]:
        principal = await deps.get_principal(request, s)
        return {"name": principal.name, "loop": loop}

    headers = {"Authorization": f"Bearer {token}"}
    with TestClient(app) as client:
        first = client.get("/who", headers=headers).json()
        client.get("/who", headers=headers)  # used again within the minute: nothing to note
        refused = client.get("/who", headers={"Authorization": "Bearer bat_x"})
        assert refused.status_code == 401, refused.text
    assert first["name"] == "reader"
    in_loop = [ident == first["loop"] for ident in seen["read"]]
    assert in_loop == [store.backend == "sqlite"] * 3
    with store.session_factory() as s:
        used = s.scalar(select(m.ApiToken.last_used_at).where(m.ApiToken.name == "reader"))
    assert used is not None and auth.utcnow() - used < timedelta(minutes=1)
    if store.backend == "sqlite":
        assert len(seen["noted"]) == 1 and seen["noted"][0] != first["loop"]
