"""Effective-dose estimates per stored event, and the recurrent-exposure list built on them.

Every event gets either a population-average estimate (:mod:`beamaudit.model.effective_dose`,
``effective_dose_msv`` with the coefficient's citation in ``effective_dose_source``) or none and
the reason (``effective_dose_reason``):

* **CT**: E = k x DLP, the region from the exam type (``api/data/ct_regions.csv``), k by the
  patient's age from AAPM Report 96 Table 4; no estimate without an exam type with a region, an
  age, a DLP, or when the recorded CTDI phantom is not the coefficient's. A DLP whose phantom is
  not recorded is taken as referring to the coefficient's phantom, and the source says so.
* **Projection radiography, fluoroscopy, interventional**: E = c x DAP from a table of sourced
  coefficients per exam type, which ships empty: none is estimated, and each says why.

The estimates are written in the transaction that stores the events
(:class:`beamaudit.api.postprocess.Completion`) and by :func:`fill_effective_doses` for events
already stored. :func:`recurrent_exposure` sums them per pseudonymised patient
(:func:`beamaudit.model.recurrent.cumulative_effective_dose`): the output holds the pseudonym,
counts and sums only, with :data:`~beamaudit.model.recurrent.RECURRENT_EXPOSURE_CAUTION`.
"""

from __future__ import annotations

import csv
import io
import math
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass
from datetime import UTC, date, datetime, timedelta
from functools import cache
from importlib import resources
from typing import Any, cast

import numpy as np
from sqlalchemy import Table, select
from sqlalchemy.orm import Session, sessionmaker

from beamaudit.api.store import models as m

__all__ = [
    "EFFECTIVE_DOSE_COLUMNS",
    "RecurrentList",
    "ct_regions",
    "effective_dose_values",
    "fill_effective_doses",
    "recurrent_exposure",
]

#: the event columns an estimate fills
EFFECTIVE_DOSE_COLUMNS = ("effective_dose_msv", "effective_dose_source", "effective_dose_reason")
#: the event columns an estimate reads
_INPUTS = (
    "exam_type",
    "modality",
    "modality_family",
    "dlp_mgy_cm",
    "dap_gy_cm2",
    "patient_age_years",
    "ct_phantom_diameter_cm",
)
_CHUNK = 2000


@cache
def ct_regions() -> Mapping[str, str]:
    """Exam type -> anatomical region of the CT k tables (``api/data/ct_regions.csv``)."""
    text = resources.files("beamaudit.api").joinpath("data/ct_regions.csv").read_text("utf-8")
    lines = [line for line in text.splitlines() if line.strip() and not line.startswith("#")]
    return {
        row["exam_type"]: row["region"] for row in csv.DictReader(io.StringIO("\n".join(lines)))
    }


def _number(value: Any) -> float:
    return float("nan") if value is None else float(value)


def _is_ct(row: Mapping[str, Any]) -> bool:
    return row.get("modality") == "CT" or row.get("modality_family") == "ct"


def effective_dose_values(rows: Sequence[Mapping[str, Any]]) -> list[dict[str, Any]]:
    """The effective-dose columns (:data:`EFFECTIVE_DOSE_COLUMNS`) of each event, in order.

    ``rows`` hold the event columns the estimate reads (missing ones as ``None``).
    """
    from beamaudit.model.effective_dose import ct_effective_dose_msv, dap_effective_dose_msv

    out: list[dict[str, Any]] = [
        {"effective_dose_msv": None, "effective_dose_source": None, "effective_dose_reason": None}
        for _ in rows
    ]
    regions = ct_regions()
    ct: list[int] = []
    projection: list[int] = []
    for i, row in enumerate(rows):
        exam_type = row.get("exam_type")
        if not exam_type:
            out[i]["effective_dose_reason"] = "no exam type: the coefficient depends on it"
        elif _is_ct(row):
            if exam_type in regions:
                ct.append(i)
            else:
                out[i]["effective_dose_reason"] = (
                    f"no CT region for exam type {exam_type!r} (api/data/ct_regions.csv)"
                )
        else:
            projection.append(i)
    if ct:
        phantom = np.array([_number(rows[i].get("ct_phantom_diameter_cm")) for i in ct])
        recorded = ~np.isnan(phantom)
        estimates = ct_effective_dose_msv(
            [_number(rows[i].get("dlp_mgy_cm")) for i in ct],
            region=np.array([regions[str(rows[i]["exam_type"])] for i in ct], dtype=object),
            age_years=[_number(rows[i].get("patient_age_years")) for i in ct],
        )
        for j, i in enumerate(ct):
            reason = str(estimates.reason[j])
            if not reason and recorded[j]:
                # the phantom the coefficient assumes, checked where the event records one
                row_phantom = _coefficient_phantom(rows[i])
                if row_phantom is not None and row_phantom != phantom[j]:
                    reason = (
                        f"the DLP refers to the {phantom[j]:g} cm phantom; the coefficient to the "
                        f"{row_phantom:g} cm phantom"
                    )
            if reason:
                out[i]["effective_dose_reason"] = reason
                continue
            source = str(estimates.source[j])
            if not recorded[j]:
                source += "; CTDI phantom not recorded, taken as the coefficient's"
            out[i]["effective_dose_msv"] = float(estimates.effective_dose_msv[j])
            out[i]["effective_dose_source"] = source
    if projection:
        estimates = dap_effective_dose_msv(
            [_number(rows[i].get("dap_gy_cm2")) for i in projection],
            exam_type=np.array([str(rows[i]["exam_type"]) for i in projection], dtype=object),
        )
        for j, i in enumerate(projection):
            if estimates.reason[j]:
                out[i]["effective_dose_reason"] = str(estimates.reason[j])
            else:
                out[i]["effective_dose_msv"] = float(estimates.effective_dose_msv[j])
                out[i]["effective_dose_source"] = str(estimates.source[j])
    return out


def _coefficient_phantom(row: Mapping[str, Any]) -> float | None:
    """The CTDI phantom (cm) of the k row used for ``row`` (looked up again by region and age)."""
    from beamaudit.model.effective_dose import load_ct_k_factors

    region = ct_regions().get(str(row.get("exam_type")))
    age = _number(row.get("patient_age_years"))
    if region is None or math.isnan(age):
        return None
    found = load_ct_k_factors().lookup(region, age)
    return None if found is None else float(found.phantom_cm)


def fill_effective_doses(sessions: sessionmaker[Session], event_ids: Iterable[int]) -> int:
    """Write the effective-dose columns of stored events (in chunks, one transaction each);
    returns how many got an estimate."""
    E = m.ExposureEventRow
    table = E.__table__
    assert isinstance(table, Table)  # a declarative class maps one Table
    ids = list(event_ids)
    estimated = 0
    for start in range(0, len(ids), _CHUNK):
        with sessions.begin() as session:
            found = session.execute(
                select(E.id, *(getattr(E, c) for c in _INPUTS)).where(
                    E.id.in_(ids[start : start + _CHUNK])
                )
            ).all()
            rows = [dict(zip(_INPUTS, r[1:], strict=True)) for r in found]
            values = effective_dose_values(rows)
            for r, v in zip(found, values, strict=True):
                session.execute(table.update().where(E.id == r[0]).values(**v))
                estimated += v["effective_dose_msv"] is not None
    return estimated


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
    from beamaudit.api.reviews import period_conditions
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
