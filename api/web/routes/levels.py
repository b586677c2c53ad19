"""Reference-level sets: create, read, update, retire, and CSV import and export.

A set version is identified by its name and version; versions of one name must agree on their
kind and take effect on different dates (checked by the store's one writer of level sets,
:mod:`beamaudit.api.store.level_sets`, which the command line uses too). A retired
set is kept (past reviews name it) but no longer applies and can no longer change.
"""

from __future__ import annotations

import io
from typing import Annotated, Any, cast

from fastapi import HTTPException, Query, Request, status
from fastapi.concurrency import run_in_threadpool
from fastapi.responses import Response
from sqlalchemy import delete, select
from sqlalchemy.orm import Session

from beamaudit import __version__
from beamaudit.api.review.errors import CsvFormatError, ReviewError
from beamaudit.api.review.levels import (
    LevelKind,
    ReferenceLevelSet,
    read_levels_csv,
    write_levels_csv,
)
from beamaudit.api.store import models as m
from beamaudit.api.store.auth import Principal
from beamaudit.api.store.base import utcnow
from beamaudit.api.store.level_sets import (
    LevelSetConflict,
    add_level_sets,
    check_stored_versions,
    level_set_view,
)
from beamaudit.api.store.review_rows import (
    catalogue_from_store,
    level_set_from_rows,
    level_sets_from_store,
)
from beamaudit.api.web.deps import Physicist
from beamaudit.api.web.routes._common import (
    AUTH_RESPONSES,
    CONFLICT,
    CSV_ANSWER,
    CSV_REQUEST_BODY,
    CSV_RESPONSES,
    NOT_FOUND,
    IdPath,
    audit,
    csv_invalid,
    flush,
    get_or_404,
    invalid,
    read_csv_body,
)
from beamaudit.api.web.routes.catalogue import CatalogueSession
from beamaudit.api.web.routing import Router
from beamaudit.api.web.schemas.base import ShortText
from beamaudit.api.web.schemas.levels import (
    LevelCreate,
    LevelRead,
    LevelSetCreate,
    LevelSetRead,
    LevelSetUpdate,
)

__all__ = ["router"]

router = Router(tags=["levels"], responses=AUTH_RESPONSES)

S = m.ReferenceLevelSetRow
L = m.ReferenceLevelRow


def _levels(session: Session, set_id: int) -> list[m.ReferenceLevelRow]:
    return list(
        session.scalars(
            select(L)
            .where(L.set_id == set_id)
            .order_by(L.exam_type, L.quantity, L.patient_group, L.clinical_indication)
        )
    )


def read_set(session: Session, row: m.ReferenceLevelSetRow) -> LevelSetRead:
    """A stored set version as the API shows it."""
    return _read(session, row)


def _read(session: Session, row: m.ReferenceLevelSetRow) -> LevelSetRead:
    return LevelSetRead(
        id=row.id,
        name=row.name,
        kind=row.kind,
        version=row.version,
        effective_from=row.effective_from,
        source=row.source,
        retired_at=row.retired_at,
        created_at=row.created_at,
        levels=[LevelRead.model_validate(x) for x in _levels(session, row.id)],
    )


def _audit_view(session: Session, row: m.ReferenceLevelSetRow) -> dict[str, Any]:
    return level_set_view(session, row)


def _check_exam_types(session: Session, levels: list[LevelCreate]) -> None:
    catalogue = catalogue_from_store(session)
    for i, level in enumerate(levels):
        if level.exam_type not in catalogue:
            invalid(
                ("body", "levels", i, "exam_type"),
                f"exam type {level.exam_type!r} is not in the catalogue",
            )


def _candidate(body: LevelSetCreate) -> ReferenceLevelSet:
    from beamaudit.api.review.levels import LevelEntry

    return ReferenceLevelSet(
        name=body.name,
        kind=body.kind,
        version=body.version,
        effective_from=body.effective_from,
        source=body.source or "",
        entries=tuple(
            LevelEntry(
                x.exam_type,
                x.quantity,
                x.value,
                x.unit or "",
                x.source or "",
                patient_group=x.patient_group,
                clinical_indication=x.clinical_indication,
            )
            for x in body.levels
        ),
    )


def _add(session: Session, who: Principal, sets: list[ReferenceLevelSet]) -> list[S]:
    """The store's one writer of level sets; a clash answers 409, anything else 422."""
    try:
        return add_level_sets(session, sets, actor=who.actor)
    except LevelSetConflict as exc:
        session.rollback()
        raise HTTPException(status.HTTP_409_CONFLICT, detail=str(exc)) from None
    except ReviewError as exc:
        session.rollback()
        invalid(("body",), str(exc))


@router.get("/level-sets", operation_id="list_level_sets", response_model=list[LevelSetRead])
def list_level_sets(
    session: CatalogueSession,
    _: Physicist,
    include_retired: Annotated[bool, Query(description="also list retired sets")] = False,
    name: Annotated[ShortText | None, Query(description="only the versions of this set")] = None,
) -> list[LevelSetRead]:
    """Reference-level sets by name and effective date, with their levels."""
    stmt = select(S).order_by(S.name, S.effective_from, S.id)
    if not include_retired:
        stmt = stmt.where(S.retired_at.is_(None))
    if name is not None:
        stmt = stmt.where(S.name == name)
    return [_read(session, r) for r in session.scalars(stmt)]


def _csv(sets: list[ReferenceLevelSet], filename: str) -> Response:
    text = (
        write_levels_csv(sets, comments=(f"reference levels exported by beamaudit {__version__}",))
        or ""
    )
    return Response(
        text,
        media_type="text/csv; charset=utf-8",
        headers={"Content-Disposition": f'attachment; filename="{filename}"'},
    )


@router.get(
    "/level-sets.csv",
    operation_id="export_level_sets_csv",
    response_class=Response,
    responses=CSV_ANSWER,
)
def export_level_sets_csv(
    session: CatalogueSession,
    _: Physicist,
    include_retired: Annotated[bool, Query(description="also export retired sets")] = False,
) -> Response:
    """Every set (values in their quantity's own unit) as a CSV file ``beamaudit`` reads back."""
    sets = [s for _, s in level_sets_from_store(session, include_retired=include_retired)]
    return _csv(sets, "reference_levels.csv")


def _import(session: Session, who: Principal, data: bytes) -> list[LevelSetRead]:
    try:
        sets = read_levels_csv(io.BytesIO(data), catalogue_from_store(session))
    except CsvFormatError as exc:
        csv_invalid(exc)
    rows = _add(session, who, sets)
    session.commit()
    return [_read(session, r) for r in rows]


@router.post(
    "/level-sets.csv",
    operation_id="import_level_sets_csv",
    response_model=list[LevelSetRead],
    status_code=status.HTTP_201_CREATED,
    openapi_extra={"requestBody": CSV_REQUEST_BODY},
    responses={**CSV_RESPONSES, **CONFLICT},
)
async def import_level_sets_csv(
    request: Request, session: CatalogueSession, who: Physicist
) -> list[LevelSetRead]:
    """Add the set versions of a CSV file (all or none; every problem answered with its line)."""
    data = await read_csv_body(request)
    return await run_in_threadpool(_import, session, who, data)


@router.get(
    "/level-sets/{set_id}",
    operation_id="get_level_set",
    response_model=LevelSetRead,
    responses=NOT_FOUND,
)
def get_level_set(set_id: IdPath, session: CatalogueSession, _: Physicist) -> LevelSetRead:
    """One set version with its levels."""
    return _read(session, get_or_404(session, S, set_id, "reference-level set"))


@router.get(
    "/level-sets/{set_id}/levels.csv",
    operation_id="export_level_set_csv",
    response_class=Response,
    responses={**CSV_ANSWER, **NOT_FOUND},
)
def export_level_set_csv(set_id: IdPath, session: CatalogueSession, _: Physicist) -> Response:
    """One set version as a CSV file."""
    row = get_or_404(session, S, set_id, "reference-level set")
    return _csv(
        [level_set_from_rows(row, _levels(session, row.id))], f"reference_levels_{row.id}.csv"
    )


@router.post(
    "/level-sets",
    operation_id="create_level_set",
    response_model=LevelSetRead,
    status_code=status.HTTP_201_CREATED,
    responses=CONFLICT,
)
def create_level_set(
    body: LevelSetCreate, session: CatalogueSession, who: Physicist
) -> LevelSetRead:
    """Add a set version; its exam types must be in the catalogue."""
    _check_exam_types(session, body.levels)
    (row,) = _add(session, who, [_candidate(body)])
    session.commit()
    return _read(session, row)


@router.patch(
    "/level-sets/{set_id}",
    operation_id="update_level_set",
    response_model=LevelSetRead,
    responses={**NOT_FOUND, **CONFLICT},
)
def update_level_set(
    set_id: IdPath, body: LevelSetUpdate, session: CatalogueSession, who: Physicist
) -> LevelSetRead:
    """Change a set version that is not retired (``levels`` replaces all its levels)."""
    row = get_or_404(session, S, set_id, "reference-level set")
    if row.retired_at is not None:
        raise HTTPException(
            status.HTTP_409_CONFLICT, detail=f"level set {set_id} is retired and cannot change"
        )
    before = _audit_view(session, row)
    changes = body.model_dump(exclude_unset=True, exclude={"levels"})
    levels = (
        body.levels
        if body.levels is not None
        else [LevelCreate.model_validate(x, from_attributes=True) for x in _levels(session, row.id)]
    )
    if row.kind in ("national", "international"):
        missing = [f"{x.exam_type} {x.quantity}" for x in levels if not (x.source or "").strip()]
        if missing:
            invalid(
                ("body", "levels"),
                f"{'an' if row.kind[0] == 'i' else 'a'} {row.kind} level needs its published "
                f"source: {', '.join(missing)}",
            )
    candidate = LevelSetCreate(
        name=row.name,
        kind=cast(LevelKind, row.kind),  # stored from a validated LevelSetCreate
        version=changes.get("version", row.version),
        effective_from=changes.get("effective_from", row.effective_from),
        source=changes.get("source", row.source),
        levels=levels,
    )
    _check_exam_types(session, candidate.levels)
    try:
        check_stored_versions(session, [_candidate(candidate)], replacing=row.id)
    except LevelSetConflict as exc:
        raise HTTPException(status.HTTP_409_CONFLICT, detail=str(exc)) from None
    for name, value in changes.items():
        setattr(row, name, value)
    if body.levels is not None:
        session.execute(delete(L).where(L.set_id == row.id))
        session.add_all(L(set_id=row.id, **x.model_dump()) for x in body.levels)
    flush(session, f"level set {row.name!r} has a version {candidate.version!r} already")
    after = _audit_view(session, row)
    if after != before:
        audit(
            session,
            who,
            action="update",
            entity="reference_level_set",
            entity_id=row.id,
            before=before,
            after=after,
        )
    session.commit()
    return _read(session, row)


@router.post(
    "/level-sets/{set_id}/retire",
    operation_id="retire_level_set",
    response_model=LevelSetRead,
    responses=NOT_FOUND,
)
def retire_level_set(set_id: IdPath, session: CatalogueSession, who: Physicist) -> LevelSetRead:
    """Stop applying a set version (kept for the reviews that used it; retiring twice: no-op)."""
    row = get_or_404(session, S, set_id, "reference-level set")
    if row.retired_at is None:
        row.retired_at = utcnow()
        audit(
            session,
            who,
            action="retire",
            entity="reference_level_set",
            entity_id=row.id,
            before={"retired_at": None},
            after={"retired_at": row.retired_at.isoformat()},
        )
        session.commit()
    return _read(session, row)
