"""What a command that serves the dashboards, or makes a database to serve, tells its user: which
database it uses, and how to sign in."""

from __future__ import annotations

from pathlib import Path

__all__ = ["database_words", "sign_in_words", "sqlite_file"]


def sqlite_file(url: str) -> Path | None:
    """The database file of a ``sqlite:///`` URL (``None`` for another database)."""
    from sqlalchemy.engine import make_url

    parsed = make_url(url)
    if parsed.get_backend_name() != "sqlite" or not parsed.database:
        return None
    return Path(parsed.database).resolve()


def database_words(url: str) -> str:
    """The database in words: its file, or its URL without a password."""
    from sqlalchemy.engine import make_url

    path = sqlite_file(url)
    if path is not None:
        return f"SQLite file {path}"
    return f"PostgreSQL {make_url(url).render_as_string(hide_password=True)}"


def sign_in_words(host: str, port: int, *, token: str | None = None) -> str:
    """How to sign in to the dashboards served on ``host:port``."""
    where = f"http://{host}:{port}/login"
    if token:
        return f"Sign in at {where} with this token (a physicist's, shown only now): {token}"
    return (
        f"Sign in at {where} with an API token; "
        "'beamaudit token create --role physicist' (or viewer) makes one."
    )
