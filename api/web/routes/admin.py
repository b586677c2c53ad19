"""API tokens and the audit log (admins only).

Tokens made here are the same as ``beamaudit token create``: random, shown once, stored as their
SHA-256 hash. The audit log lists every change made through the API and the command line.
"""

from __future__ import annotations

from typing import Annotated

from fastapi import Depends, Query, status
from sqlalchemy import select

from beamaudit.api.store import models as m
from beamaudit.api.store.auth import AuthError, create_token, revoke_token
from beamaudit.api.web.deps import Admin, DbSession
from beamaudit.api.web.routes._common import (
    AUTH_RESPONSES,
    NOT_FOUND,
    IdPath,
    PageParams,
    Period,
    not_found,
    page_params,
    paginate,
    period_params,
)
from beamaudit.api.web.routing import Router
from beamaudit.api.web.schemas.admin import (
    AuditEntryRead,
    AuditPage,
    TokenCreate,
    TokenCreated,
    TokenRead,
)
from beamaudit.api.web.schemas.base import ShortText

__all__ = ["router"]

router = Router(responses=AUTH_RESPONSES)


@router.get("/tokens", operation_id="list_tokens", response_model=list[TokenRead], tags=["admin"])
def list_tokens(session: DbSession, _: Admin) -> list[TokenRead]:
    """Every token's id, name, role and dates (never the tokens themselves)."""
    rows = session.scalars(select(m.ApiToken).order_by(m.ApiToken.id))
    return [TokenRead.model_validate(r) for r in rows]


@router.post(
    "/tokens",
    operation_id="create_token",
    response_model=TokenCreated,
    status_code=status.HTTP_201_CREATED,
    tags=["admin"],
)
def create_api_token(body: TokenCreate, session: DbSession, who: Admin) -> TokenCreated:
    """Make a token; the answer is the only time the token is shown."""
    expires = None
    if body.expires_in_days is not None:
        from datetime import timedelta

        from beamaudit.api.store.base import utcnow

        expires = utcnow() + timedelta(days=body.expires_in_days)
    token_id, token = create_token(
        session, role=body.role, name=body.name, actor=who.actor, expires_at=expires
    )
    session.commit()
    row = session.get(m.ApiToken, token_id)
    return TokenCreated(**TokenRead.model_validate(row).model_dump(), token=token)


@router.post(
    "/tokens/{token_id}/revoke",
    operation_id="revoke_token",
    response_model=TokenRead,
    responses=NOT_FOUND,
    tags=["admin"],
)
def revoke_api_token(token_id: IdPath, session: DbSession, who: Admin) -> TokenRead:
    """Revoke a token at once (revoking twice keeps the first time)."""
    try:
        row = revoke_token(session, token_id, actor=who.actor)
    except AuthError:
        not_found("token", token_id)
    session.commit()
    return TokenRead.model_validate(row)


@router.get("/audit-log", operation_id="list_audit_log", response_model=AuditPage, tags=["admin"])
def list_audit_log(
    session: DbSession,
    _: Admin,
    page: Annotated[PageParams, Depends(page_params)],
    period: Annotated[Period, Depends(period_params)],
    entity: Annotated[ShortText | None, Query(description="e.g. room, reference_level_set")] = None,
    entity_id: Annotated[ShortText | None, Query(description="the changed row's id")] = None,
    actor: Annotated[ShortText | None, Query(description="e.g. token:3 (who)")] = None,
    action: Annotated[ShortText | None, Query(description="e.g. create, update, retire")] = None,
) -> AuditPage:
    """Every change, newest first, with the values before and after."""
    A = m.AuditLogEntry
    stmt = select(A)
    for column, value in (
        (A.entity, entity),
        (A.entity_id, entity_id),
        (A.actor, actor),
        (A.action, action),
    ):
        if value is not None:
            stmt = stmt.where(column == value)
    if period.start is not None:
        stmt = stmt.where(A.at >= period.start)
    if period.end is not None:
        stmt = stmt.where(A.at < period.end)
    rows, cursor = paginate(session, stmt, A.id, page)
    return AuditPage(items=[AuditEntryRead.model_validate(r) for r in rows], next_cursor=cursor)
