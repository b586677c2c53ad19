"""API tokens, the audit log, and DICOMweb sources (the admin's business)."""

from __future__ import annotations

from datetime import date, datetime
from typing import Annotated, Any, Literal

from pydantic import AfterValidator, Field, HttpUrl, StringConstraints, TypeAdapter

from beamaudit.api.web.schemas.base import (
    InputModel,
    Name,
    Page,
    ReadModel,
    clean_text,
    date_within,
    not_null,
)

__all__ = [
    "AuditEntryRead",
    "AuditPage",
    "SourceCreate",
    "SourceRead",
    "SourceUpdate",
    "TokenCreate",
    "TokenCreated",
    "TokenRead",
]


# -- tokens ---------------------------------------------------------------------------------------
class TokenCreate(InputModel):
    role: Literal["viewer", "physicist", "admin"]
    name: Name | None = Field(default=None, description="who or what the token is for")
    expires_in_days: int | None = Field(
        default=None, ge=1, le=3650, description="days the token stays valid; none: until revoked"
    )


class TokenRead(ReadModel):
    """A token's record; the token itself is never stored, only its hash."""

    id: int
    name: str | None
    role: str
    created_at: datetime
    revoked_at: datetime | None
    last_used_at: datetime | None = Field(description="last use, to the minute")
    expires_at: datetime | None = Field(default=None, description="none: valid until revoked")


class TokenCreated(TokenRead):
    token: str = Field(description="the token, shown this once: keep it, it cannot be shown again")


# -- audit log ------------------------------------------------------------------------------------
class AuditEntryRead(ReadModel):
    """Who changed what, when, with the values before and after."""

    id: int
    at: datetime
    actor: str
    action: str
    entity: str
    entity_id: str | None
    before: dict[str, Any] | None
    after: dict[str, Any] | None


class AuditPage(Page[AuditEntryRead]):
    pass


# -- DICOMweb sources -----------------------------------------------------------------------------
def _http_url(value: str) -> str:
    """An http(s) URL, normalised by pydantic's ``HttpUrl``, kept as text; never with a login."""
    url = _HTTP_URL.validate_python(value)
    if url.username or url.password:
        raise ValueError(
            "the URL holds a login (user:password@); name a login of the settings in "
            "'credentials' instead (pull.credentials.NAME), never a password in a URL"
        )
    return clean_text(str(url))


_HTTP_URL: TypeAdapter[HttpUrl] = TypeAdapter(HttpUrl)

SourceUrl = Annotated[
    str,
    Field(
        max_length=2000,
        json_schema_extra={"format": "uri"},
        description="the server's DICOMweb root, http(s)",
        examples=["http://pacs.example.org/dicom-web"],
    ),
    AfterValidator(_http_url),
]
ModalityCode = Annotated[str, StringConstraints(pattern=r"^[A-Z0-9]{2,16}$")]
Modalities = Annotated[
    list[ModalityCode], Field(max_length=30, description="DICOM modalities to pull (empty: all)")
]


Credentials = Annotated[
    str,
    StringConstraints(pattern=r"^[A-Za-z0-9_.-]{1,64}$"),
    Field(description="the name of a login in the settings (pull.credentials.NAME), not the login"),
]


class SourceCreate(InputModel):
    name: Name
    url: SourceUrl
    credentials: Credentials | None = None
    modalities: Modalities = Field(default_factory=list)
    enabled: bool = True
    watermark_date: date | None = Field(
        default=None, description="newest study date pulled; the next `--since last` starts there"
    )

    _dates = date_within("watermark_date")


class SourceUpdate(InputModel):
    """Fields to change; ``watermark_date: null`` makes the next pull start from the beginning."""

    name: Name | None = None
    url: SourceUrl | None = None
    credentials: Credentials | None = None
    modalities: Modalities | None = None
    enabled: bool | None = None
    watermark_date: date | None = None

    _dates = date_within("watermark_date")
    _not_null = not_null("name", "url", "modalities", "enabled")


class SourceRead(ReadModel):
    id: int
    name: str
    url: str
    credentials: str | None = Field(default=None, description="the name of its login, if any")
    modalities: list[str]
    enabled: bool
    watermark_date: date | None
    last_pull_at: datetime | None
    last_pull_report: dict[str, Any] | None
