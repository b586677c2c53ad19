"""The exam-type catalogue and the mapping rules, one by one or as CSV files.

The CSV layouts are the review core's (:mod:`beamaudit.api.review.examtypes`), so a file exported
here is read back by ``beamaudit`` and by a spreadsheet alike. Every change is audited.
"""

from __future__ import annotations

import io
from datetime import UTC, datetime
from typing import Annotated, Any, cast

from fastapi import Depends, HTTPException, Path, Query, Request, status
from fastapi.concurrency import run_in_threadpool
from fastapi.responses import Response
from sqlalchemy import func, select
from sqlalchemy.orm import Session

from beamaudit import __version__
from beamaudit.api.review.errors import CsvFormatError, ReviewError
from beamaudit.api.review.examtypes import (
    ExamCatalogue,
    ExamType,
    MappingRules,
    read_catalogue_csv,
    read_rules_csv,
    write_catalogue_csv,
    write_rules_csv,
)
from beamaudit.api.store import models as m
from beamaudit.api.store.review_rows import (
    catalogue_from_store,
    ensure_catalogue,
    exam_type_from_row,
    exam_type_row_values,
    rules_from_store,
)
from beamaudit.api.web.deps import DbSession, Physicist
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
    revalidate,
    snapshot,
)
from beamaudit.api.web.routing import Router
from beamaudit.api.web.schemas.catalogue import (
    ExamTypeCreate,
    ExamTypeRead,
    ExamTypeUpdate,
    MappingRuleCreate,
    MappingRuleRead,
    MappingRuleUpdate,
)

__all__ = ["CatalogueSession", "router"]


def catalogue_session(session: DbSession, who: Physicist) -> Session:
    """The request's session, after an empty store got the shipped catalogue and rules.

    The review bridge seeds them on first use
    (:func:`beamaudit.api.store.review_rows.ensure_catalogue`); the catalogue routes do the same,
    so that what they show is what a review would use.
    """
    ensure_catalogue(session, actor=who.actor)
    session.commit()
    return session


#: a physicist's session on a store whose catalogue is seeded
CatalogueSession = Annotated[Session, Depends(catalogue_session)]


router = Router(tags=["catalogue"], responses=AUTH_RESPONSES)

T = m.ExamTypeRow
R = m.MappingRuleRow
CodePath = Annotated[
    str, Path(pattern=r"^[a-z0-9][a-z0-9_]*$", max_length=64, description="exam type")
]
RULE_FIELDS_AUDITED = ("priority", "exam_type", "patterns", "note")


def _exam_type_read(row: m.ExamTypeRow) -> ExamTypeRead:
    t = exam_type_from_row(row)
    return ExamTypeRead(
        exam_type=t.exam_type,
        name=t.name,
        modality_group=t.modality_group,
        dicom_modalities=list(t.dicom_modalities),
        level_applies_per=t.level_applies_per,
        quantities=list(t.quantities),
        aggregation=dict(t.aggregation),
        description=t.description,
    )


def _exam_type_values(body: ExamTypeCreate, *, paediatric_bands: str = "") -> dict[str, Any]:
    """The row's values, through the store's one mapping (a change keeps the row's banding)."""
    fields = body.model_dump()
    for name in ("dicom_modalities", "quantities"):
        fields[name] = tuple(fields[name])
    fields["aggregation"] = tuple(fields["aggregation"].items())
    return exam_type_row_values(ExamType(**fields, paediatric_bands=cast(Any, paediatric_bands)))


def _exam_type_audit(row: m.ExamTypeRow) -> dict[str, Any]:
    return _exam_type_read(row).model_dump()


def _csv_response(text: str, filename: str) -> Response:
    return Response(
        text,
        media_type="text/csv; charset=utf-8",
        headers={"Content-Disposition": f'attachment; filename="{filename}"'},
    )


def _exported_comment(what: str) -> str:
    return f"{what} exported by beamaudit {__version__} on {datetime.now(UTC):%Y-%m-%d %H:%M} UTC"


def _uses_of(session: Session, code: str) -> list[str]:
    uses = []
    rules = session.scalar(select(func.count()).select_from(R).where(R.exam_type == code)) or 0
    if rules:
        uses.append(f"{rules} mapping rule(s)")
    levels = (
        session.scalar(
            select(func.count())
            .select_from(m.ReferenceLevelRow)
            .where(m.ReferenceLevelRow.exam_type == code)
        )
        or 0
    )
    if levels:
        uses.append(f"{levels} reference level(s)")
    return uses


# -- exam types -----------------------------------------------------------------------------------
@router.get("/exam-types", operation_id="list_exam_types", response_model=list[ExamTypeRead])
def list_exam_types(session: CatalogueSession, _: Physicist) -> list[ExamTypeRead]:
    """The exam-type catalogue, by identifier."""
    return [_exam_type_read(r) for r in session.scalars(select(T).order_by(T.code))]


@router.get(
    "/exam-types.csv",
    operation_id="export_exam_types_csv",
    response_class=Response,
    responses=CSV_ANSWER,
)
def export_exam_types_csv(session: CatalogueSession, _: Physicist) -> Response:
    """The catalogue as a CSV file (the layout ``beamaudit`` reads)."""
    catalogue = ExamCatalogue(
        types=catalogue_from_store(session).types, comments=(_exported_comment("exam types"),)
    )
    return _csv_response(write_catalogue_csv(catalogue) or "", "exam_types.csv")


def _import_catalogue(
    session: Session, who: Any, catalogue: ExamCatalogue, replace: bool
) -> list[ExamTypeRead]:
    incoming = {t.exam_type for t in catalogue.types}
    if replace:
        for stale in session.scalars(select(T).where(T.code.not_in(incoming))):
            uses = _uses_of(session, stale.code)
            if uses:
                invalid(
                    ("query", "replace"),
                    f"exam type {stale.code!r} is not in the file but {', '.join(uses)} use it",
                )
            audit(
                session,
                who,
                action="delete",
                entity="exam_type",
                entity_id=stale.code,
                before=_exam_type_audit(stale),
            )
            session.delete(stale)
    for t in catalogue.types:
        values = exam_type_row_values(t)
        row = session.get(T, t.exam_type)
        if row is None:
            row = T(**values)
            session.add(row)
            session.flush()
            audit(
                session,
                who,
                action="create",
                entity="exam_type",
                entity_id=row.code,
                after=_exam_type_audit(row),
            )
            continue
        before = _exam_type_audit(row)
        for name, value in values.items():
            setattr(row, name, value)
        after = _exam_type_audit(row)
        if after != before:
            audit(
                session,
                who,
                action="update",
                entity="exam_type",
                entity_id=row.code,
                before=before,
                after=after,
            )
    session.commit()
    return [_exam_type_read(r) for r in session.scalars(select(T).order_by(T.code))]


@router.post(
    "/exam-types.csv",
    operation_id="import_exam_types_csv",
    response_model=list[ExamTypeRead],
    openapi_extra={"requestBody": CSV_REQUEST_BODY},
    responses=CSV_RESPONSES,
)
async def import_exam_types_csv(
    request: Request,
    session: CatalogueSession,
    who: Physicist,
    replace: Annotated[
        bool,
        Query(description="also remove exam types the file does not list (refused while in use)"),
    ] = False,
) -> list[ExamTypeRead]:
    """Add or update exam types from a CSV file (every problem answered with its line)."""
    data = await read_csv_body(request)
    try:
        catalogue = read_catalogue_csv(io.BytesIO(data))
    except CsvFormatError as exc:
        csv_invalid(exc)
    return await run_in_threadpool(_import_catalogue, session, who, catalogue, replace)


@router.get(
    "/exam-types/{exam_type}",
    operation_id="get_exam_type",
    response_model=ExamTypeRead,
    responses=NOT_FOUND,
)
def get_exam_type(exam_type: CodePath, session: CatalogueSession, _: Physicist) -> ExamTypeRead:
    """One exam type."""
    return _exam_type_read(get_or_404(session, T, exam_type, "exam type"))


@router.post(
    "/exam-types",
    operation_id="create_exam_type",
    response_model=ExamTypeRead,
    status_code=status.HTTP_201_CREATED,
    responses=CONFLICT,
)
def create_exam_type(
    body: ExamTypeCreate, session: CatalogueSession, who: Physicist
) -> ExamTypeRead:
    """Add an exam type to the catalogue."""
    if session.get(T, body.exam_type) is not None:
        raise HTTPException(
            status.HTTP_409_CONFLICT, detail=f"exam type {body.exam_type!r} exists already"
        )
    row = T(**_exam_type_values(body))
    session.add(row)
    flush(session, f"exam type {body.exam_type!r} exists already")
    audit(
        session,
        who,
        action="create",
        entity="exam_type",
        entity_id=row.code,
        after=_exam_type_audit(row),
    )
    session.commit()
    return _exam_type_read(row)


@router.patch(
    "/exam-types/{exam_type}",
    operation_id="update_exam_type",
    response_model=ExamTypeRead,
    responses=NOT_FOUND,
)
def update_exam_type(
    exam_type: CodePath, body: ExamTypeUpdate, session: CatalogueSession, who: Physicist
) -> ExamTypeRead:
    """Change an exam type; the result is checked as a whole (aggregation against quantities)."""
    row = get_or_404(session, T, exam_type, "exam type")
    before = _exam_type_audit(row)
    merged = revalidate(ExamTypeCreate, {**before, **body.model_dump(exclude_unset=True)})
    banding = exam_type_from_row(row).paediatric_bands
    for name, value in _exam_type_values(merged, paediatric_bands=banding).items():
        setattr(row, name, value)
    after = _exam_type_audit(row)
    if after != before:
        audit(
            session,
            who,
            action="update",
            entity="exam_type",
            entity_id=row.code,
            before=before,
            after=after,
        )
    session.commit()
    return _exam_type_read(row)


@router.delete(
    "/exam-types/{exam_type}",
    operation_id="delete_exam_type",
    status_code=status.HTTP_204_NO_CONTENT,
    responses={**NOT_FOUND, **CONFLICT},
)
def delete_exam_type(exam_type: CodePath, session: CatalogueSession, who: Physicist) -> None:
    """Remove an exam type no mapping rule or reference level uses."""
    row = get_or_404(session, T, exam_type, "exam type")
    uses = _uses_of(session, exam_type)
    if uses:
        raise HTTPException(
            status.HTTP_409_CONFLICT, detail=f"exam type {exam_type!r} is used by {', '.join(uses)}"
        )
    audit(
        session,
        who,
        action="delete",
        entity="exam_type",
        entity_id=row.code,
        before=_exam_type_audit(row),
    )
    session.delete(row)
    session.commit()


# -- mapping rules --------------------------------------------------------------------------------
def _check_rule(session: Session, exam_type: str, priority: int, rule_id: int | None) -> None:
    if session.get(T, exam_type) is None:
        invalid(("body", "exam_type"), f"exam type {exam_type!r} is not in the catalogue")
    taken = session.scalar(select(R.id).where(R.priority == priority, R.id != (rule_id or 0)))
    if taken is not None:
        raise HTTPException(
            status.HTTP_409_CONFLICT,
            detail=f"rule {taken} has priority {priority} already; priorities are unique",
        )


@router.get(
    "/mapping-rules", operation_id="list_mapping_rules", response_model=list[MappingRuleRead]
)
def list_mapping_rules(session: CatalogueSession, _: Physicist) -> list[MappingRuleRead]:
    """The mapping rules in the order they are tried (ascending priority; first match wins)."""
    return [
        MappingRuleRead.model_validate(r) for r in session.scalars(select(R).order_by(R.priority))
    ]


@router.get(
    "/mapping-rules.csv",
    operation_id="export_mapping_rules_csv",
    response_class=Response,
    responses=CSV_ANSWER,
)
def export_mapping_rules_csv(session: CatalogueSession, _: Physicist) -> Response:
    """The mapping rules as a CSV file (the layout ``beamaudit`` reads)."""
    rules = MappingRules(
        rules=rules_from_store(session).rules, comments=(_exported_comment("mapping rules"),)
    )
    return _csv_response(write_rules_csv(rules) or "", "mapping_rules.csv")


def _replace_rules(session: Session, who: Any, rules: MappingRules) -> list[MappingRuleRead]:
    before = [
        MappingRuleRead.model_validate(r).model_dump()
        for r in session.scalars(select(R).order_by(R.priority))
    ]
    for row in session.scalars(select(R)):
        session.delete(row)
    session.flush()
    for rule in rules.rules:
        session.add(
            R(
                priority=rule.priority,
                exam_type=rule.exam_type,
                patterns=dict(rule.patterns),
                note=rule.note or None,
                clinical_indication=rule.clinical_indication or None,
            )
        )
    session.flush()
    after = [
        MappingRuleRead.model_validate(r).model_dump()
        for r in session.scalars(select(R).order_by(R.priority))
    ]
    audit(
        session,
        who,
        action="replace",
        entity="mapping_rules",
        entity_id=None,
        before={"rules": [{k: v for k, v in r.items() if k != "id"} for r in before]},
        after={"rules": [{k: v for k, v in r.items() if k != "id"} for r in after]},
    )
    session.commit()
    return [
        MappingRuleRead.model_validate(r) for r in session.scalars(select(R).order_by(R.priority))
    ]


def _read_rules(session: Session, data: bytes) -> MappingRules:
    try:
        return read_rules_csv(io.BytesIO(data), catalogue_from_store(session))
    except CsvFormatError as exc:
        csv_invalid(exc)
    except ReviewError as exc:
        invalid(("body",), str(exc))


@router.put(
    "/mapping-rules.csv",
    operation_id="import_mapping_rules_csv",
    response_model=list[MappingRuleRead],
    openapi_extra={"requestBody": CSV_REQUEST_BODY},
    responses=CSV_RESPONSES,
)
async def import_mapping_rules_csv(
    request: Request, session: CatalogueSession, who: Physicist
) -> list[MappingRuleRead]:
    """Replace every mapping rule with the rules of a CSV file (checked against the catalogue)."""
    data = await read_csv_body(request)
    rules = await run_in_threadpool(_read_rules, session, data)
    return await run_in_threadpool(_replace_rules, session, who, rules)


@router.get(
    "/mapping-rules/{rule_id}",
    operation_id="get_mapping_rule",
    response_model=MappingRuleRead,
    responses=NOT_FOUND,
)
def get_mapping_rule(rule_id: IdPath, session: CatalogueSession, _: Physicist) -> MappingRuleRead:
    """One mapping rule."""
    return MappingRuleRead.model_validate(get_or_404(session, R, rule_id, "mapping rule"))


@router.post(
    "/mapping-rules",
    operation_id="create_mapping_rule",
    response_model=MappingRuleRead,
    status_code=status.HTTP_201_CREATED,
    responses=CONFLICT,
)
def create_mapping_rule(
    body: MappingRuleCreate, session: CatalogueSession, who: Physicist
) -> MappingRuleRead:
    """Add a mapping rule (its priority must be free; its exam type in the catalogue)."""
    _check_rule(session, body.exam_type, body.priority, None)
    row = R(**body.model_dump())
    session.add(row)
    flush(session, f"priority {body.priority} is taken")
    audit(
        session,
        who,
        action="create",
        entity="mapping_rule",
        entity_id=row.id,
        after=snapshot(row, RULE_FIELDS_AUDITED),
    )
    session.commit()
    return MappingRuleRead.model_validate(row)


@router.patch(
    "/mapping-rules/{rule_id}",
    operation_id="update_mapping_rule",
    response_model=MappingRuleRead,
    responses={**NOT_FOUND, **CONFLICT},
)
def update_mapping_rule(
    rule_id: IdPath, body: MappingRuleUpdate, session: CatalogueSession, who: Physicist
) -> MappingRuleRead:
    """Change a mapping rule."""
    row = get_or_404(session, R, rule_id, "mapping rule")
    before = snapshot(row, RULE_FIELDS_AUDITED)
    changes = body.model_dump(exclude_unset=True)
    _check_rule(
        session,
        changes.get("exam_type", row.exam_type),
        changes.get("priority", row.priority),
        row.id,
    )
    for name, value in changes.items():
        setattr(row, name, value)
    after = snapshot(row, RULE_FIELDS_AUDITED)
    if after != before:
        audit(
            session,
            who,
            action="update",
            entity="mapping_rule",
            entity_id=row.id,
            before=before,
            after=after,
        )
    session.commit()
    return MappingRuleRead.model_validate(row)


@router.delete(
    "/mapping-rules/{rule_id}",
    operation_id="delete_mapping_rule",
    status_code=status.HTTP_204_NO_CONTENT,
    responses=NOT_FOUND,
)
def delete_mapping_rule(rule_id: IdPath, session: CatalogueSession, who: Physicist) -> None:
    """Remove a mapping rule (events it mapped keep their exam type until mapped again)."""
    row = get_or_404(session, R, rule_id, "mapping rule")
    audit(
        session,
        who,
        action="delete",
        entity="mapping_rule",
        entity_id=row.id,
        before=snapshot(row, RULE_FIELDS_AUDITED),
    )
    session.delete(row)
    session.commit()
