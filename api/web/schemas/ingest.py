"""Ingest errors, and the answer to an upload of DICOM files."""

from __future__ import annotations

from datetime import datetime
from typing import Literal

from pydantic import BaseModel, Field

from beamaudit.api.web.schemas.base import Page, ReadModel

__all__ = ["IngestErrorPage", "IngestErrorRead", "UploadFileResult", "UploadResult"]


class IngestErrorRead(ReadModel):
    """An input that could not be used, with its reason; the batch it came in went on."""

    id: int
    occurred_at: datetime
    received_via: str = Field(description="scan, listen, pull or upload")
    source: str = Field(description="path, AE title and address, URL or uploaded file name")
    sop_instance_uid: str | None
    code: str
    reason: str


class IngestErrorPage(Page[IngestErrorRead]):
    pass


class UploadFileResult(BaseModel):
    """What became of one uploaded file."""

    name: str = Field(description="the file's name as uploaded (or 'body' for a raw upload)")
    status: Literal["stored", "duplicate", "conflict", "error"]
    sop_instance_uid: str | None = None
    events: int = Field(default=0, description="exposure events stored")
    event_ids: list[int] = Field(default_factory=list)
    code: str | None = Field(default=None, description="the ingest error code, for status error")
    reason: str | None = None


class UploadResult(BaseModel):
    """One result per uploaded file, in upload order, and the counts."""

    files: list[UploadFileResult]
    stored: int
    duplicates: int
    conflicts: int
    errors: int
