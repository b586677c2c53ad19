"""DICOMweb sources we pull from, with their watermarks (admins only)."""

from __future__ import annotations

from fastapi import status
from sqlalchemy import select

from beamaudit.api.store import models as m
from beamaudit.api.web.deps import Admin, DbSession
from beamaudit.api.web.routes._common import (
    AUTH_RESPONSES,
    CONFLICT,
    NOT_FOUND,
    IdPath,
    audit,
    flush,
    get_or_404,
    snapshot,
)
from beamaudit.api.web.routing import Router
from beamaudit.api.web.schemas.admin import SourceCreate, SourceRead, SourceUpdate

__all__ = ["router"]

router = Router(tags=["sources"], responses=AUTH_RESPONSES)

SOURCE_FIELDS = ("name", "url", "credentials", "modalities", "enabled", "watermark_date")
S = m.DicomwebSource


@router.get("/sources", operation_id="list_sources", response_model=list[SourceRead])
def list_sources(session: DbSession, _: Admin) -> list[SourceRead]:
    """Every DICOMweb source, with its watermark and last pull."""
    return [SourceRead.model_validate(r) for r in session.scalars(select(S).order_by(S.name))]


@router.get(
    "/sources/{source_id}",
    operation_id="get_source",
    response_model=SourceRead,
    responses=NOT_FOUND,
)
def get_source(source_id: IdPath, session: DbSession, _: Admin) -> SourceRead:
    """One DICOMweb source."""
    return SourceRead.model_validate(get_or_404(session, S, source_id, "DICOMweb source"))


@router.post(
    "/sources",
    operation_id="create_source",
    response_model=SourceRead,
    status_code=status.HTTP_201_CREATED,
    responses=CONFLICT,
)
def create_source(body: SourceCreate, session: DbSession, who: Admin) -> SourceRead:
    """Add a DICOMweb source (names and URLs are unique)."""
    row = S(**body.model_dump())
    session.add(row)
    flush(session, "a source with this name or URL exists already")
    audit(
        session,
        who,
        action="create",
        entity="dicomweb_source",
        entity_id=row.id,
        after=snapshot(row, SOURCE_FIELDS),
    )
    session.commit()
    return SourceRead.model_validate(row)


@router.patch(
    "/sources/{source_id}",
    operation_id="update_source",
    response_model=SourceRead,
    responses={**NOT_FOUND, **CONFLICT},
)
def update_source(
    source_id: IdPath, body: SourceUpdate, session: DbSession, who: Admin
) -> SourceRead:
    """Change a source; setting ``watermark_date`` moves where the next ``--since last`` starts."""
    row = get_or_404(session, S, source_id, "DICOMweb source")
    before = snapshot(row, SOURCE_FIELDS)
    for name, value in body.model_dump(exclude_unset=True).items():
        setattr(row, name, value)
    flush(session, "a source with this name or URL exists already")
    after = snapshot(row, SOURCE_FIELDS)
    if after != before:
        audit(
            session,
            who,
            action="update",
            entity="dicomweb_source",
            entity_id=row.id,
            before=before,
            after=after,
        )
    session.commit()
    return SourceRead.model_validate(row)


@router.delete(
    "/sources/{source_id}",
    operation_id="delete_source",
    status_code=status.HTTP_204_NO_CONTENT,
    responses=NOT_FOUND,
)
def delete_source(source_id: IdPath, session: DbSession, who: Admin) -> None:
    """Remove a source (what was pulled from it stays stored)."""
    row = get_or_404(session, S, source_id, "DICOMweb source")
    audit(
        session,
        who,
        action="delete",
        entity="dicomweb_source",
        entity_id=row.id,
        before=snapshot(row, SOURCE_FIELDS),
    )
    session.delete(row)
    session.commit()
