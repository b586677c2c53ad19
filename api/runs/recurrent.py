"""The recurrent-exposure list: cumulative effective dose per pseudonymised patient.

Sums the stored per-event estimates (:mod:`beamaudit.api.intake.effective_doses`) per study and
per patient (:func:`beamaudit.model.recurrent.cumulative_effective_dose`): the output holds the
pseudonym, counts and sums only, with
:data:`~beamaudit.model.recurrent.RECURRENT_EXPOSURE_CAUTION`.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from datetime import UTC, date, datetime, timedelta
from typing import Any, cast

import numpy as np
from sqlalchemy import select
from sqlalchemy.orm import Session

from beamaudit.api.store import models as m

__all__ = ["RecurrentList", "recurrent_exposure"]


@dataclass(frozen=True)
class RecurrentList:
    """The patients whose cumulative effective dose reached the level, and how it was made."""

    as_of: date
    window_years: float
    level_msv: float
    patients: list[dict[str, Any]]
    n_patients: int
    n_exams: int
    n_exams_without_estimate: int
    n_exams_without_patient: int
    caution: str


def recurrent_exposure(
    session: Session,
    *,
    as_of: date,
    window_years: float | None = None,
    level_msv: float | None = None,
) -> RecurrentList:
    """Cumulative effective dose per pseudonymised patient in the window ending ``as_of``
    (included), and the patients at or above ``level_msv`` (default 100 mSv).

    An examination is a study: the sum of its events' estimates (superseded events and the
    repeated slices of a CT acquisition left out, as in a review), dated by its first event;
    a study none of whose events has an estimate counts as without one. Studies without a
    pseudonymised patient key cannot be summed and are counted.
    """
    from beamaudit.api.runs.reviews import period_conditions
    from beamaudit.model.recurrent import (
        DEFAULT_LEVEL_MSV,
        DEFAULT_WINDOW_YEARS,
        RECURRENT_EXPOSURE_CAUTION,
        cumulative_effective_dose,
    )

    window = DEFAULT_WINDOW_YEARS if window_years is None else window_years
    level = DEFAULT_LEVEL_MSV if level_msv is None else level_msv
    E = m.ExposureEventRow
    first, last = date(1900, 1, 1), as_of + timedelta(days=1)
    conditions, _, _ = period_conditions(session, start=first, end=last)
    values = {
        "t0": datetime(1900, 1, 1, tzinfo=UTC),
        "t1": datetime.combine(last, datetime.min.time(), UTC),
    }
    when = E.event_datetime.is_not(None) | E.study_datetime.is_not(None)
    rows = session.execute(
        select(
            E.study_id,
            E.id,
            E.patient_pseudo_id,
            E.event_datetime,
            E.study_datetime,
            E.effective_dose_msv,
        ).where(*conditions, when),
        values,
    ).all()
    studies: dict[Any, list[Any]] = {}
    for study_id, event_id, key, event_at, study_at, dose in rows:
        at = cast(datetime, event_at or study_at)  # the query asks for one of them
        name = study_id if study_id is not None else f"event {event_id}"
        entry = studies.setdefault(name, [key, at, math.nan])
        entry[0] = entry[0] or key
        entry[1] = min(_naive_utc(entry[1]), _naive_utc(at))
        if dose is not None:
            entry[2] = float(dose) if math.isnan(entry[2]) else entry[2] + float(dose)
    kept = [s for s in studies.values() if s[0]]
    end = datetime(as_of.year, as_of.month, as_of.day, tzinfo=UTC)
    doses = cumulative_effective_dose(
        [s[0] for s in kept],
        np.array([_naive_utc(s[1]) for s in kept], dtype="datetime64[ns]"),
        [s[2] for s in kept],
        window_years=window,
        as_of=end.date(),
    )
    return RecurrentList(
        as_of=as_of,
        window_years=window,
        level_msv=level,
        patients=doses.above(level).to_records(),
        n_patients=len(doses),
        n_exams=len(kept),
        n_exams_without_estimate=sum(1 for s in kept if math.isnan(s[2])),
        n_exams_without_patient=len(studies) - len(kept),
        caution=RECURRENT_EXPOSURE_CAUTION,
    )


def _naive_utc(value: datetime) -> datetime:
    return value.astimezone(UTC).replace(tzinfo=None) if value.tzinfo is not None else value
