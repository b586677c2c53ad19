"""Reference-level sets (local and national DRLs), versioned by the date they take effect."""

from __future__ import annotations

from datetime import date, datetime
from typing import Annotated, Literal

from pydantic import Field, ValidationInfo, field_validator, model_validator

from beamaudit.api.review.errors import ReviewError
from beamaudit.api.review.quantities import QUANTITIES, to_canonical_unit
from beamaudit.api.web.schemas.base import (
    FiniteFloat,
    InputModel,
    Name,
    ReadModel,
    ShortText,
    Text,
    date_within,
    not_null,
)
from beamaudit.api.web.schemas.catalogue import ExamTypeCode, QuantityName

__all__ = ["LevelCreate", "LevelRead", "LevelSetCreate", "LevelSetRead", "LevelSetUpdate"]


class LevelCreate(InputModel):
    """One level; a value in another unit of the quantity's dimension is converted on the way in."""

    exam_type: ExamTypeCode
    quantity: QuantityName
    value: Annotated[FiniteFloat, Field(gt=0, le=1e9)]
    unit: ShortText | None = Field(
        default=None,
        description="the value's unit (e.g. mGy.cm2 for DAP); null: the quantity's own",
    )
    source: Text | None = Field(
        default=None, description="the published table and row it comes from"
    )
    patient_group: str = Field(
        default="",
        max_length=64,
        description="empty: adults; else a paediatric band (ICRP 135, EC RP 185), e.g. "
        "weight_15_30kg, a CT size band (ct_dw_20_25cm) or a mammography compressed-thickness "
        "band (breast_50_60mm)",
    )
    clinical_indication: str = Field(
        default="",
        pattern=r"^([a-z0-9][a-z0-9_]*)?$",
        max_length=64,
        description="empty: every examination of the type; else one indication (acute_stroke)",
    )

    @field_validator("patient_group")
    @classmethod
    def _a_band(cls, value: str) -> str:
        from beamaudit.api.review.bands import load_default_patient_groups
        from beamaudit.api.review.levels import patient_group_problem

        problem = patient_group_problem(value, load_default_patient_groups())
        if problem:
            raise ValueError(problem)
        return value

    @model_validator(mode="after")
    def _own_unit(self) -> LevelCreate:
        own = QUANTITIES[self.quantity].unit
        if self.unit is not None and self.unit != own:
            try:
                self.value = to_canonical_unit(self.quantity, self.value, self.unit)
            except ReviewError as exc:
                raise ValueError(f"unit: {exc}") from None
        self.unit = own
        return self


Levels = Annotated[list[LevelCreate], Field(max_length=5000)]


def _levels_consistent(
    levels: list[LevelCreate] | None, kind: str | None
) -> list[LevelCreate] | None:
    if levels is None:
        return None
    seen: set[tuple[str, str, str, str]] = set()
    for level in levels:
        key = (level.exam_type, level.quantity, level.patient_group, level.clinical_indication)
        if key in seen:
            qualifier = " ".join(x for x in key[2:] if x)
            raise ValueError(
                f"{level.exam_type} {level.quantity}{' ' + qualifier if qualifier else ''} "
                "is given twice"
            )
        seen.add(key)
        if kind in ("national", "international") and not (level.source or "").strip():
            raise ValueError(
                f"{level.exam_type} {level.quantity}: {'an' if kind[0] == 'i' else 'a'} {kind} "
                "level needs its published source"
            )
    return levels


class LevelSetCreate(InputModel):
    name: Name = Field(description="the same for every version of the set")
    kind: Literal["national", "local", "international"]
    version: Name = Field(examples=["2024-11-20"])
    effective_from: date
    source: Text | None = Field(
        default=None, description="the document, or who decided a local set"
    )
    levels: Levels

    _dates = date_within("effective_from")

    @field_validator("levels")
    @classmethod
    def _consistent(cls, value: list[LevelCreate], info: ValidationInfo) -> list[LevelCreate]:
        _levels_consistent(value, info.data.get("kind"))
        return value


class LevelSetUpdate(InputModel):
    """Fields to change; ``levels`` replaces every level of the set."""

    version: Name | None = None
    effective_from: date | None = None
    source: Text | None = None
    levels: Levels | None = None

    _dates = date_within("effective_from")
    _not_null = not_null("version", "effective_from", "levels")

    @field_validator("levels")
    @classmethod
    def _consistent(cls, value: list[LevelCreate] | None) -> list[LevelCreate] | None:
        return _levels_consistent(value, None)


class LevelRead(ReadModel):
    id: int
    exam_type: str
    quantity: str
    value: float
    unit: str
    source: str | None
    patient_group: str
    clinical_indication: str


class LevelSetRead(ReadModel):
    id: int
    name: str
    kind: str
    version: str
    effective_from: date
    source: str | None
    retired_at: datetime | None
    created_at: datetime
    levels: list[LevelRead]
