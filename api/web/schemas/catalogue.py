"""The exam-type catalogue and the rules that map raw header values to it.

The accepted values (modality groups, quantities, rule fields, pattern syntax) are the review
core's (:mod:`beamaudit.api.review.examtypes`); the schema lists them as enums.
"""

from __future__ import annotations

import re
from typing import Annotated, Any, Literal

from pydantic import AfterValidator, Field, StringConstraints, ValidationInfo, field_validator

from beamaudit.api.review.examtypes import (
    AGGREGATIONS,
    MODALITY_GROUPS,
    RULE_FIELDS,
    compile_pattern,
)
from beamaudit.api.review.quantities import QUANTITIES, quantity_name
from beamaudit.api.web.schemas.base import (
    InputModel,
    Name,
    ReadModel,
    Text,
    clean_text,
    not_null,
)

__all__ = [
    "ExamTypeCode",
    "ExamTypeCreate",
    "ExamTypeRead",
    "ExamTypeUpdate",
    "MappingRuleCreate",
    "MappingRuleRead",
    "MappingRuleUpdate",
    "Priority",
    "QuantityName",
]


def _one_of(allowed: tuple[str, ...], what: str) -> Any:
    def check(value: str) -> str:
        if value not in allowed:
            raise ValueError(f"{what} must be one of {', '.join(allowed)}")
        return value

    return AfterValidator(check)


#: an exam type's identifier: lower-case ``[a-z0-9_]`` (the review core's rule)
ExamTypeCode = Annotated[
    str,
    StringConstraints(pattern=r"^[a-z0-9][a-z0-9_]*$", max_length=64),
    Field(examples=["chest_pa"]),
]
ModalityGroup = Annotated[
    str,
    Field(json_schema_extra={"enum": list(MODALITY_GROUPS)}),
    _one_of(MODALITY_GROUPS, "modality_group"),
]
#: a quantity's name; an earlier version's name (``QUANTITY_ALIASES``) is taken as its quantity
QuantityName = Annotated[
    str,
    Field(json_schema_extra={"enum": list(QUANTITIES)}),
    AfterValidator(quantity_name),
    _one_of(tuple(QUANTITIES), "quantity"),
]
AggregationRule = Annotated[
    str,
    Field(json_schema_extra={"enum": list(AGGREGATIONS)}),
    _one_of(AGGREGATIONS, "aggregation rule"),
]
DicomModality = Annotated[str, StringConstraints(pattern=r"^[A-Z0-9]{2,16}$")]
LevelAppliesPer = Literal["projection", "examination"]
#: a rule's priority: lower is tried first
Priority = Annotated[int, Field(ge=-1_000_000, le=1_000_000)]


class _ExamTypeFields(InputModel):
    @field_validator("quantities", check_fields=False)
    @classmethod
    def _each_once(cls, value: list[str] | None) -> list[str] | None:
        if value is not None and len(set(value)) != len(value):
            raise ValueError("name each quantity once")
        return value

    @field_validator("aggregation", check_fields=False)
    @classmethod
    def _aggregation_fits(
        cls, value: dict[str, str] | None, info: ValidationInfo
    ) -> dict[str, str] | None:
        if not value:
            return value
        quantities = info.data.get("quantities")
        if quantities is not None:
            unknown = sorted(set(value) - set(quantities))
            if unknown:
                raise ValueError(f"{unknown} not among this exam type's quantities")
        if info.data.get("level_applies_per") == "projection":
            raise ValueError("applies only to examination-level exam types")
        return value


class ExamTypeCreate(_ExamTypeFields):
    """One exam type of the catalogue."""

    exam_type: ExamTypeCode
    name: Name
    modality_group: ModalityGroup
    dicom_modalities: Annotated[list[DicomModality], Field(min_length=1, max_length=20)]
    level_applies_per: LevelAppliesPer = Field(
        description="projection: one value per irradiation event; examination: one per study"
    )
    quantities: Annotated[list[QuantityName], Field(min_length=1, max_length=len(QUANTITIES))]
    aggregation: dict[QuantityName, AggregationRule] = Field(
        default_factory=dict, description="examination types: how a study's events make one value"
    )
    description: Text = ""


class ExamTypeUpdate(_ExamTypeFields):
    """Fields to change (the identifier stays); checked again as a whole after the change."""

    name: Name | None = None
    modality_group: ModalityGroup | None = None
    dicom_modalities: Annotated[list[DicomModality], Field(min_length=1, max_length=20)] | None = (
        None
    )
    level_applies_per: LevelAppliesPer | None = None
    quantities: (
        Annotated[list[QuantityName], Field(min_length=1, max_length=len(QUANTITIES))] | None
    ) = None
    aggregation: dict[QuantityName, AggregationRule] | None = None
    description: Text | None = None

    _not_null = not_null(
        "name",
        "modality_group",
        "dicom_modalities",
        "level_applies_per",
        "quantities",
        "aggregation",
        "description",
    )


class ExamTypeRead(ReadModel):
    exam_type: str
    name: str
    modality_group: str
    dicom_modalities: list[str]
    level_applies_per: str
    quantities: list[str]
    aggregation: dict[str, str]
    description: str


def _pattern(value: str) -> str:
    value = clean_text(value)
    if not value.strip():
        raise ValueError("an empty pattern matches anything; leave the field out instead")
    try:
        compile_pattern(value)
    except re.error as exc:
        raise ValueError(f"invalid regular expression: {exc}") from None
    return value


Pattern = Annotated[
    str,
    StringConstraints(max_length=500),
    AfterValidator(_pattern),
    Field(description="glob (* ? [abc], | between alternatives) or re:<regular expression>"),
]
RuleField = Annotated[
    str, Field(json_schema_extra={"enum": list(RULE_FIELDS)}), _one_of(RULE_FIELDS, "pattern field")
]
Patterns = Annotated[
    dict[RuleField, Pattern],
    Field(
        min_length=1, description="field -> pattern; every pattern must match (case-insensitive)"
    ),
]


#: a clinical indication: lower-case ``[a-z0-9_]`` (the review core's rule)
IndicationCode = Annotated[
    str,
    StringConstraints(pattern=r"^[a-z0-9][a-z0-9_]*$", max_length=64),
    Field(examples=["acute_stroke"]),
]


class MappingRuleCreate(InputModel):
    """A rule: events whose fields match every pattern get ``exam_type`` (first rule wins), and
    ``clinical_indication`` when the rule sets one."""

    priority: Priority
    exam_type: ExamTypeCode
    patterns: Patterns
    note: Text | None = None
    clinical_indication: IndicationCode | None = None


class MappingRuleUpdate(InputModel):
    priority: Priority | None = None
    exam_type: ExamTypeCode | None = None
    patterns: Patterns | None = None
    note: Text | None = None
    clinical_indication: IndicationCode | None = None

    _not_null = not_null("priority", "exam_type", "patterns")


class MappingRuleRead(ReadModel):
    id: int
    priority: int
    exam_type: str
    patterns: dict[str, str]
    note: str | None
    clinical_indication: str | None
