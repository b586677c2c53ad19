"""FastAPI dependencies: the session, the caller, and role checks.

A caller presents its token as ``Authorization: Bearer <token>`` or as the
session cookie the login page sets (``beamaudit_session``). No token or an
unknown one answers 401; a valid token without the role answers 403.
"""

from __future__ import annotations

from collections.abc import Callable, Iterator
from typing import Annotated

from fastapi import Depends, HTTPException, Request, status
from sqlalchemy.orm import Session

from beamaudit.api.auth import Principal, Role, authenticate, has_role
from beamaudit.api.settings import Settings

__all__ = [
    "SESSION_COOKIE",
    "CurrentPrincipal",
    "DbSession",
    "get_session",
    "get_settings",
    "require_role",
]

SESSION_COOKIE = "beamaudit_session"


def get_session(request: Request) -> Iterator[Session]:
    """One session per request; the route commits what it changes."""
    session: Session = request.app.state.session_factory()
    try:
        yield session
    finally:
        session.close()


def get_settings(request: Request) -> Settings:
    settings: Settings = request.app.state.settings
    return settings


DbSession = Annotated[Session, Depends(get_session)]


def presented_token(request: Request) -> str | None:
    """The token from the Authorization header, else from the session cookie."""
    header = request.headers.get("authorization", "")
    scheme, _, value = header.partition(" ")
    if scheme.lower() == "bearer" and value.strip():
        return value.strip()
    return request.cookies.get(SESSION_COOKIE)


def get_principal(request: Request, session: DbSession) -> Principal:
    principal = authenticate(session, presented_token(request))
    if principal is None:
        raise HTTPException(
            status_code=status.HTTP_401_UNAUTHORIZED,
            detail="a valid API token is required (Authorization: Bearer <token>)",
            headers={"WWW-Authenticate": "Bearer"},
        )
    return principal


CurrentPrincipal = Annotated[Principal, Depends(get_principal)]


def require_role(role: Role) -> Callable[[Principal], Principal]:
    """A dependency that lets through callers whose role includes ``role``."""

    def check(principal: CurrentPrincipal) -> Principal:
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
