"""API tokens, browser sessions, roles and the audit log.

Tokens are random (256 bits), shown once when made, and stored only as their
SHA-256 hash; a presented token is hashed, looked up, and compared in constant
time. A token may have an expiry (``expires_at``); its ``last_used_at`` is kept
to the minute. Roles are ordered: a ``viewer`` reads reviews and aggregates, a
``physicist`` also reads events and edits mappings, reference levels and
calibration, an ``admin`` also manages tokens and sources.

Signing in on the login page opens a **browser session** of its own
(:func:`open_browser_session`): a random cookie value (kept only as its SHA-256),
a CSRF token, and an expiry. The cookie is never the API token; it ends when
the person signs out, when it expires, and when its token is revoked or expires.
"""

from __future__ import annotations

import hashlib
import hmac
import secrets
from dataclasses import dataclass
from datetime import datetime, timedelta
from typing import Any, Literal

from sqlalchemy import bindparam, select, update
from sqlalchemy.orm import Session

from beamaudit.api.errors import ApiError
from beamaudit.api.store import models as m
from beamaudit.api.store.base import utcnow

__all__ = [
    "ROLES",
    "TOKEN_PREFIX",
    "BrowserIdentity",
    "Principal",
    "Role",
    "authenticate",
    "browser_identity",
    "create_token",
    "end_browser_session",
    "has_role",
    "hash_token",
    "open_browser_session",
    "record_change",
    "revoke_token",
]

Role = Literal["viewer", "physicist", "admin"]
ROLES: tuple[Role, ...] = ("viewer", "physicist", "admin")
TOKEN_PREFIX = "bat_"


class AuthError(ApiError, ValueError):
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
    session: Session,
    *,
    role: Role,
    name: str | None = None,
    actor: str = "cli",
    expires_at: datetime | None = None,
) -> tuple[int, str]:
    """Make a token (valid until ``expires_at``, or until revoked when None); returns
    ``(id, token)``. The token itself is never stored."""
    if role not in ROLES:
        raise AuthError(f"role must be one of {', '.join(ROLES)}, not {role!r}")
    token = TOKEN_PREFIX + secrets.token_urlsafe(32)
    row = m.ApiToken(name=name, role=role, token_hash=hash_token(token), expires_at=expires_at)
    session.add(row)
    session.flush()
    record_change(
        session,
        actor=actor,
        action="create",
        entity="api_token",
        entity_id=row.id,
        after={
            "name": name,
            "role": role,
            "expires_at": expires_at.isoformat() if expires_at else None,
        },
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


#: ``last_used_at`` is written at most this often per token (one write a minute, not a request)
LAST_USED_RESOLUTION = timedelta(minutes=1)


def _usable(row: m.ApiToken | None, now: datetime) -> bool:
    return (
        row is not None
        and row.revoked_at is None
        and (row.expires_at is None or row.expires_at > now)
    )


def _note_use(session: Session, row: m.ApiToken, now: datetime) -> None:
    """Keep ``last_used_at`` to the minute, in a short transaction of its own."""
    if not _use_is_due(row, now):
        return
    from sqlalchemy.exc import OperationalError

    try:
        session.execute(update(m.ApiToken).where(m.ApiToken.id == row.id).values(last_used_at=now))
        session.commit()
    except OperationalError:  # a busy database: the note waits for the next use
        session.rollback()


#: the token of a hash, and the browser session of one: statements made once, not for every
#: request
_TOKEN_BY_HASH = select(m.ApiToken).where(m.ApiToken.token_hash == bindparam("digest"))
_BROWSER_SESSION_BY_HASH = select(m.BrowserSession).where(
    m.BrowserSession.session_hash == bindparam("digest")
)
#: ``session.info`` key: the ids of the tokens read in the session whose use is to be noted
_USE_DUE = "beamaudit.token_use_due"


def _use_is_due(row: m.ApiToken, now: datetime) -> bool:
    return row.last_used_at is None or now - row.last_used_at >= LAST_USED_RESOLUTION


def _read_use(session: Session, row: m.ApiToken, now: datetime, note_use: bool) -> None:
    """Note the use of ``row`` now, or (``note_use=False``) keep in the session that it is due."""
    if note_use:
        _note_use(session, row, now)
    elif _use_is_due(row, now):
        session.info.setdefault(_USE_DUE, set()).add(row.id)


def authenticate(session: Session, token: str | None, *, note_use: bool = True) -> Principal | None:
    """The principal a presented token stands for, or ``None`` (unknown, revoked, expired,
    malformed). Notes the use in ``last_used_at`` (with ``note_use=False`` only reads: the
    caller notes it with :func:`note_token_use` when :func:`token_use_due` says so)."""
    if not token or not token.startswith(TOKEN_PREFIX) or len(token) > 200:
        return None
    digest = hash_token(token)
    row = session.scalar(_TOKEN_BY_HASH, {"digest": digest})
    now = utcnow()
    if row is None or not hmac.compare_digest(row.token_hash, digest) or not _usable(row, now):
        return None
    principal = Principal(token_id=row.id, name=row.name, role=row.role)  # type: ignore[arg-type]
    _read_use(session, row, now, note_use)
    return principal


def token_use_due(session: Session, token_id: int) -> bool:
    """Whether a use of the token read in ``session`` with ``note_use=False``
    (:func:`authenticate`, :func:`browser_identity`) is to be noted: its ``last_used_at`` was
    older than :data:`LAST_USED_RESOLUTION`. Asks nothing of the store."""
    return token_id in session.info.get(_USE_DUE, ())


def note_token_use(session: Session, token_id: int) -> None:
    """Note a use of the token in ``last_used_at`` (a write: in a short transaction of its own,
    skipped when the database is busy)."""
    session.info.get(_USE_DUE, set()).discard(token_id)
    row = session.get(m.ApiToken, token_id)
    if row is not None:
        _note_use(session, row, utcnow())


@dataclass(frozen=True, slots=True)
class BrowserIdentity:
    """Who a session cookie stands for, and the CSRF token its changes must carry."""

    principal: Principal
    csrf_token: str
    session_id: int


def open_browser_session(
    session: Session, principal: Principal, *, max_age: timedelta
) -> tuple[str, str]:
    """Open a browser session for ``principal``; returns ``(cookie value, CSRF token)``.

    Both are random (256 bits); only the cookie's SHA-256 is stored. The session ends at
    ``now + max_age``, or earlier when its token does.
    """
    cookie = secrets.token_urlsafe(32)
    csrf = secrets.token_urlsafe(32)
    session.add(
        m.BrowserSession(
            session_hash=hash_token(cookie),
            csrf_token=csrf,
            token_id=principal.token_id,
            expires_at=utcnow() + max_age,
        )
    )
    session.flush()
    return cookie, csrf


def browser_identity(
    session: Session, cookie: str | None, *, note_use: bool = True
) -> BrowserIdentity | None:
    """The identity of a session cookie, or ``None`` (unknown, ended, expired, or its token
    revoked or expired); its token's use noted as :func:`authenticate` notes it."""
    if not cookie or len(cookie) > 200:
        return None
    digest = hash_token(cookie)
    row = session.scalar(_BROWSER_SESSION_BY_HASH, {"digest": digest})
    now = utcnow()
    if (
        row is None
        or not hmac.compare_digest(row.session_hash, digest)
        or row.ended_at is not None
        or row.expires_at <= now
    ):
        return None
    token = session.get(m.ApiToken, row.token_id)
    if token is None or not _usable(token, now):
        return None
    principal = Principal(token_id=token.id, name=token.name, role=token.role)  # type: ignore[arg-type]
    identity = BrowserIdentity(principal, row.csrf_token, row.id)
    _read_use(session, token, now, note_use)
    return identity


def end_browser_session(session: Session, cookie: str | None) -> bool:
    """End the session of ``cookie`` (signing out); whether there was one to end."""
    if not cookie or len(cookie) > 200:
        return False
    row = session.scalar(
        select(m.BrowserSession).where(m.BrowserSession.session_hash == hash_token(cookie))
    )
    if row is None or row.ended_at is not None:
        return False
    row.ended_at = utcnow()
    return True


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
