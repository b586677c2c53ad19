"""The web application: REST API under ``/api/v1`` and the dashboard pages.

Build it with :func:`create_app`; nothing happens at import time.
"""

from __future__ import annotations

import logging
from collections.abc import AsyncIterator, Callable
from contextlib import AbstractAsyncContextManager, asynccontextmanager
from pathlib import Path
from typing import Any

from fastapi import FastAPI, Request
from fastapi.exceptions import RequestValidationError
from fastapi.responses import JSONResponse, Response
from sqlalchemy.engine import Engine
from sqlalchemy.exc import OperationalError

from beamaudit import CAUTION, __version__
from beamaudit.api.settings import Settings
from beamaudit.api.store import StoreError, check_connection, make_engine, make_session_factory

__all__ = ["CAUTION", "create_app", "create_app_from_environment"]


API_PREFIX = "/api/v1"

log = logging.getLogger(__name__)


async def _unexpected_error(request: Request, exc: Exception) -> JSONResponse:
    """The last resort: log the traceback for the operator, never show it to the client."""
    log.error("unexpected error answering %s %s", request.method, request.url.path, exc_info=exc)
    return JSONResponse(
        {"detail": "internal error; the server log has the details"}, status_code=500
    )


async def _invalid_request(request: Request, exc: Exception) -> Response:
    """422 for a request that may be answered; who may not gets 401 or 403 first.

    FastAPI decodes a JSON body before the route's dependencies run, so a malformed body would
    otherwise be answered 422 before the token is looked at.
    """
    from fastapi.exception_handlers import request_validation_exception_handler
    from fastapi.routing import APIRoute
    from starlette.concurrency import run_in_threadpool

    from beamaudit.api.store.auth import has_role
    from beamaudit.api.web.deps import csrf_problem, identify
    from beamaudit.api.web.pages import invalid_page, is_page
    from beamaudit.api.web.routes.openapi import required_role

    if is_page(request):  # a page's parameters: who may not see it was sent away before this
        return invalid_page(exc)
    route = request.scope.get("route")
    role = required_role(route) if isinstance(route, APIRoute) else None
    if role is not None:

        def who() -> Any:
            with request.app.state.session_factory() as session:
                return identify(request, session)

        identity = await run_in_threadpool(who)
        if identity is None:
            return JSONResponse(
                {"detail": "a valid API token is required (Authorization: Bearer <token>)"},
                status_code=401,
                headers={"WWW-Authenticate": "Bearer"},
            )
        problem = csrf_problem(request, identity)
        if problem is not None:
            return JSONResponse({"detail": problem}, status_code=403)
        principal = identity.principal
        if not has_role(principal.role, role):
            return JSONResponse(
                {"detail": f"this needs the {role} role; the token has {principal.role}"},
                status_code=403,
            )
    return await request_validation_exception_handler(request, exc)  # type: ignore[arg-type]


async def _database_unavailable(request: Request, exc: Exception) -> JSONResponse:
    """The database cannot be reached (or went away mid-request): 503, try again later."""
    log.error("database error answering %s %s: %s", request.method, request.url.path, exc)
    return JSONResponse({"detail": "the database is unavailable; try again later"}, status_code=503)


def _add_docs(app: FastAPI) -> None:
    """The interactive API docs at ``/api/v1/docs`` for signed-in users, with Swagger UI's
    files (version 5: OpenAPI 3.1) served from the ``swagger-ui-py`` package (no public CDN)."""
    from pathlib import Path

    from fastapi import Depends, HTTPException
    from fastapi.openapi.docs import get_swagger_ui_html
    from fastapi.responses import FileResponse, HTMLResponse

    from beamaudit.api.web.pages import page_viewer

    files = {"swagger-ui-bundle.js": "application/javascript", "swagger-ui.css": "text/css"}

    @app.get(f"{API_PREFIX}/docs", include_in_schema=False)
    def docs(_: Any = Depends(page_viewer)) -> HTMLResponse:  # noqa: B008
        return get_swagger_ui_html(
            openapi_url=f"{API_PREFIX}/openapi.json",
            title="beamaudit API",
            swagger_js_url=f"{API_PREFIX}/docs/swagger-ui-bundle.js",
            swagger_css_url=f"{API_PREFIX}/docs/swagger-ui.css",
            swagger_favicon_url="data:,",
        )

    @app.get(f"{API_PREFIX}/docs/{{name}}", include_in_schema=False)
    def docs_file(name: str) -> FileResponse:
        import swagger_ui

        if name not in files:  # a fixed list: no path from the request reaches the file system
            raise HTTPException(404, "no such file")
        path = Path(swagger_ui.__file__).parent / "static" / name
        return FileResponse(path, media_type=files[name], headers={"Cache-Control": "max-age=3600"})


def create_app(settings: Settings, *, engine: Engine | None = None) -> FastAPI:
    """Assemble the application for ``settings`` (the engine is made if not given)."""
    from beamaudit.api.logs import configure_logging

    configure_logging()  # one line per record, library warnings without data values
    if settings.mammography_coefficients_file is not None:  # an upload computes D_G too
        _use_mammography_coefficients(settings.mammography_coefficients_file)
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
        docs_url=None,  # api.docs: served below with the service's own assets, signed in only
        redoc_url=None,
        lifespan=_worker_threads(settings.api.worker_threads),
    )
    app.state.settings = settings
    _add_middleware(app, settings)
    app.state.engine = engine
    app.state.session_factory = make_session_factory(engine)
    _add_health_route(app, settings, engine)
    from beamaudit.api.web.routes import include_api_routes
    from beamaudit.api.web.routes.openapi import customise_openapi

    include_api_routes(app, prefix=API_PREFIX)
    # -- dashboard pages
    from beamaudit.api.web.pages import router as pages_router

    app.include_router(pages_router)
    if settings.api.docs:
        _add_docs(app)
    from beamaudit.api.web.metrics import add_metrics_route

    add_metrics_route(app, settings)  # [metrics]: off, admin token, or an address of its own
    _add_exception_handlers(app)
    customise_openapi(app)
    return app


def _worker_threads(threads: int) -> Callable[[FastAPI], AbstractAsyncContextManager[None]]:
    """The app's lifespan: its event loop's worker threads (the routes' blocking work) limited to
    ``threads`` (``api.worker_threads``) instead of the library's 40.

    Under load a process has one interpreter lock and a SQLite store one writer: with forty
    threads runnable, an upload waited behind the others at each of its database calls
    (bench_load: uploads p50 0.95 s with 40 threads, 0.36 s with 8).
    """

    @asynccontextmanager
    async def lifespan(app: FastAPI) -> AsyncIterator[None]:
        import anyio.to_thread

        anyio.to_thread.current_default_thread_limiter().total_tokens = threads
        yield

    return lifespan


def _use_mammography_coefficients(path: Path) -> None:
    """Compute D_G on upload with the coefficient file ``path``; a file we cannot use is a
    settings error."""
    from beamaudit.api.intake.mammography import use_official_coefficients
    from beamaudit.api.settings import SettingsError
    from beamaudit.model import ModelError

    try:
        use_official_coefficients(path)
    except ModelError as exc:
        raise SettingsError(f"mammography_coefficients_file: {exc}") from None


def _add_middleware(app: FastAPI, settings: Settings) -> None:
    """The security headers on every answer; CORS only for the configured origins."""
    from beamaudit.api.web.security_headers import SecurityHeaders

    app.add_middleware(SecurityHeaders)
    if settings.api.cors_origins:  # off unless origins are configured
        from fastapi.middleware.cors import CORSMiddleware

        app.add_middleware(
            CORSMiddleware,
            allow_origins=list(settings.api.cors_origins),
            allow_methods=["GET", "POST", "PATCH", "PUT", "DELETE"],
            allow_headers=["Authorization", "Content-Type"],
        )


def _add_health_route(app: FastAPI, settings: Settings, engine: Engine) -> None:
    """``GET /api/v1/health``: liveness and database reachability, without a token."""

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


def _add_exception_handlers(app: FastAPI) -> None:
    """Pages answer errors in HTML (a sign-in redirect, an error page), the API in JSON; a lost
    database and an unexpected error each have one answer without a traceback."""
    from starlette.exceptions import HTTPException as StarletteHTTPException

    from beamaudit.api.web.pages import (
        _LoginRedirect,
        dashboard_error_handler,
        http_error_handler,
        login_redirect_handler,
    )
    from beamaudit.dashboards import DashboardError

    app.add_exception_handler(_LoginRedirect, login_redirect_handler)
    app.add_exception_handler(StarletteHTTPException, http_error_handler)  # pages: HTML
    app.add_exception_handler(DashboardError, dashboard_error_handler)
    app.add_exception_handler(RequestValidationError, _invalid_request)
    app.add_exception_handler(OperationalError, _database_unavailable)
    app.add_exception_handler(Exception, _unexpected_error)


def create_app_from_environment() -> FastAPI:
    """The app of one worker process of ``beamaudit serve --workers N``: the settings as the
    command found them (``BEAMAUDIT_CONFIG`` and the ``BEAMAUDIT_*`` variables), its own engine."""
    from beamaudit.api.settings import load

    _end_with_the_serving_process()
    app = create_app(load())
    warm_up_model()
    return app


def warm_up_model() -> None:
    """The model's data tables loaded before the first request (a failure here is logged, and
    the tables are then loaded by the first request that needs them)."""
    from beamaudit.api.intake.reconstruct import warm_up

    try:
        warm_up()
    except Exception:  # serving goes on; the first trail pays for the tables instead
        log.exception("loading the model's data tables before serving failed")


def _end_with_the_serving_process() -> None:
    """Linux: this worker is sent SIGTERM (a graceful stop) when the serving process ends, however
    it ends: a serving process killed outright would otherwise leave its workers answering on its
    port (``prctl(PR_SET_PDEATHSIG)``, see prctl(2))."""
    import ctypes
    import multiprocessing
    import os
    import signal
    import sys

    if not sys.platform.startswith("linux"):
        return
    try:
        libc = ctypes.CDLL(None, use_errno=True)
        libc.prctl(1, int(signal.SIGTERM))  # 1: PR_SET_PDEATHSIG
    except (OSError, AttributeError):  # no prctl: the serving process stops its workers itself
        return
    parent = multiprocessing.parent_process()
    if parent is not None and os.getppid() != parent.pid:  # it ended before the call above
        os.kill(os.getpid(), signal.SIGTERM)
