"""The dashboards' further inputs, read from the store: the catalogue's names, what needs
attention, the rejected files, the unmapped header values, one examination's events.

:mod:`beamaudit.api.web.page_data` reads the tables every page had from the start; this module the
ones the committee pages added (``EXAM_TYPES``, ``ATTENTION``, ``INGEST_ERRORS``, ``UNMAPPED``,
and the ``EVENTS`` of the one examination the distributions page shows). Contracts in
:mod:`beamaudit.dashboards.tables`.
"""

from __future__ import annotations

from datetime import UTC, datetime, timedelta

import numpy as np
import pandas as pd
from sqlalchemy import select
from sqlalchemy.orm import Session

from beamaudit.api.store import models as m

__all__ = [
    "INGEST_ERRORS_SHOWN",
    "attention_table",
    "exam_events",
    "exam_types_table",
    "ingest_errors_table",
    "review_window",
    "unmapped_table",
]

#: rejected files listed on one page, newest first (the count says how many more there are)
INGEST_ERRORS_SHOWN = 2000

_INGEST_COLUMNS = ("occurred_at", "received_via", "source", "sop_instance_uid", "code", "reason")
_UNMAPPED_COLUMNS = ("modality", "room", "body_part", "view_position", "study_description",
                     "series_description", "protocol_name", "n_events", "n_studies",
                     "first_seen", "last_seen")  # fmt: skip


def exam_types_table(session: Session) -> pd.DataFrame:
    """The ``EXAM_TYPES`` table of the stored catalogue: names, and the rule by which an
    examination-level type makes one value per study (the review's own, for each quantity)."""
    from beamaudit.api.review.examtypes import DEFAULT_AGGREGATION
    from beamaudit.api.store.review_rows import catalogue_from_store

    rows = []
    for t in catalogue_from_store(session).types:
        per = t.level_applies_per
        given = dict(t.aggregation)
        rule_of = {q: given.get(q) or DEFAULT_AGGREGATION.get(q) for q in t.quantities}
        rules = " ".join(f"{q}={r}" for q, r in rule_of.items() if r)
        rows.append(
            {"exam_type": t.exam_type, "name": t.name or t.exam_type, "level_applies_per": per,
             "aggregation": (rules or None) if per == "examination" else None}
        )  # fmt: skip
    return pd.DataFrame(rows, columns=["exam_type", "name", "level_applies_per", "aggregation"])


def review_window(run: m.ReviewRun, *, newest: bool = False) -> tuple[datetime, datetime | None]:
    """The files a month's review reports as rejected: those refused from the first day of its
    month until the review ran (a review run early in the next month covers the month's
    deliveries and the days before it); for the newest month's review, until now (``None``),
    so that a file refused since is not missed."""
    assert run.period_start is not None
    start = datetime(run.period_start.year, run.period_start.month, run.period_start.day,
                     tzinfo=UTC)  # fmt: skip
    if newest:
        return start, None
    end = run.finished_at or run.started_at or datetime.now(UTC)
    if end.tzinfo is None:
        end = end.replace(tzinfo=UTC)
    return start, max(end, start + timedelta(days=1))


def ingest_errors_table(
    session: Session, *, since: datetime | None = None, until: datetime | None = None,
    limit: int = INGEST_ERRORS_SHOWN,
) -> tuple[pd.DataFrame, int]:  # fmt: skip
    """The ``INGEST_ERRORS`` table (newest first, at most ``limit`` rows) refused in
    ``[since, until)``, and how many there are in all."""
    from sqlalchemy import func

    E = m.IngestError
    conditions = []
    if since is not None:
        conditions.append(E.occurred_at >= since)
    if until is not None:
        conditions.append(E.occurred_at < until)
    total = int(session.scalar(select(func.count()).select_from(E).where(*conditions)) or 0)
    rows = session.scalars(
        select(E).where(*conditions).order_by(E.occurred_at.desc(), E.id.desc()).limit(limit)
    ).all()
    frame = pd.DataFrame(
        [{c: getattr(r, c) for c in _INGEST_COLUMNS} for r in rows], columns=list(_INGEST_COLUMNS)
    )
    return frame, total


def unmapped_table(run: m.ReviewRun) -> pd.DataFrame:
    """The ``UNMAPPED`` table of a stored run: its summary of the header values that mapped to
    no examination type."""
    rows = (run.result or {}).get("unmapped") or []
    return pd.DataFrame(
        [{c: r.get(c) for c in _UNMAPPED_COLUMNS} for r in rows], columns=list(_UNMAPPED_COLUMNS)
    )


def attention_table(
    session: Session, run: m.ReviewRun, flags: pd.DataFrame, exam_types: pd.DataFrame
) -> pd.DataFrame:
    """The ``ATTENTION`` table of a month's record: its open flags (``flags``, the record's
    ``FLAGS`` table with their numbers) and the files refused in its review window."""
    from beamaudit.api.runs.record import record_periods
    from beamaudit.dashboards import attention_from_flags

    newest = record_periods(session)[:1] == [run.period]
    since, until = review_window(run, newest=newest)
    errors, _ = ingest_errors_table(session, since=since, until=until)
    return attention_from_flags(
        flags, ingest_errors=errors, exam_types=exam_types, period=run.period
    )


def exam_events(
    session: Session, run: m.ReviewRun, exam_type: str, *, window: tuple[float, float]
) -> pd.DataFrame:
    """The ``EVENTS`` table of one examination type in a month's review: only its events are
    read (the events of the review's period and exam type)."""
    from beamaudit.api.runs.reviews import exam_type_events

    assert run.period_start is not None and run.period_end is not None
    frame = exam_type_events(
        session, start=run.period_start, end=run.period_end, exam_type=exam_type
    )
    weight = frame["patient_weight_kg"]
    return frame.assign(
        event_id=frame["event_id"].astype(str),
        standard_patient=weight.between(window[0], window[1]).fillna(False).astype(bool),
        kvp_kv=frame["kvp_kv"].astype(float) if "kvp_kv" in frame else np.nan,
    )
