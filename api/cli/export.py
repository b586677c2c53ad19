"""``beamaudit export``: stored events in their canonical fields, as CSV or JSON.

Each event carries its Study Instance UID and SOP Instance UID (last two columns), so that a
physicist can find the study in PACS. The export reads the database directly, so it is the
operator's (who holds the configuration) as the event API is the physicist role's.

The CSV is spreadsheet-safe: a text cell starting with ``=``, ``+``, ``-``, ``@``, tab or CR (a
Station Name or protocol sent by a modality) is prefixed with ``'``; numbers stay numbers. The
JSON carries the values as they are.
"""

from __future__ import annotations

import csv
import json
import sys
from datetime import date, datetime
from typing import Annotated, Any

import typer

from beamaudit.api.cli._common import fail

__all__ = ["EXPORT_COLUMNS", "register"]

export_app = typer.Typer(help="Export stored data for other tools.", no_args_is_help=True)

#: the columns of ``export events``: never a patient identifier, name or birth date
EXPORT_EXCLUDED = frozenset(
    {"patient_pseudo_id", "recon_trail", "provenance", "notes", "receptor_geometry"}
)


def _columns() -> list[str]:
    from beamaudit.api.store import models as m

    return [c for c in m.ExposureEventRow.__table__.columns.keys() if c not in EXPORT_EXCLUDED]  # noqa: SIM118


EXPORT_COLUMNS = _columns


def _plain(value: Any) -> Any:
    if isinstance(value, datetime | date):
        return value.isoformat()
    if isinstance(value, list | dict):
        return json.dumps(value, sort_keys=True)
    return value


@export_app.command("events")
def export_events(
    ctx: typer.Context,
    since: Annotated[
        str | None, typer.Option(help="Only events on or after this date (YYYY-MM-DD).")
    ] = None,
    fmt: Annotated[str, typer.Option("--format", help="csv or json.")] = "csv",
) -> None:
    """Write the stored events (reported and reconstructed fields) to standard output."""
    from sqlalchemy import select

    from beamaudit.api.cli._store import open_store
    from beamaudit.api.review.spreadsheet import safe_cell
    from beamaudit.api.store import models as m

    if fmt not in {"csv", "json"}:
        fail(f"--format must be csv or json, not {fmt!r}")
    since_dt = None
    if since:
        try:
            since_dt = datetime.fromisoformat(since)
        except ValueError:
            fail(f"--since must be a date YYYY-MM-DD, not {since!r}")
    store = open_store(ctx)
    columns = [*_columns(), "study_instance_uid", "sop_instance_uid"]
    stmt = (
        select(
            *(m.ExposureEventRow.__table__.c[c] for c in _columns()),
            m.Study.study_instance_uid,
            m.SourceObjectRow.sop_instance_uid,
        )
        .outerjoin(m.Study, m.Study.id == m.ExposureEventRow.study_id)
        .join(m.SourceObjectRow, m.SourceObjectRow.id == m.ExposureEventRow.source_object_id)
        .order_by(m.ExposureEventRow.id)
    )
    if since_dt is not None:
        stmt = stmt.where(m.ExposureEventRow.event_datetime >= since_dt)
    with store.sessions() as session:
        rows = session.execute(stmt)
        if fmt == "csv":
            writer = csv.writer(sys.stdout, lineterminator="\n")
            writer.writerow(columns)
            for row in rows:
                writer.writerow(["" if v is None else safe_cell(_plain(v)) for v in row])
        else:
            sys.stdout.write("[")
            for i, row in enumerate(rows):
                item = {
                    c: (json.loads(_plain(v)) if isinstance(v, list | dict) else _plain(v))
                    for c, v in zip(columns, row, strict=True)
                }
                sys.stdout.write(("," if i else "") + "\n" + json.dumps(item))
            sys.stdout.write("\n]\n")


def register(app: typer.Typer) -> None:
    """Add the ``export`` group to ``app``."""
    app.add_typer(export_app, name="export")
