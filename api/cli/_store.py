"""Opening the store from a command: settings, engine, migrations, one-line errors."""

from __future__ import annotations

from dataclasses import dataclass

import typer
from sqlalchemy.engine import Engine
from sqlalchemy.orm import Session, sessionmaker

from beamaudit.api.cli._common import fail, load_settings
from beamaudit.api.settings import Settings

__all__ = ["OpenStore", "open_store"]


@dataclass
class OpenStore:
    settings: Settings
    engine: Engine
    sessions: sessionmaker[Session]


def open_store(
    ctx: typer.Context | None, *, migrate: bool = True, writes: bool = True
) -> OpenStore:
    """Settings, a reachable engine (migrated to head unless ``migrate`` is false), sessions.

    Opened by a command that writes (``migrate`` and ``writes``), the store's review runs cut
    short (their process gone) are marked failed first, with the reason
    (:func:`beamaudit.api.runs.record.fail_interrupted_runs`); a listing (``writes`` false)
    leaves that to the next command that writes.
    """
    from beamaudit.api.store import (
        StoreError,
        check_connection,
        make_engine,
        make_session_factory,
        upgrade,
    )

    settings = load_settings(ctx)
    if settings.mammography_coefficients_file is not None:
        from beamaudit.api.intake.mammography import use_official_coefficients
        from beamaudit.model import ModelError

        try:
            use_official_coefficients(settings.mammography_coefficients_file)
        except ModelError as exc:
            fail(f"mammography_coefficients_file: {exc}")
    try:
        engine = make_engine(settings.database_url)
        check_connection(engine)
        if migrate:
            upgrade(engine)
    except StoreError as exc:
        fail(str(exc))
    sessions = make_session_factory(engine)
    if migrate and writes:
        from beamaudit.api.runs.record import fail_interrupted_runs

        fail_interrupted_runs(sessions, started=ctx.command_path if ctx else "beamaudit")
    return OpenStore(settings, engine, sessions)
