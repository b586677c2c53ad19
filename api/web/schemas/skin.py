"""Skin dose of fluoroscopy and interventional procedures: the map record, NCRP 168 levels,
follow-up (issue #21)."""

from __future__ import annotations

from datetime import datetime
from typing import Any, Literal

from pydantic import Field

from beamaudit.api.web.schemas.base import InputModel, ReadModel, Text

__all__ = [
    "CumulativeSkinDoseRead",
    "FollowUpItem",
    "FollowUpList",
    "FollowUpUpdate",
    "PatientSkinDoseRead",
    "SkinDoseRead",
]

FollowUpStatus = Literal["open", "patient_informed", "follow_up_booked", "closed"]


class _FollowUp(ReadModel):
    """Where a procedure's follow-up stands, and its NCRP 168 levels."""

    levels_crossed: list[str]
    level_checks: list[dict[str, Any]] = Field(
        description="each level: key, quantity, level, unit, value, crossed, ratio, text"
    )
    followup_status: FollowUpStatus
    followup_note: str | None
    followup_by: str | None
    followup_at: datetime | None


class SkinDoseRead(_FollowUp):
    """A procedure's skin-dose estimate (every figure an estimate: see ``caution``)."""

    exam_id: int
    study_instance_uid: str
    status: str = Field(description="ok, or failed (the reason in reason)")
    reason: str | None
    computed_at: datetime
    peak_skin_dose_mgy: float | None
    area_above_2gy_cm2: float | None
    area_above_3gy_cm2: float | None
    area_above_5gy_cm2: float | None
    uncertainty_pct: float | None = Field(description="expanded uncertainty of the PSD, k = 2")
    events_used: int | None
    events_at_peak: list[dict[str, Any]]
    record: dict[str, Any] | None = Field(
        description="the map record: cells, dose per cell, peak, patient model, assumptions"
    )
    caution: str


class FollowUpItem(_FollowUp):
    """A procedure that reached an NCRP 168 level, and where its follow-up stands."""

    study_instance_uid: str
    study_datetime: datetime | None
    patient_pseudo_id: str | None
    exam_type: str | None
    status: str
    peak_skin_dose_mgy: float | None
    area_above_3gy_cm2: float | None
    uncertainty_pct: float | None


class CumulativeSkinDoseRead(ReadModel):
    """One pseudonymised patient's procedures in the window and their cumulative PSD."""

    patient_pseudo_id: str
    study_uids: list[str]
    exam_ids: list[int] = Field(description="the exams' ids, in the order of study_uids")
    peak_skin_dose_mgy: float
    lower_bound_mgy: float
    upper_bound_mgy: float
    method: str = Field(
        description="maps_added (the maps summed cell by cell on one patient-surface grid), "
        "maps_added_assumed_alignment (the same, where a map's place along the body was "
        "assumed), peaks_added (different patient models: the sum of the peaks, an upper "
        "bound) or none"
    )
    notes: list[str]


class PatientSkinDoseRead(CumulativeSkinDoseRead):
    """One pseudonymised patient's skin dose over the follow-up window (an estimate)."""

    window_days: float
    caution: str


class FollowUpList(ReadModel):
    """The follow-up list and the cumulative skin dose of patients with several procedures."""

    items: list[FollowUpItem]
    window_days: float
    cumulative: list[CumulativeSkinDoseRead]
    caution: str


class FollowUpUpdate(InputModel):
    """A follow-up step of one procedure (audited)."""

    status: FollowUpStatus
    note: Text | None = None
