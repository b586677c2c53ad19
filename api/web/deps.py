"""FastAPI dependencies: the session, the caller, and role checks.

A caller presents its token as ``Authorization: Bearer <token>``, or the session cookie
(``beamaudit_session``) that signing in on the login page sets: a browser session of its own
(:func:`beamaudit.api.store.auth.open_browser_session`), never the token itself. No credentials or
unknown ones answer 401; valid ones without the role answer 403.

A change (POST, PUT, PATCH, DELETE) made with the cookie must also carry the session's CSRF
token in the ``X-CSRF-Token`` header and come from the service's own origin (``Origin``, else
``Referer``, equal to the request's own scheme and host, or listed in ``api.trusted_origins``):
a page of another site or another port cannot make a signed-in browser change anything
(403 otherwise). Requests with a bearer token carry no ambient credentials and need neither.
"""

from __future__ import annotations

import hmac
from collections.abc import AsyncIterator, Awaitable, Callable
from dataclasses import dataclass
from typing import Annotated
from urllib.parse import urlsplit

from fastapi import Depends, HTTPException, Request, status
from sqlalchemy.orm import Session
from starlette.concurrency import run_in_threadpool

from beamaudit.api.settings import Settings
from beamaudit.api.store.auth import (
    Principal,
    Role,
    authenticate,
    browser_identity,
    has_role,
    note_token_use,
    token_use_due,
)

__all__ = [
    "CSRF_HEADER",
    "SESSION_COOKIE",
    "CurrentPrincipal",
    "DbSession",
    "Identity",
    "get_session",
    "get_settings",
    "identify",
    "require_role",
]

SESSION_COOKIE = "beamaudit_session"
CSRF_HEADER = "X-CSRF-Token"
SAFE_METHODS = frozenset({"GET", "HEAD", "OPTIONS"})


async def get_session(request: Request) -> AsyncIterator[Session]:
    """One session per request; the route commits what it changes.

    Made in the event loop (no I/O until a query). Closing it rolls back and returns its
    connection to the pool: a round trip to a PostgreSQL server, done in a worker thread; on
    SQLite a call into the library on a local file (nothing to undo after a route's reads, its
    own writes already committed), done here.
    """
    session: Session = request.app.state.session_factory()
    try:
        yield session
    finally:
        if session.in_transaction() and session.get_bind().dialect.name != "sqlite":
            await run_in_threadpool(session.close)
        else:
            session.close()


DbSession = Annotated[Session, Depends(get_session)]


async def get_settings(request: Request) -> Settings:
    """The application's settings (a dependency)."""
    settings: Settings = request.app.state.settings
    return settings


def bearer_token(request: Request) -> str | None:
    """The token of the Authorization header (``Bearer``), if any."""
    header = request.headers.get("authorization", "")
    scheme, _, value = header.partition(" ")
    if scheme.lower() == "bearer" and value.strip():
        return value.strip()
    return None


@dataclass(frozen=True, slots=True)
class Identity:
    """Who is calling, and how: ``csrf_token`` is set when by the session cookie."""

    principal: Principal
    csrf_token: str | None = None


def identify(request: Request, session: Session, *, note_use: bool = True) -> Identity | None:
    """The caller by bearer token, else by session cookie; ``None`` when neither is valid.
    ``note_use=False``: only reads (the token's use is not noted)."""
    token = bearer_token(request)
    if token is not None:
        principal = authenticate(session, token, note_use=note_use)
        return None if principal is None else Identity(principal)
    cookie = request.cookies.get(SESSION_COOKIE)
    found = browser_identity(session, cookie, note_use=note_use)
    return None if found is None else Identity(found.principal, found.csrf_token)


def same_origin(request: Request) -> bool:
    """Whether ``Origin`` (else ``Referer``) names this service (or a trusted origin)."""
    claimed = request.headers.get("origin") or request.headers.get("referer")
    if not claimed:
        return False
    parts = urlsplit(claimed)
    origin = f"{parts.scheme}://{parts.netloc}".lower()
    own = f"{request.url.scheme}://{request.url.netloc}".lower()
    trusted = {o.rstrip("/").lower() for o in request.app.state.settings.api.trusted_origins}
    return origin == own or origin in trusted


def csrf_problem(request: Request, identity: Identity) -> str | None:
    """Why a change made with the session cookie is refused, or ``None`` when it may go on."""
    if identity.csrf_token is None or request.method in SAFE_METHODS:
        return None
    if not same_origin(request):
        return "a change made with the session cookie must come from this site's own pages"
    sent = request.headers.get(CSRF_HEADER, "")
    if not sent or not hmac.compare_digest(sent, identity.csrf_token):
        return f"a change made with the session cookie needs the {CSRF_HEADER} header"
    return None


async def get_principal(request: Request, session: DbSession) -> Principal:
    """The caller (401 without valid credentials, 403 for a change the cookie may not make).

    On SQLite the credentials are read in the event loop (a read of a local file is CPU work,
    as :mod:`.routing` says of reads-only routes), and the token's use, written at most once a
    minute, is noted in a worker thread (a write may wait for SQLite's lock); on PostgreSQL
    both in a worker thread."""
    if session.get_bind().dialect.name == "sqlite":
        identity = identify(request, session, note_use=False)
        if identity is not None and token_use_due(session, identity.principal.token_id):
            await run_in_threadpool(note_token_use, session, identity.principal.token_id)
    else:
        identity = await run_in_threadpool(identify, request, session)
    if identity is None:
        raise HTTPException(
            status_code=status.HTTP_401_UNAUTHORIZED,
            detail="a valid API token is required (Authorization: Bearer <token>)",
            headers={"WWW-Authenticate": "Bearer"},
        )
    problem = csrf_problem(request, identity)
    if problem is not None:
        raise HTTPException(status_code=status.HTTP_403_FORBIDDEN, detail=problem)
    return identity.principal


CurrentPrincipal = Annotated[Principal, Depends(get_principal)]


def require_role(role: Role) -> Callable[[Principal], Awaitable[Principal]]:
    """A dependency that lets through callers whose role includes ``role``."""

    async def check(principal: CurrentPrincipal) -> Principal:
        if not has_role(principal.role, role):
            raise HTTPException(
                status_code=status.HTTP_403_FORBIDDEN,
                detail=f"this needs the {role} role; the token has {principal.role}",
            )
        return principal

    return check


Viewer = Annotated[Principal, Depends(require_role("viewer"))]
Physicist = Annotated[Principal, Depends(require_role("physicist"))]
Admin = Annotated[Principal, Depends(require_role("admin"))]
