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
"""

from __future__ import annotations

import functools
import inspect
from collections.abc import Callable
from typing import Any

from fastapi import APIRouter
from starlette.concurrency import run_in_threadpool

__all__ = ["Router", "body_in_worker_thread"]


def body_in_worker_thread(endpoint: Callable[..., Any]) -> Callable[..., Any]:
    """An ``async`` endpoint that runs the synchronous ``endpoint`` in a worker thread."""

    @functools.wraps(endpoint)
    async def in_worker_thread(*args: Any, **kwargs: Any) -> Any:
        return await run_in_threadpool(endpoint, *args, **kwargs)

    return in_worker_thread


class Router(APIRouter):
    """An :class:`~fastapi.APIRouter` whose synchronous routes run their body in one worker
    thread (:func:`body_in_worker_thread`); ``async`` routes are added as they are."""

    def add_api_route(self, path: str, endpoint: Callable[..., Any], **kwargs: Any) -> None:
        if not inspect.iscoroutinefunction(endpoint):
            endpoint = body_in_worker_thread(endpoint)
        super().add_api_route(path, endpoint, **kwargs)
