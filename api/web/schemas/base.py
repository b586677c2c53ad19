"""Building blocks shared by every API schema: base models, safe text, pages, error bodies.

Input models forbid unknown fields (a typo in a field name is a 422 naming it, never silently
ignored) and refuse NaN and infinities (JSON cannot carry them and a NaN hides an error). Text
fields refuse NUL characters and lone surrogates, which neither store can keep.
"""

from __future__ import annotations

from datetime import date
from typing import Annotated, Any, Generic, TypeVar

from pydantic import (
    AfterValidator,
    BaseModel,
    ConfigDict,
    Field,
    StringConstraints,
    field_validator,
)

__all__ = [
    "MAX_ID",
    "ErrorBody",
    "FiniteFloat",
    "Id",
    "InputModel",
    "Name",
    "Page",
    "ReadModel",
    "ShortText",
    "Text",
    "clean_text",
    "date_within",
    "not_null",
]

#: Largest id a path or body accepts (PostgreSQL ``integer``, the type of every id column).
MAX_ID = 2**31 - 1


def clean_text(value: str) -> str:
    """Refuse text that neither store can keep (NUL characters, lone surrogates)."""
    if "\x00" in value:
        raise ValueError("must not contain NUL characters")
    try:
        value.encode("utf-8")
    except UnicodeEncodeError:
        raise ValueError("must be valid Unicode text (no lone surrogates)") from None
    return value


#: Free text (notes, sources), at most 4000 characters.
Text = Annotated[str, StringConstraints(max_length=4000), AfterValidator(clean_text)]
#: A short value (a modality, a pattern, a filter value), at most 200 characters.
ShortText = Annotated[str, StringConstraints(max_length=200), AfterValidator(clean_text)]
#: A name: surrounding blanks stripped, 1 to 200 characters.
Name = Annotated[
    str,
    StringConstraints(strip_whitespace=True, min_length=1, max_length=200),
    AfterValidator(clean_text),
]
#: A row id.
Id = Annotated[int, Field(ge=1, le=MAX_ID)]
#: A finite float (the JSON body cannot carry NaN or infinity anyway; this says so in the schema).
FiniteFloat = Annotated[float, Field(allow_inf_nan=False)]


#: Dates the store is asked to keep or filter by (far outside them is a typing error).
EARLIEST_DATE = date(1900, 1, 1)
LATEST_DATE = date(2999, 12, 31)


def not_null(*names: str) -> Any:
    """A validator for update bodies: these fields may be left out, but not set to null."""

    def check(value: Any) -> Any:
        if value is None:
            raise ValueError("cannot be null (leave the field out to keep its value)")
        return value

    return field_validator(*names)(check)


def date_within(*names: str) -> Any:
    """A validator: these dates lie between :data:`EARLIEST_DATE` and :data:`LATEST_DATE`."""

    def check(value: date | None) -> date | None:
        if value is not None and not EARLIEST_DATE <= value <= LATEST_DATE:
            raise ValueError(f"must be between {EARLIEST_DATE} and {LATEST_DATE}")
        return value

    return field_validator(*names)(check)


class InputModel(BaseModel):
    """Base of request bodies: unknown fields and non-finite numbers are refused."""

    model_config = ConfigDict(extra="forbid", allow_inf_nan=False)


class ReadModel(BaseModel):
    """Base of response bodies, read from table rows."""

    model_config = ConfigDict(from_attributes=True)


class ErrorBody(BaseModel):
    """An error answer: one sentence saying what is wrong."""

    detail: str


T = TypeVar("T")


class Page(BaseModel, Generic[T]):
    """One page of a list, newest first; pass ``next_cursor`` back as ``cursor`` for the next."""

    items: list[T]
    next_cursor: str | None = Field(
        description="Opaque cursor of the next page; null on the last page."
    )
