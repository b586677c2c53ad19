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
(:class:`beamaudit.api.intake.postprocess.Completion`) and by :func:`fill_effective_doses` for
events already stored; :mod:`beamaudit.api.runs.recurrent` sums them per pseudonymised patient.
"""

from __future__ import annotations

import csv
import io
import math
from collections.abc import Iterable, Mapping, Sequence
from functools import cache
from importlib import resources
from typing import Any

import numpy as np
from sqlalchemy import Table, select
from sqlalchemy.orm import Session, sessionmaker

from beamaudit.api.store import models as m

__all__ = [
    "EFFECTIVE_DOSE_COLUMNS",
    "ct_regions",
    "effective_dose_values",
    "fill_effective_doses",
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
