"""Review runs: start one, follow its status, read its result as JSON, CSV or XLSX, its flags.

A review reads a period's events and compares them with the reference levels in effect
(:mod:`beamaudit.api.runs.reviews` on the store, :mod:`beamaudit.api.review` the core). It is CPU
work: the starting route is a plain function, which FastAPI runs in its thread pool, so the event
loop stays free while it runs; the answer is the finished run (``done`` or ``failed``). A scope
naming a room or exam type the store does not know is a 404 naming the closest known one; a period
with no event in scope is a 409; neither stores a run.

A run keeps its scope; the record of a month (:func:`beamaudit.api.runs.record.record_run`) is what
the pages show. Admins supersede or delete runs. Flags are occurrences of findings
(:mod:`beamaudit.api.runs.findings`): triage (status and note) is the finding's, and carries over to
later runs.

Viewers read runs, results and flags, but never study UIDs or event ids: those are removed from
what a viewer is answered.
"""

from __future__ import annotations

from datetime import date
from typing import Annotated, Any

from fastapi import BackgroundTasks, Depends, HTTPException, Query, Request, status
from fastapi.responses import Response
from sqlalchemy import func, select

from beamaudit import CAUTION
from beamaudit.api.store import models as m
from beamaudit.api.store.auth import Principal, has_role
from beamaudit.api.web.deps import Admin, DbSession, Physicist, Viewer
from beamaudit.api.web.routes._common import (
    AUTH_RESPONSES,
    CONFLICT,
    CSV_ANSWER,
    NOT_FOUND,
    IdPath,
    PageParams,
    SessionFactory,
    get_or_404,
    invalid,
    not_found,
    page_params,
    paginate,
)
from beamaudit.api.web.routing import Router
from beamaudit.api.web.schemas.base import EARLIEST_DATE, LATEST_DATE, ErrorBody, ShortText, Text
from beamaudit.api.web.schemas.reviews import (
    FlagRead,
    FlagUpdate,
    ReviewCreate,
    ReviewRunPage,
    ReviewRunRead,
    ReviewRunSummary,
    RunSupersede,
)

__all__ = ["VIEWER_HIDDEN_KEYS", "for_viewer", "router"]

router = Router(tags=["reviews"], responses=AUTH_RESPONSES)

RUN = m.ReviewRun
F = m.FlagRow
#: keys a viewer is never shown, wherever they sit in a result
VIEWER_HIDDEN_KEYS = frozenset(
    {
        "event_id",
        "event_ids",
        "study_uid",
        "study_instance_uid",
        "sop_instance_uid",
        "accession_number",
        "patient_pseudo_id",
        "irradiation_event_uid",
    }
)
XLSX = "application/vnd.openxmlformats-officedocument.spreadsheetml.sheet"
NOT_DONE: dict[int | str, dict[str, Any]] = {
    409: {"description": "The run has no result (still running, or failed)."}
}


def for_viewer(value: Any) -> Any:
    """``value`` without the keys of :data:`VIEWER_HIDDEN_KEYS`, at any depth."""
    if isinstance(value, dict):
        return {k: for_viewer(v) for k, v in value.items() if k not in VIEWER_HIDDEN_KEYS}
    if isinstance(value, list):
        return [for_viewer(v) for v in value]
    return value


def _is_physicist(who: Principal) -> bool:
    return has_role(who.role, "physicist")


def _summary(run: m.ReviewRun, records: dict[str, int]) -> ReviewRunSummary:
    from beamaudit.api.runs.record import scope_text

    return ReviewRunSummary(
        **{
            name: getattr(run, name)
            for name in ReviewRunSummary.model_fields
            if name not in ("scope_text", "record")
        },
        scope_text=scope_text(run),
        record=records.get(run.period or "") == run.id,
    )


def _read(session: DbSession, run: m.ReviewRun) -> ReviewRunRead:
    from beamaudit.api.runs.record import record_run_ids

    n_flags = (
        session.scalar(select(func.count()).select_from(F).where(F.review_run_id == run.id)) or 0
    )
    return ReviewRunRead(
        **_summary(run, record_run_ids(session)).model_dump(),
        parameters=run.parameters or {},
        level_sets=run.level_sets or [],
        n_flags=n_flags,
        caution=CAUTION,
    )


def _parameters(body: ReviewCreate) -> Any:
    from beamaudit.api.review import Period, ReviewError, ReviewParameters

    try:
        period = Period.parse(body.period)
    except (ReviewError, ValueError) as exc:
        invalid(("body", "period"), str(exc))
    if not (period.start >= EARLIEST_DATE and period.end <= LATEST_DATE):
        invalid(("body", "period"), f"must lie between {EARLIEST_DATE} and {LATEST_DATE}")
    if "period" in body.parameters:
        invalid(("body", "parameters", "period"), "give the period as the body's period field")
    kwargs: dict[str, Any] = {}
    for name, value in body.parameters.items():
        if name == "levels_on" and isinstance(value, str):
            try:
                value = date.fromisoformat(value)
            except ValueError:
                invalid(("body", "parameters", name), "must be a date YYYY-MM-DD")
        elif isinstance(value, list):
            value = tuple(value)
        kwargs[name] = value
    try:
        return ReviewParameters(period=period, **kwargs)
    except ReviewError as exc:
        invalid(("body", "parameters"), str(exc))
    except (TypeError, ValueError) as exc:  # an unknown name or a value of the wrong type
        invalid(("body", "parameters"), f"bad review parameters: {exc}")


@router.post(
    "/reviews",
    operation_id="start_review",
    response_model=ReviewRunRead,
    status_code=status.HTTP_201_CREATED,
    responses={
        404: {"model": ErrorBody, "description": "The scope names an unknown room, exam type, "
              "site or device (the closest known name is given)."},
        409: {"model": ErrorBody, "description": "No event in the period and scope."},
    },
)  # fmt: skip
def start_review(
    body: ReviewCreate,
    sessions: SessionFactory,
    who: Physicist,
    request: Request,
    background: BackgroundTasks,
) -> ReviewRunRead:
    """Run a review of the period and store it; answers the finished run (done or failed).

    After answering, the digests of new findings are sent (the ``[notify]`` settings).

    The run keeps its parameters, its scope, the level-set versions used and the software
    version, so it can be repeated. A whole-site review of a calendar month becomes the month's
    record; a review of a room, exam type or date range is stored beside it.
    """
    from beamaudit.api.runs.record import NoEventsError, UnknownNameError
    from beamaudit.api.runs.reviews import run_review

    params = _parameters(body)
    try:
        run_id = run_review(sessions, params, kind=body.kind, actor=who.actor)
    except UnknownNameError as exc:
        raise HTTPException(status.HTTP_404_NOT_FOUND, detail=str(exc)) from None
    except NoEventsError as exc:
        raise HTTPException(status.HTTP_409_CONFLICT, detail=str(exc)) from None
    from beamaudit.api.runs.notify import notify_and_log

    background.add_task(
        notify_and_log, sessions, request.app.state.settings.notify, trigger="review",
        review_run_id=run_id,
    )  # fmt: skip
    with sessions() as session:
        run = session.get(RUN, run_id)
        assert run is not None
        return _read(session, run)


@router.get("/reviews", operation_id="list_reviews", response_model=ReviewRunPage)
def list_reviews(
    session: DbSession,
    _: Viewer,
    page: Annotated[PageParams, Depends(page_params)],
    period: Annotated[ShortText | None, Query(description="e.g. 2026-11")] = None,
    status_: Annotated[
        ShortText | None, Query(alias="status", description="pending, running, done or failed")
    ] = None,
) -> ReviewRunPage:
    """Review runs, newest first, each with its scope and whether it is its month's record."""
    from beamaudit.api.runs.record import record_run_ids

    stmt = select(RUN)
    if period is not None:
        stmt = stmt.where(RUN.period == period)
    if status_ is not None:
        stmt = stmt.where(RUN.status == status_)
    rows, cursor = paginate(session, stmt, RUN.id, page)
    records = record_run_ids(session)
    return ReviewRunPage(items=[_summary(r, records) for r in rows], next_cursor=cursor)


@router.get(
    "/reviews/{run_id}",
    operation_id="get_review",
    response_model=ReviewRunRead,
    responses=NOT_FOUND,
)
def get_review(run_id: IdPath, session: DbSession, _: Viewer) -> ReviewRunRead:
    """One run: status, parameters, the level sets it used."""
    return _read(session, get_or_404(session, RUN, run_id, "review run"))


def _result(session: DbSession, run_id: int, who: Principal) -> dict[str, Any]:
    run = get_or_404(session, RUN, run_id, "review run")
    if run.status != "done" or run.result is None:
        detail = f"review run {run_id} is {run.status}" + (f": {run.error}" if run.error else "")
        raise HTTPException(status.HTTP_409_CONFLICT, detail=detail)
    result: dict[str, Any] = dict(run.result)
    return result if _is_physicist(who) else for_viewer(result)


@router.get(
    "/reviews/{run_id}/result",
    operation_id="get_review_result",
    response_model=dict[str, Any],
    responses={**NOT_FOUND, **NOT_DONE},
)
def get_review_result(run_id: IdPath, session: DbSession, who: Viewer) -> dict[str, Any]:
    """The run's whole result: groups with their medians and levels, flags, unmapped events."""
    return _result(session, run_id, who)


@router.get(
    "/reviews/{run_id}/result.csv",
    operation_id="get_review_result_csv",
    response_class=Response,
    responses={**CSV_ANSWER, **NOT_FOUND, **NOT_DONE},
)
def get_review_result_csv(run_id: IdPath, session: DbSession, who: Viewer) -> Response:
    """The run's groups as CSV (one row per group and reference level)."""
    from beamaudit.api.runs.export import groups_csv_text

    text = groups_csv_text(_result(session, run_id, who))
    return Response(
        text,
        media_type="text/csv; charset=utf-8",
        headers={"Content-Disposition": f'attachment; filename="review_{run_id}.csv"'},
    )


@router.get(
    "/reviews/{run_id}/result.xlsx",
    operation_id="get_review_result_xlsx",
    response_class=Response,
    responses={
        200: {
            "content": {XLSX: {"schema": {"type": "string", "format": "binary"}}},
            "description": "XLSX",
        },
        **NOT_FOUND,
        **NOT_DONE,
    },
)
def get_review_result_xlsx(run_id: IdPath, session: DbSession, who: Viewer) -> Response:
    """The run as a workbook: the period and method, the groups, the flags."""
    from beamaudit.api.runs.export import xlsx_bytes

    data = xlsx_bytes(_result(session, run_id, who))
    return Response(
        data,
        media_type=XLSX,
        headers={"Content-Disposition": f'attachment; filename="review_{run_id}.xlsx"'},
    )


def _flag_read(flag: m.FlagRow, who: Principal) -> FlagRead:
    finding = flag.finding
    read = FlagRead.model_validate(
        {
            **{name: getattr(flag, name) for name in FlagRead.model_fields if hasattr(flag, name)},
            "clinical_indication": (finding.subject or {}).get("clinical_indication"),
            "patient_group": (finding.subject or {}).get("patient_group"),
            "note": finding.note,
            "status_by": finding.status_by,
            "status_at": finding.status_at,
        }
    )
    if _is_physicist(who):
        return read
    return read.model_copy(
        update={
            "event_id": None,
            "study_instance_uid": None,
            "numbers": for_viewer(read.numbers),
            "changes": for_viewer(read.changes),
        }
    )


@router.get(
    "/reviews/{run_id}/flags",
    operation_id="list_review_flags",
    response_model=list[FlagRead],
    responses=NOT_FOUND,
)
def list_review_flags(
    run_id: IdPath,
    session: DbSession,
    who: Viewer,
    kind: Annotated[ShortText | None, Query(description="e.g. group_above_level")] = None,
) -> list[FlagRead]:
    """The run's flags, in the order the review listed them."""
    get_or_404(session, RUN, run_id, "review run")
    stmt = select(F).where(F.review_run_id == run_id).order_by(F.id)
    if kind is not None:
        stmt = stmt.where(F.kind == kind)
    return [_flag_read(f, who) for f in session.scalars(stmt)]


@router.patch(
    "/reviews/{run_id}/flags/{flag_id}",
    operation_id="update_review_flag",
    response_model=FlagRead,
    responses=NOT_FOUND,
)
def update_review_flag(
    run_id: IdPath, flag_id: IdPath, body: FlagUpdate, session: DbSession, who: Physicist
) -> FlagRead:
    """Triage the flag's finding: acknowledge or close it (with a note saying why), or open it
    again. The triage is the finding's: every run's flag of the same finding shows it, and later
    runs carry it over. Audited."""
    from beamaudit.api.runs.findings import TriageError, triage

    flag = session.get(F, flag_id)
    if flag is None or flag.review_run_id != run_id:
        not_found(f"flag of review run {run_id}", flag_id)
    try:
        triage(session, flag, status=body.status, note=body.note, actor=who.actor)
    except TriageError as exc:
        invalid(("body", "note"), str(exc))
    session.commit()
    return _flag_read(flag, who)


@router.post(
    "/reviews/{run_id}/supersede",
    operation_id="supersede_review",
    response_model=ReviewRunRead,
    responses={**NOT_FOUND, **CONFLICT},
)
def supersede_review(
    run_id: IdPath, body: RunSupersede, session: DbSession, who: Admin
) -> ReviewRunRead:
    """Mark a finished run superseded, with the reason: it stays readable, but is no longer its
    month's record (the month's previous record, if any, stands again). Audited."""
    from beamaudit.api.runs.record import RunStateError, supersede_run

    run = get_or_404(session, RUN, run_id, "review run")
    try:
        supersede_run(session, run, reason=body.reason, actor=who.actor)
    except RunStateError as exc:
        raise HTTPException(status.HTTP_409_CONFLICT, detail=str(exc)) from None
    session.commit()
    return _read(session, run)


@router.delete(
    "/reviews/{run_id}",
    operation_id="delete_review",
    status_code=status.HTTP_204_NO_CONTENT,
    response_class=Response,
    responses={**NOT_FOUND, **CONFLICT},
)
def delete_review(
    run_id: IdPath,
    session: DbSession,
    who: Admin,
    reason: Annotated[Text, Query(min_length=1, description="why the run is deleted")],
) -> Response:
    """Delete a run and its flags (their findings and triage stay: a later run that finds the
    same carries the triage over). Audited with the run's description and the reason."""
    from beamaudit.api.runs.record import RunStateError, delete_run

    if not reason.strip():
        invalid(("query", "reason"), "must not be blank")
    run = get_or_404(session, RUN, run_id, "review run")
    try:
        delete_run(session, run, reason=reason.strip(), actor=who.actor)
    except RunStateError as exc:
        raise HTTPException(status.HTTP_409_CONFLICT, detail=str(exc)) from None
    session.commit()
    return Response(status_code=status.HTTP_204_NO_CONTENT)
