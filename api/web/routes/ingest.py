"""Ingest errors: every file or object that could not be used, with its reason.

They name files and SOP Instance UIDs, so reading them needs the physicist role.
"""

from __future__ import annotations

from typing import Annotated

from fastapi import Depends, Query
from sqlalchemy import select

from beamaudit.api.store import models as m
from beamaudit.api.web.deps import DbSession, Physicist
from beamaudit.api.web.routes._common import (
    AUTH_RESPONSES,
    NOT_FOUND,
    IdPath,
    PageParams,
    Period,
    get_or_404,
    page_params,
    paginate,
    period_params,
)
from beamaudit.api.web.routing import Router, reads_only
from beamaudit.api.web.schemas.base import ShortText
from beamaudit.api.web.schemas.ingest import IngestErrorPage, IngestErrorRead

__all__ = ["router"]

router = Router(tags=["ingest"], responses=AUTH_RESPONSES)

I = m.IngestError  # noqa: E741


@router.get("/ingest-errors", operation_id="list_ingest_errors", response_model=IngestErrorPage)
@reads_only
def list_ingest_errors(
    session: DbSession,
    _: Physicist,
    page: Annotated[PageParams, Depends(page_params)],
    period: Annotated[Period, Depends(period_params)],
    received_via: Annotated[
        ShortText | None, Query(description="scan, listen, pull or upload")
    ] = None,
    code: Annotated[ShortText | None, Query(description="e.g. not_dicom, out_of_range")] = None,
    sop_instance_uid: Annotated[ShortText | None, Query()] = None,
) -> IngestErrorPage:
    """Ingest errors, newest first; the period applies to when they occurred."""
    stmt = select(I)
    for column, value in (
        (I.received_via, received_via),
        (I.code, code),
        (I.sop_instance_uid, sop_instance_uid),
    ):
        if value is not None:
            stmt = stmt.where(column == value)
    if period.start is not None:
        stmt = stmt.where(I.occurred_at >= period.start)
    if period.end is not None:
        stmt = stmt.where(I.occurred_at < period.end)
    rows, cursor = paginate(session, stmt, I.id, page)
    return IngestErrorPage(
        items=[IngestErrorRead.model_validate(r) for r in rows], next_cursor=cursor
    )


@router.get(
    "/ingest-errors/{error_id}",
    operation_id="get_ingest_error",
    response_model=IngestErrorRead,
    responses=NOT_FOUND,
)
@reads_only
def get_ingest_error(error_id: IdPath, session: DbSession, _: Physicist) -> IngestErrorRead:
    """One ingest error."""
    return IngestErrorRead.model_validate(get_or_404(session, I, error_id, "ingest error"))
