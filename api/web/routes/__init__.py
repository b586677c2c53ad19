"""The REST API's routes under ``/api/v1``, one module per resource.

:func:`api_router` assembles them; :data:`ROUTE_MODULES` lists them in the order the schema shows
them.
"""

from __future__ import annotations

import importlib

from fastapi import APIRouter

__all__ = ["ROUTE_MODULES", "api_router"]

#: route modules of this package, each with a module-level ``router``
ROUTE_MODULES = (
    "events",
    "rooms",
    "qa",
    "catalogue",
    "levels",
    "local_levels",
    "reviews",
    "ingest",
    "upload",
    "sources",
    "admin",
)


def api_router() -> APIRouter:
    """One router holding every route module's routes (mount it under ``/api/v1``)."""
    router = APIRouter()
    for name in ROUTE_MODULES:
        module = importlib.import_module(f"beamaudit.api.web.routes.{name}")
        router.include_router(module.router)
    return router
