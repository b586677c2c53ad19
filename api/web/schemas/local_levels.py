"""Typical values and proposed local DRLs (ICRP 135) of a review run, adopting them, and the
recurrent-exposure list."""

from __future__ import annotations

from datetime import date
from typing import Annotated, Any

from pydantic import Field

from beamaudit.api.web.schemas.base import (
    Id,
    InputModel,
    Name,
    ReadModel,
    ShortText,
    Text,
    date_within,
)
from beamaudit.api.web.schemas.catalogue import ExamTypeCode, QuantityName

__all__ = [
    "ProposalAdopt",
    "ProposalChoice",
    "ProposalsRead",
    "RecurrentPatient",
    "RecurrentRead",
]

_CODE = r"^([a-z0-9][a-z0-9_]*)?$"


class ProposalsRead(ReadModel):
    """One run's site values: per site, exam type, indication, band and quantity, the typical
    value (median of the room medians) and, with enough rooms, the proposed local DRL (their 75th
    percentile), each with its interval, beside the current local and national levels."""

    run_id: int | None
    period: str | None
    rows: list[dict[str, Any]]
    caution: str


class ProposalChoice(InputModel):
    exam_type: ExamTypeCode
    quantity: QuantityName
    patient_group: Annotated[str, Field(max_length=64, pattern=_CODE)] = ""
    clinical_indication: Annotated[str, Field(max_length=64, pattern=_CODE)] = ""


class ProposalAdopt(InputModel):
    """Adopt proposals of one run and site as a new version of a local set (audited)."""

    run_id: Id
    site: ShortText
    set_name: Name = Field(description="the local set; a new version of it is stored")
    version: Name
    effective_from: date
    source: Text = Field(description="who decided, and where (e.g. the committee's minute)")
    choices: list[ProposalChoice] | None = Field(
        default=None, max_length=5000, description="null: every proposal of the site"
    )

    _dates = date_within("effective_from")


class RecurrentPatient(ReadModel):
    patient_key: str = Field(description="the pseudonym the store keeps; never a name or an ID")
    n_exams: int
    n_exams_in_window: int
    n_without_estimate: int
    cumulative_dose_msv: float
    peak_window_dose_msv: float


class RecurrentRead(ReadModel):
    """Patients whose cumulative effective dose (population-average estimates) in the window
    reached the level: for quality assurance of recurrent imaging only."""

    as_of: date
    window_years: float
    level_msv: float
    n_patients: int
    n_exams: int
    n_exams_without_estimate: int
    n_exams_without_patient: int
    patients: list[RecurrentPatient]
    caution: str
