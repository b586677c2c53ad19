"""The REST API's routes under ``/api/v1``, one module per resource.

:func:`include_api_routes` adds them to the app; :data:`ROUTE_MODULES` lists them in the order the
schema shows them, which is the order a request is matched in: the routes most requests go to
(events and exams, ingest errors, uploads) first. FastAPI tries each route in turn, at several
microseconds a route; an upload once went through some sixty routes before its own.
"""

from __future__ import annotations

import importlib

from fastapi import FastAPI

__all__ = ["ROUTE_MODULES", "include_api_routes"]

#: route modules of this package, each with a module-level ``router``
ROUTE_MODULES = (
    "events",
    "ingest",
    "upload",
    "skin",
    "rooms",
    "qa",
    "catalogue",
    "levels",
    "local_levels",
    "reviews",
    "sources",
    "admin",
)


def include_api_routes(app: FastAPI, *, prefix: str) -> None:
    """Each route module's router included in ``app`` under ``prefix``, one level deep (a request
    is matched against one list of routers, not a router of routers)."""
    for name in ROUTE_MODULES:
        module = importlib.import_module(f"beamaudit.api.web.routes.{name}")
        app.include_router(module.router, prefix=prefix)
