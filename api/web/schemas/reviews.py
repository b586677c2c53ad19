"""Review runs: what to start, what a run is, its flags."""

from __future__ import annotations

from datetime import date, datetime
from typing import Annotated, Any, Literal

from pydantic import AfterValidator, Field, StringConstraints

from beamaudit.api.web.schemas.base import InputModel, Page, ReadModel, Text, clean_text

__all__ = [
    "FlagRead",
    "FlagUpdate",
    "ReviewCreate",
    "ReviewRunPage",
    "ReviewRunRead",
    "ReviewRunSummary",
    "RunSupersede",
]


class ReviewCreate(InputModel):
    """A review of one period against the reference levels in effect."""

    period: Annotated[
        str,
        StringConstraints(pattern=r"^\d{4}-\d{2}(-\d{2}/\d{4}-\d{2}-\d{2})?$", max_length=21),
        Field(
            description="YYYY-MM (a month) or YYYY-MM-DD/YYYY-MM-DD (end exclusive)",
            examples=["2026-11"],
        ),
    ]
    kind: Literal["monthly", "nightly"] = "monthly"
    parameters: dict[str, Any] = Field(
        default_factory=dict,
        description=(
            "review parameters other than the period, by name (sites, rooms, exam_types, group_by, "
            "basis, investigation_multiple, dap_ratio_tolerance, ...); defaults for the rest"
        ),
        max_length=40,
    )


class ReviewRunSummary(ReadModel):
    """A run, its scope, and whether it is its period's record."""

    id: int
    kind: str
    period: str | None
    period_start: date | None
    period_end: date | None = Field(description="exclusive")
    scope: dict[str, list[str]] = Field(
        description="the filters that narrowed the run (sites, rooms, devices, exam_types); "
        "{} for the whole site"
    )
    whole_site: bool
    scope_text: str = Field(examples=["room RAD A, 2026-11", "whole site, 2026-11"])
    record: bool = Field(
        description="the run is its month's record: the newest finished whole-site monthly run "
        "of a calendar month, not superseded (the pages and the committee report show it)"
    )
    status: str = Field(description="pending, running, done or failed")
    software_version: str
    started_at: datetime
    finished_at: datetime | None
    error: str | None
    superseded_at: datetime | None
    superseded_by: str | None
    supersede_reason: str | None


class ReviewRunPage(Page[ReviewRunSummary]):
    pass


class ReviewRunRead(ReviewRunSummary):
    """A run with everything needed to repeat it."""

    parameters: dict[str, Any]
    level_sets: list[dict[str, Any]]
    n_flags: int
    caution: str


class FlagRead(ReadModel):
    """A review's flag: its reason and the numbers behind it, and the triage of its finding.

    A flag is one run's occurrence of a finding; a later run that finds the same thing (kind,
    subject, period) adds a flag to the same finding, whose triage carries over. ``event_id`` and
    ``study_instance_uid`` are shown to physicists only.
    """

    id: int
    review_run_id: int
    finding_id: int
    kind: str
    severity: str
    reason: str
    numbers: dict[str, Any]
    changes: dict[str, Any] | None = Field(
        description="what differs from the finding's previous flag, {name: {before, after}}; "
        "null when the finding was new"
    )
    room: str | None
    exam_type: str | None
    clinical_indication: str | None = Field(
        default=None, description="the group's clinical indication, when it has one"
    )
    patient_group: str | None = Field(
        default=None, description="the group's paediatric band (ICRP 135), when it has one"
    )
    event_id: int | None
    study_instance_uid: str | None
    status: str = Field(description="the finding's: open, acknowledged or closed")
    note: str | None = Field(description="why it was acknowledged or closed")
    status_by: str | None
    status_at: datetime | None
    created_at: datetime


class FlagUpdate(InputModel):
    """The triage of a flag's finding; acknowledging or closing needs a note."""

    status: Literal["open", "acknowledged", "closed"]
    note: Text | None = Field(default=None, description="why (needed to acknowledge or close)")


class RunSupersede(InputModel):
    """Why a run no longer stands as its period's record."""

    reason: Annotated[
        str,
        StringConstraints(strip_whitespace=True, min_length=1, max_length=4000),
        AfterValidator(clean_text),
    ]
