"""API tokens, roles and the audit log.

Tokens are random (256 bits), shown once when made, and stored only as their
SHA-256 hash; a presented token is hashed, looked up, and compared in constant
time. Roles are ordered: a ``viewer`` reads reviews and aggregates, a
``physicist`` also reads events and edits mappings, reference levels and
calibration, an ``admin`` also manages tokens and sources.
"""

from __future__ import annotations

import hashlib
import hmac
import secrets
from dataclasses import dataclass
from typing import Any, Literal

from sqlalchemy import select
from sqlalchemy.orm import Session

from beamaudit.api.store import models as m
from beamaudit.api.store.base import utcnow

__all__ = [
    "ROLES",
    "TOKEN_PREFIX",
    "Principal",
    "Role",
    "authenticate",
    "create_token",
    "has_role",
    "hash_token",
    "record_change",
    "revoke_token",
]

Role = Literal["viewer", "physicist", "admin"]
ROLES: tuple[Role, ...] = ("viewer", "physicist", "admin")
TOKEN_PREFIX = "bat_"


class AuthError(ValueError):
    """A token operation that cannot be done (unknown id, bad role)."""


@dataclass(frozen=True, slots=True)
class Principal:
    """Who is calling: a token's id, name and role."""

    token_id: int
    name: str | None
    role: Role

    @property
    def actor(self) -> str:
        """How the audit log names this caller."""
        return f"token:{self.token_id}" + (f" ({self.name})" if self.name else "")


def hash_token(token: str) -> str:
    """SHA-256 hex digest of a token (tokens are random, so no salt is needed)."""
    return hashlib.sha256(token.encode("utf-8")).hexdigest()


def has_role(role: str, needed: Role) -> bool:
    """Whether ``role`` includes the rights of ``needed``."""
    return role in ROLES and ROLES.index(role) >= ROLES.index(needed)


def create_token(
    session: Session, *, role: Role, name: str | None = None, actor: str = "cli"
) -> tuple[int, str]:
    """Make a token; returns ``(id, token)``. The token itself is never stored."""
    if role not in ROLES:
        raise AuthError(f"role must be one of {', '.join(ROLES)}, not {role!r}")
    token = TOKEN_PREFIX + secrets.token_urlsafe(32)
    row = m.ApiToken(name=name, role=role, token_hash=hash_token(token))
    session.add(row)
    session.flush()
    record_change(
        session,
        actor=actor,
        action="create",
        entity="api_token",
        entity_id=row.id,
        after={"name": name, "role": role},
    )
    return row.id, token


def revoke_token(session: Session, token_id: int, *, actor: str = "cli") -> m.ApiToken:
    """Revoke a token by id (idempotent: revoking twice keeps the first time)."""
    row = session.get(m.ApiToken, token_id)
    if row is None:
        raise AuthError(f"no token with id {token_id}")
    if row.revoked_at is None:
        row.revoked_at = utcnow()
        record_change(
            session,
            actor=actor,
            action="revoke",
            entity="api_token",
            entity_id=row.id,
            before={"revoked": False},
            after={"revoked": True},
        )
    return row


def authenticate(session: Session, token: str | None) -> Principal | None:
    """The principal a presented token stands for, or ``None`` (unknown, revoked, malformed)."""
    if not token or not token.startswith(TOKEN_PREFIX) or len(token) > 200:
        return None
    digest = hash_token(token)
    row = session.scalar(select(m.ApiToken).where(m.ApiToken.token_hash == digest))
    if row is None or not hmac.compare_digest(row.token_hash, digest) or row.revoked_at:
        return None
    return Principal(token_id=row.id, name=row.name, role=row.role)  # type: ignore[arg-type]


def record_change(
    session: Session,
    *,
    actor: str,
    action: str,
    entity: str,
    entity_id: Any = None,
    before: dict[str, Any] | None = None,
    after: dict[str, Any] | None = None,
) -> None:
    """Write one audit-log entry in the caller's transaction."""
    session.add(
        m.AuditLogEntry(
            actor=actor,
            action=action,
            entity=entity,
            entity_id=None if entity_id is None else str(entity_id),
            before=before,
            after=after,
        )
    )
