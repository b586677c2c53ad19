"""The web application: REST API under ``/api/v1`` and the dashboard pages.

Build it with :func:`create_app`; nothing happens at import time.
"""

from __future__ import annotations

from typing import Any

from fastapi import FastAPI
from fastapi.responses import JSONResponse
from sqlalchemy.engine import Engine

from beamaudit import __version__
from beamaudit.api.settings import Settings
from beamaudit.api.store import StoreError, check_connection, make_engine, make_session_factory

__all__ = ["CAUTION", "create_app"]

CAUTION = (
    "Every dose figure here is an estimate, for quality assurance and optimisation. "
    "Clinical decisions about a patient need a qualified medical physicist; local "
    "regulations and licensed practice take precedence."
)

API_PREFIX = "/api/v1"


def create_app(settings: Settings, *, engine: Engine | None = None) -> FastAPI:
    """Assemble the application for ``settings`` (the engine is made if not given)."""
    engine = engine if engine is not None else make_engine(settings.database_url)
    app = FastAPI(
        title="beamaudit",
        version=__version__,
        description=(
            "Patient-dose audit for x-ray examinations: exposure events, reconstructed "
            "beam and dose figures, reviews against diagnostic reference levels.\n\n"
            f"**Caution.** {CAUTION}"
        ),
        openapi_url=f"{API_PREFIX}/openapi.json",
        docs_url=f"{API_PREFIX}/docs",
        redoc_url=None,
    )
    app.state.settings = settings
    app.state.engine = engine
    app.state.session_factory = make_session_factory(engine)

    @app.get(
        f"{API_PREFIX}/health",
        operation_id="get_health",
        tags=["health"],
        responses={503: {"description": "The database cannot be reached."}},
    )
    def health() -> Any:
        """Liveness and database reachability; the only route that needs no token."""
        body: dict[str, Any] = {
            "status": "ok",
            "version": __version__,
            "database": settings.backend,
        }
        try:
            check_connection(engine)
        except StoreError as exc:
            body.update(status="unavailable", detail=str(exc))
            return JSONResponse(body, status_code=503)
        return body

    return app
