"""The routers of the REST API and the pages: a synchronous route's body in one worker thread.

FastAPI runs a synchronous route (``def``) in a worker thread, and then, because the route is
synchronous, checks its answer against the response model in a worker thread as well: two hops
from the event loop and back for every request, each a thread hand-over, besides those of the
synchronous dependencies. :class:`Router` registers a synchronous route as an ``async`` one whose
body runs in a worker thread (:func:`starlette.concurrency.run_in_threadpool`, the same pool,
so the same limit on threads): the blocking work (the database) still never runs in the event
loop, and the answer is checked and written there without another hop. The route's signature
(its parameters and their dependencies) is the wrapped function's, which FastAPI reads through
``__wrapped__``.

A route marked :func:`reads_only` (its body only reads the store: no write, no wait on a lock)
runs in the event loop itself when its session is on SQLite. A read of a local SQLite file is CPU
work, which holds the GIL in a worker thread as much as in the loop, so the thread bought nothing
but the hand-over there and back (with a wake-up of the loop each way). On PostgreSQL the same
route runs in a worker thread, since there the body waits for the server.
"""

from __future__ import annotations

import functools
import inspect
from collections.abc import Callable
from typing import Any

from fastapi import APIRouter
from sqlalchemy.orm import Session
from starlette.concurrency import run_in_threadpool

__all__ = ["Router", "body_in_worker_thread", "reads_only"]

_READS_ONLY = "__beamaudit_reads_only__"


def reads_only(endpoint: Callable[..., Any]) -> Callable[..., Any]:
    """Mark a synchronous route whose body only reads the store (it writes nothing and waits
    on no lock): on SQLite :class:`Router` runs it in the event loop. Put it under the route's
    decorator (the router must see the mark)."""
    if inspect.iscoroutinefunction(endpoint):
        raise TypeError(f"{endpoint.__name__} is async: it runs in the event loop already")
    setattr(endpoint, _READS_ONLY, True)
    return endpoint


def _on_sqlite(values: dict[str, Any]) -> bool:
    return any(
        isinstance(v, Session) and v.get_bind().dialect.name == "sqlite" for v in values.values()
    )


def body_in_worker_thread(endpoint: Callable[..., Any]) -> Callable[..., Any]:
    """An ``async`` endpoint that runs the synchronous ``endpoint`` in a worker thread."""

    @functools.wraps(endpoint)
    async def in_worker_thread(*args: Any, **kwargs: Any) -> Any:
        return await run_in_threadpool(endpoint, *args, **kwargs)

    return in_worker_thread


def body_in_loop_on_sqlite(endpoint: Callable[..., Any]) -> Callable[..., Any]:
    """An ``async`` endpoint that runs the synchronous ``endpoint`` in the event loop when one
    of its arguments is a session on SQLite, else in a worker thread."""

    @functools.wraps(endpoint)
    async def in_loop_on_sqlite(*args: Any, **kwargs: Any) -> Any:
        if _on_sqlite(kwargs):
            return endpoint(*args, **kwargs)
        return await run_in_threadpool(endpoint, *args, **kwargs)

    return in_loop_on_sqlite


class Router(APIRouter):
    """An :class:`~fastapi.APIRouter` whose synchronous routes run their body in one worker
    thread (:func:`body_in_worker_thread`), or, marked :func:`reads_only`, in the event loop on
    SQLite (:func:`body_in_loop_on_sqlite`); ``async`` routes are added as they are."""

    def add_api_route(self, path: str, endpoint: Callable[..., Any], **kwargs: Any) -> None:
        if getattr(endpoint, _READS_ONLY, False):
            endpoint = body_in_loop_on_sqlite(endpoint)
        elif not inspect.iscoroutinefunction(endpoint):
            endpoint = body_in_worker_thread(endpoint)
        super().add_api_route(path, endpoint, **kwargs)
