"""Review runs: what to start, what a run is, its flags."""

from __future__ import annotations

from datetime import datetime
from typing import Annotated, Any, Literal

from pydantic import Field, StringConstraints

from beamaudit.api.schemas._base import InputModel, Page, ReadModel

__all__ = [
    "FlagRead",
    "FlagUpdate",
    "ReviewCreate",
    "ReviewRunPage",
    "ReviewRunRead",
    "ReviewRunSummary",
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
    id: int
    kind: str
    period: str | None
    status: str = Field(description="pending, running, done or failed")
    software_version: str
    started_at: datetime
    finished_at: datetime | None
    error: str | None


class ReviewRunPage(Page[ReviewRunSummary]):
    pass


class ReviewRunRead(ReviewRunSummary):
    """A run with everything needed to repeat it."""

    parameters: dict[str, Any]
    level_sets: list[dict[str, Any]]
    n_flags: int
    caution: str


class FlagRead(ReadModel):
    """A finding of a review: its reason and the numbers behind it.

    ``event_id`` and ``study_instance_uid`` are shown to physicists only.
    """

    id: int
    review_run_id: int
    kind: str
    severity: str
    reason: str
    numbers: dict[str, Any]
    room: str | None
    exam_type: str | None
    event_id: int | None
    study_instance_uid: str | None
    status: str = Field(description="open, acknowledged or closed")
    created_at: datetime


class FlagUpdate(InputModel):
    status: Literal["open", "acknowledged", "closed"]
