"""What every route module shares: error answers, cursor pages, period filters, the audit trail.

Pages are newest first (descending id). The cursor is opaque to clients: the URL-safe base64 of
``v1:<last id>``; a cursor that does not decode is a 422 naming ``cursor``.
"""

from __future__ import annotations

import base64
import binascii
import calendar
from collections.abc import Sequence
from dataclasses import dataclass
from datetime import UTC, date, datetime, time, timedelta
from enum import Enum
from typing import Annotated, Any, NoReturn, TypeVar

from fastapi import Depends, HTTPException, Path, Query, Request, status
from fastapi.exceptions import RequestValidationError
from pydantic import BaseModel, ValidationError
from sqlalchemy import Select
from sqlalchemy.exc import IntegrityError
from sqlalchemy.orm import InstrumentedAttribute, Session, sessionmaker

from beamaudit.api.store.auth import Principal, record_change
from beamaudit.api.web.schemas.base import EARLIEST_DATE, LATEST_DATE, MAX_ID, ErrorBody

__all__ = [
    "AUTH_RESPONSES",
    "CONFLICT",
    "CSV_ANSWER",
    "NOT_FOUND",
    "IdPath",
    "PageParams",
    "Period",
    "SessionFactory",
    "audit",
    "csv_invalid",
    "decode_cursor",
    "encode_cursor",
    "flush",
    "get_or_404",
    "invalid",
    "not_found",
    "page_params",
    "paginate",
    "period_params",
    "read_csv_body",
    "revalidate",
    "snapshot",
]

AUTH_RESPONSES: dict[int | str, dict[str, Any]] = {
    401: {"model": ErrorBody, "description": "No valid API token."},
    403: {"model": ErrorBody, "description": "The token's role is not enough."},
}
NOT_FOUND: dict[int | str, dict[str, Any]] = {
    404: {"model": ErrorBody, "description": "No such id."}
}
CONFLICT: dict[int | str, dict[str, Any]] = {
    409: {"model": ErrorBody, "description": "Conflicts with what is stored."}
}

IdPath = Annotated[int, Path(ge=1, le=MAX_ID, description="row id")]


async def get_session_factory(request: Request) -> sessionmaker[Session]:
    """The app's session factory, for work that runs its own transactions (reviews)."""
    factory: sessionmaker[Session] = request.app.state.session_factory
    return factory


SessionFactory = Annotated[sessionmaker[Session], Depends(get_session_factory)]

MAX_LIMIT = 500
DEFAULT_LIMIT = 100
_CURSOR_PREFIX = "v1:"

RowT = TypeVar("RowT")
ModelT = TypeVar("ModelT", bound=BaseModel)

#: largest CSV table an import accepts (the default of ``api.max_csv_bytes``)
MAX_CSV_BYTES = 8 * 1024 * 1024
CSV_MEDIA_TYPES = ("text/csv", "text/plain", "application/csv")
#: the request body of a CSV import, for the OpenAPI schema
CSV_REQUEST_BODY: dict[str, Any] = {
    "required": True,
    "content": {"text/csv": {"schema": {"type": "string"}}},
}
#: the answer of a CSV export, for the OpenAPI schema
CSV_ANSWER: dict[int | str, dict[str, Any]] = {
    200: {"content": {"text/csv": {"schema": {"type": "string"}}}, "description": "A CSV file."}
}
CSV_RESPONSES: dict[int | str, dict[str, Any]] = {
    400: {
        "model": ErrorBody,
        "description": "Not a CSV table: a NUL byte, a line or a header past the limits.",
    },
    413: {"model": ErrorBody, "description": "The file is larger than the limit."},
    415: {"model": ErrorBody, "description": "Not text/csv."},
}


def invalid(where: tuple[str | int, ...], message: str) -> NoReturn:
    """Answer 422 in FastAPI's own shape, naming the field (``("query", "cursor")``)."""
    raise RequestValidationError([{"loc": where, "msg": message, "type": "value_error"}])


def revalidate(model: type[ModelT], data: dict[str, Any]) -> ModelT:
    """``data`` checked as ``model`` (a row merged with a change); failures answer 422."""
    try:
        return model.model_validate(data)
    except ValidationError as exc:
        raise RequestValidationError(
            [
                {"loc": ("body", *err["loc"]), "msg": err["msg"], "type": err["type"]}
                for err in exc.errors(include_url=False, include_input=False)
            ]
        ) from None


async def read_csv_body(request: Request, limit: int | None = None) -> bytes:
    """The body of a CSV import: 415 if not CSV, 413 once it passes ``limit`` bytes
    (``api.max_csv_bytes``), 400 with the reason when it holds a NUL byte, a line longer than
    ``api.max_csv_row_chars`` or a header of more than ``api.max_csv_columns`` columns: such a
    file is no table, and parsing it whole would cost seconds and memory for nothing."""
    api = request.app.state.settings.api
    limit = api.max_csv_bytes if limit is None else limit
    media_type = request.headers.get("content-type", "").split(";")[0].strip().lower()
    if media_type not in CSV_MEDIA_TYPES:
        raise HTTPException(
            status.HTTP_415_UNSUPPORTED_MEDIA_TYPE, detail="send the table as text/csv"
        )
    chunks: list[bytes] = []
    size = 0
    async for chunk in request.stream():
        size += len(chunk)
        if size > limit:
            raise HTTPException(
                status.HTTP_413_CONTENT_TOO_LARGE, detail=f"the file is larger than {limit} bytes"
            )
        chunks.append(chunk)
    data = b"".join(chunks)
    check_csv_shape(data, max_columns=api.max_csv_columns, max_line=api.max_csv_row_chars)
    return data


def check_csv_shape(data: bytes, *, max_columns: int, max_line: int) -> None:
    """Refuse (400, with the line) a body holding a NUL byte, a line longer than ``max_line``
    bytes, or a header (the first line that is neither blank nor a ``#`` comment) of more than
    ``max_columns`` columns."""
    import csv

    def bad(message: str) -> NoReturn:
        raise HTTPException(status.HTTP_400_BAD_REQUEST, detail=message)

    nul = data.find(b"\x00")
    if nul >= 0:
        where = data.count(b"\n", 0, nul) + 1
        bad(f"line {where} holds a NUL byte: save the table as CSV text")
    header_seen = False
    for number, line in enumerate(data.split(b"\n"), start=1):
        if len(line) > max_line:
            bad(f"line {number} is longer than {max_line} bytes (api.max_csv_row_chars)")
        text = line.strip()
        if header_seen or not text or text.startswith(b"#"):
            continue
        header_seen = True
        columns = next(csv.reader([line.decode("utf-8", "replace")]), [])
        if len(columns) > max_columns:
            bad(f"the header (line {number}) has {len(columns)} columns; at most {max_columns}")


def csv_invalid(exc: Any) -> NoReturn:
    """A :class:`~beamaudit.api.review.errors.CsvFormatError` as a 422, one entry per problem."""
    raise RequestValidationError(
        [
            {
                "loc": ("body", "line", line) if line is not None else ("body",),
                "msg": msg,
                "type": "value_error",
            }
            for line, msg in exc.problems
        ]
    )


# -- lookups and writes ---------------------------------------------------------------------------
def not_found(what: str, key: Any) -> NoReturn:
    """Answer 404: there is no ``what`` with id ``key``."""
    raise HTTPException(status.HTTP_404_NOT_FOUND, detail=f"no {what} with id {key}")


def get_or_404(session: Session, model: type[RowT], key: Any, what: str) -> RowT:
    """The row of ``model`` with primary key ``key``, or a 404 naming ``what``."""
    row = session.get(model, key)
    if row is None:
        not_found(what, key)
    return row


def flush(session: Session, conflict: str) -> None:
    """Send pending changes (ids are known after); a unique or foreign-key violation rolls the
    transaction back and answers 409 with ``conflict`` as the reason.

    Routes flush, write the audit entry, then commit: the change and its audit entry are one
    transaction.
    """
    try:
        session.flush()
    except IntegrityError:
        session.rollback()
        raise HTTPException(status.HTTP_409_CONFLICT, detail=conflict) from None


def _jsonable(value: Any) -> Any:
    if isinstance(value, datetime | date):
        return value.isoformat()
    if isinstance(value, Enum):
        return value.value
    if isinstance(value, dict):
        return {str(k): _jsonable(v) for k, v in value.items()}
    if isinstance(value, list | tuple):
        return [_jsonable(v) for v in value]
    return value


def snapshot(row: Any, fields: Sequence[str]) -> dict[str, Any]:
    """The named fields of ``row`` as JSON-ready values, for the audit log's before and after."""
    return {name: _jsonable(getattr(row, name)) for name in fields}


def audit(
    session: Session,
    principal: Principal,
    *,
    action: str,
    entity: str,
    entity_id: Any,
    before: dict[str, Any] | None = None,
    after: dict[str, Any] | None = None,
) -> None:
    """Write who changed what, with before and after, in the route's transaction."""
    record_change(
        session,
        actor=principal.actor,
        action=action,
        entity=entity,
        entity_id=entity_id,
        before=before,
        after=after,
    )


# -- cursor pages ---------------------------------------------------------------------------------
def encode_cursor(last_id: int) -> str:
    return base64.urlsafe_b64encode(f"{_CURSOR_PREFIX}{last_id}".encode()).decode("ascii")


def decode_cursor(cursor: str) -> int:
    """The id a cursor stands for; a 422 naming ``cursor`` if it is not one of ours."""
    try:
        text = base64.urlsafe_b64decode(cursor.encode("ascii")).decode("ascii")
    except (binascii.Error, UnicodeError, ValueError):
        invalid(("query", "cursor"), "not a cursor returned by this API")
    if not text.startswith(_CURSOR_PREFIX) or not text[len(_CURSOR_PREFIX) :].isdigit():
        invalid(("query", "cursor"), "not a cursor returned by this API")
    value = int(text[len(_CURSOR_PREFIX) :])
    if not 1 <= value <= MAX_ID:
        invalid(("query", "cursor"), "not a cursor returned by this API")
    return value


@dataclass(frozen=True, slots=True)
class PageParams:
    limit: int
    before_id: int | None


async def page_params(
    limit: Annotated[
        int, Query(ge=1, le=MAX_LIMIT, description=f"items per page, at most {MAX_LIMIT}")
    ] = DEFAULT_LIMIT,
    cursor: Annotated[
        str | None,
        Query(max_length=64, description="next_cursor of the previous page"),
    ] = None,
) -> PageParams:
    return PageParams(limit=limit, before_id=decode_cursor(cursor) if cursor else None)


def paginate(
    session: Session,
    stmt: Select[Any],
    id_column: InstrumentedAttribute[int],
    page: PageParams,
    *,
    columns: bool = False,
) -> tuple[list[Any], str | None]:
    """Run ``stmt`` for one page, newest first; returns the rows and the next cursor.

    ``columns``: ``stmt`` selects columns (one of them ``id_column``'s), not an entity; the rows
    come back as rows.
    """
    if page.before_id is not None:
        stmt = stmt.where(id_column < page.before_id)
    ordered = stmt.order_by(id_column.desc()).limit(page.limit + 1)
    rows = list(session.execute(ordered) if columns else session.scalars(ordered))
    if len(rows) > page.limit:
        rows = rows[: page.limit]
        return rows, encode_cursor(getattr(rows[-1], id_column.key))
    return rows, None


# -- periods --------------------------------------------------------------------------------------
@dataclass(frozen=True, slots=True)
class Period:
    """A half-open interval of UTC timestamps; either end may be open."""

    start: datetime | None
    end: datetime | None


def _day_start(day: date) -> datetime:
    return datetime.combine(day, time(0), tzinfo=UTC)


async def period_params(
    period: Annotated[
        str | None,
        Query(
            pattern=r"^\d{4}-(0[1-9]|1[0-2])$",
            description="a calendar month, YYYY-MM (not together with from/to)",
            examples=["2026-11"],
        ),
    ] = None,
    date_from: Annotated[
        date | None, Query(alias="from", description="first day, inclusive (YYYY-MM-DD)")
    ] = None,
    date_to: Annotated[
        date | None, Query(alias="to", description="last day, inclusive (YYYY-MM-DD)")
    ] = None,
) -> Period:
    if period is not None:
        if date_from is not None or date_to is not None:
            invalid(("query", "period"), "give either period or from/to, not both")
        year, month = (int(x) for x in period.split("-"))
        if not EARLIEST_DATE.year <= year <= LATEST_DATE.year:
            invalid(("query", "period"), f"year must be {EARLIEST_DATE.year}-{LATEST_DATE.year}")
        last = calendar.monthrange(year, month)[1]
        return Period(
            _day_start(date(year, month, 1)),
            _day_start(date(year, month, last)) + timedelta(days=1),
        )
    for name, value in (("from", date_from), ("to", date_to)):
        if value is not None and not EARLIEST_DATE <= value <= LATEST_DATE:
            invalid(("query", name), f"must be between {EARLIEST_DATE} and {LATEST_DATE}")
    if date_from is not None and date_to is not None and date_to < date_from:
        invalid(("query", "to"), "must not be before from")
    return Period(
        _day_start(date_from) if date_from else None,
        _day_start(date_to) + timedelta(days=1) if date_to else None,
    )
