"""The dashboard pages, served behind the API's authentication.

Pages accept the API token as ``Authorization: Bearer``, or the session cookie
that signing in on the login page sets: a browser session of its own (HttpOnly,
SameSite=Strict, Secure over HTTPS, ``api.session_hours`` long), never the token
itself; signing out ends it in the store. A page asked for
without a valid token redirects to ``/login``; one whose role is too low
answers 403. The period overview is ``/``. The exam drill-down shows
individual events and needs the physicist role; the other pages show reviews
and aggregates and need a viewer.

A page shows the record of its month (:func:`beamaudit.api.runs.record.record_run`): runs of a room,
an exam type or a date range never replace it. Refusals are pages too: a bad query parameter
answers 400, an unknown room, exam type, study or period 404 (naming the closest known name where
there is one), each as an HTML page; under ``/api/v1`` the same errors stay JSON.
"""

from __future__ import annotations

from collections.abc import Callable
from datetime import date, timedelta
from pathlib import Path
from typing import Annotated, Any, NoReturn
from urllib.parse import quote

from fastapi import Depends, Form, HTTPException, Query, Request
from fastapi.concurrency import run_in_threadpool
from fastapi.responses import FileResponse, HTMLResponse, RedirectResponse, Response
from sqlalchemy.orm import Session

from beamaudit import __version__
from beamaudit.api.store.auth import (
    Principal,
    authenticate,
    end_browser_session,
    has_role,
    open_browser_session,
)
from beamaudit.api.web.deps import SESSION_COOKIE, DbSession, identify, same_origin
from beamaudit.api.web.routing import Router

__all__ = ["router"]

router = Router(include_in_schema=False)

PERIOD_RE = r"^\d{4}-(0[1-9]|1[0-2])$"


class _LoginRedirect(Exception):
    def __init__(self, next_path: str) -> None:
        self.next_path = next_path


def _page_principal(role: str):
    def check(request: Request, session: DbSession) -> Principal:
        identity = identify(request, session)
        if identity is None:
            path = request.url.path + (f"?{request.url.query}" if request.url.query else "")
            raise _LoginRedirect(path)
        principal = identity.principal
        request.state.csrf_token = identity.csrf_token or ""
        if not has_role(principal.role, role):  # type: ignore[arg-type]
            raise HTTPException(
                403, f"this page needs the {role} role; the token has {principal.role}"
            )
        return principal

    return check


#: a dependency: the signed-in viewer (or higher) of a page, else a redirect to the login page
page_viewer = _page_principal("viewer")
PageViewer = Annotated[Principal, Depends(page_viewer)]
PagePhysicist = Annotated[Principal, Depends(_page_principal("physicist"))]


def _context(request: Request, who: Principal) -> Any:
    from beamaudit.dashboards import PageContext

    return PageContext(
        facility="",
        software_version=__version__,
        signed_in_as=f"{who.name or 'token ' + str(who.token_id)} ({who.role})",
        csrf_token=getattr(request.state, "csrf_token", ""),
    )


def login_redirect_handler(request: Request, exc: Exception) -> Response:
    assert isinstance(exc, _LoginRedirect)
    return RedirectResponse(f"/login?next={quote(exc.next_path)}", status_code=303)


def is_page(request: Request) -> bool:
    """Whether ``request`` is for a page (everything outside the REST API)."""
    return not request.url.path.startswith("/api/")


def error_page(status_code: int, message: str, headers: Any = None) -> HTMLResponse:
    """An HTML page saying why a page request was refused."""
    from beamaudit.dashboards import PageContext, render_error

    return HTMLResponse(
        render_error(status_code, message, context=PageContext(software_version=__version__)),
        status_code=status_code,
        headers=headers,
    )


async def http_error_handler(request: Request, exc: Exception) -> Response:
    """HTTP errors: JSON under ``/api``, an HTML page for the pages (an unknown path included)."""
    from fastapi.exception_handlers import http_exception_handler
    from starlette.exceptions import HTTPException as StarletteHTTPException

    assert isinstance(exc, StarletteHTTPException)
    if not is_page(request):
        return await http_exception_handler(request, exc)
    message = str(exc.detail)
    if exc.status_code == 404 and message == "Not Found":  # no route: Starlette's own words
        message = f"There is no such page: {request.url.path}"
    return error_page(exc.status_code, message, getattr(exc, "headers", None))


#: what a page's parameter must be, in words, for the 400 page
_EXPECTED = {
    "period": "a month written YYYY-MM (such as 2026-11)",
    "status": "open, acknowledged or closed",
    "scale": "log or linear",
}


def invalid_page(exc: Any) -> HTMLResponse:
    """400: the page's query or path parameters, what is wrong with each."""
    problems = []
    for error in exc.errors():
        where = ".".join(str(x) for x in error.get("loc", ())[1:]) or "the request"
        if where in _EXPECTED and error.get("type") == "string_pattern_mismatch":
            problems.append(f"{where} must be {_EXPECTED[where]}, not {error.get('input')!r}")
        else:
            problems.append(f"{where}: {error.get('msg', 'not valid')}")
    return error_page(400, "This page cannot be shown: " + "; ".join(problems) + ".")


def dashboard_error_handler(request: Request, exc: Exception) -> Response:
    """A value the pages cannot show (a filter value out of its list): 400, as a page."""
    return error_page(400, str(exc))


def _unknown(what: str, name: str, known: Any, where: str = "") -> NoReturn:
    """404 naming the closest known name."""
    from beamaudit.api.runs.record import closest_name

    closest = closest_name(name, known)
    hint = f"; the closest is {closest!r}" if closest else ""
    raise HTTPException(404, f"There is no {what} {name!r}{where}{hint}.")


@router.get("/static/{name}")
def static(name: str) -> FileResponse:
    from beamaudit.dashboards import static_files

    files = static_files()
    if name not in files:  # a fixed list: no path from the request reaches the file system
        raise HTTPException(404, "no such file")
    path: Path = files[name]
    media = "text/css" if name.endswith(".css") else "application/javascript"
    return FileResponse(path, media_type=media, headers={"Cache-Control": "max-age=3600"})


@router.get("/login", response_class=HTMLResponse)
def login_form(next: str = "/", error: str | None = None) -> str:
    from beamaudit.dashboards import render_login

    return render_login(error=error, next_path=next)


@router.post("/login")
def login(
    request: Request,
    session: DbSession,
    token: Annotated[str, Form(max_length=200)],
    next: Annotated[str, Form(max_length=2000)] = "/",
) -> Response:
    from beamaudit.dashboards import render_login

    if request.headers.get("origin") and not same_origin(request):
        raise HTTPException(403, "sign in on this site's own login page")
    principal = authenticate(session, token.strip())
    if principal is None:
        return HTMLResponse(
            render_login(error="That token is not valid.", next_path=next), status_code=401
        )
    hours = request.app.state.settings.api.session_hours
    cookie, _ = open_browser_session(session, principal, max_age=timedelta(hours=hours))
    session.commit()
    target = next if next.startswith("/") and not next.startswith("//") else "/"
    response = RedirectResponse(target, status_code=303)
    response.set_cookie(
        SESSION_COOKIE, cookie, httponly=True, samesite="strict",
        secure=request.url.scheme == "https", max_age=int(hours * 3600),
    )  # fmt: skip
    return response


@router.post("/logout")
@router.get("/logout")
def logout(request: Request, session: DbSession) -> Response:
    """Sign out: the session ends in the store (the cookie is worthless from now on)."""
    end_browser_session(session, request.cookies.get(SESSION_COOKIE))
    session.commit()
    response = RedirectResponse("/login", status_code=303)
    response.delete_cookie(SESSION_COOKIE)
    return response


def _month_page(path: str, render: Callable[[Session, str | None, Any], str]) -> None:
    """Serve ``render(session, period, context)`` at ``path``, for any signed-in user, with an
    optional ``?period=YYYY-MM``."""

    async def page(
        request: Request, session: DbSession, who: PageViewer,
        period: Annotated[str | None, Query(pattern=PERIOD_RE)] = None,
    ) -> str:  # fmt: skip
        return await run_in_threadpool(render, session, period, _context(request, who))

    router.get(path, response_class=HTMLResponse, name=render.__name__.lstrip("_"))(page)


def _overview(session: Session, period: str | None, ctx: Any) -> str:
    from beamaudit.api.web.page_data import (
        flags_table,
        groups_table,
        latest_run,
        period_runs,
        periods,
    )
    from beamaudit.api.web.page_inputs import attention_table, exam_types_table
    from beamaudit.dashboards import render_overview

    run = latest_run(session, period)
    known = periods(session)
    exam_types = exam_types_table(session)
    if run is None:
        if period:
            raise HTTPException(404, _no_record(period, known))
        import pandas as pd

        from beamaudit.api.web.page_data import GROUP_KEYS

        return render_overview(
            pd.DataFrame(columns=[*GROUP_KEYS, "status_reason"]),
            period=_this_month(),
            periods=known,
            open_flags=0,
            exam_types=exam_types,
            context=ctx,
        )
    flags = flags_table(session, [run.id])
    open_flags = int((flags["status"] == "open").sum()) if len(flags) else 0
    return render_overview(groups_table(run), period=run.period or "", periods=known,
                           attention=attention_table(session, run, flags, exam_types),
                           open_flags=open_flags, runs=period_runs(session, run.period or ""),
                           exam_types=exam_types, context=ctx)  # fmt: skip


def _no_record(period: str, known: list[str]) -> str:
    newest = f" (the newest reviewed month is {known[0]})" if known else ""
    return (
        f"There is no finished review of the whole site for {period}{newest}: run "
        f"'beamaudit review --month {period}'."
    )


def _site_record(session: Session, period: str | None) -> Any:
    """The finished review of the whole site for ``period`` (the newest without one); 404 with
    the months there are when there is none."""
    from beamaudit.api.web.page_data import latest_run, periods

    run = latest_run(session, period)
    if run is None or not run.period:
        empty = "There is no finished review of the whole site to show yet."
        raise HTTPException(404, _no_record(period, periods(session)) if period else empty)
    return run


def _this_month() -> str:
    today = date.today()
    return f"{today.year:04d}-{today.month:02d}"


_month_page("/", _overview)


def _distributions(session: Session, period: str | None, exam_type: str | None,
                   quantity: str | None, log_y: bool, ctx: Any) -> str:  # fmt: skip
    from beamaudit.api.web.page_data import groups_table, periods
    from beamaudit.api.web.page_inputs import exam_events, exam_types_table
    from beamaudit.dashboards import EVENT_QUANTITIES, pick_distribution, render_distributions

    run = _site_record(session, period)
    window = tuple((run.parameters or {}).get("weight_window_kg") or (50.0, 90.0))
    offered: dict[str, list[str]] = {}
    for g in (run.result or {}).get("groups", []):
        quantities = offered.setdefault(str(g.get("exam_type")), [])
        if g.get("quantity") in EVENT_QUANTITIES and g["quantity"] not in quantities:
            quantities.append(g["quantity"])
    if exam_type and exam_type not in offered:
        _unknown("exam type", exam_type, set(offered), f" in the review of {run.period}")
    levels = groups_table(run)
    chosen = pick_distribution(levels, exam_type=exam_type, quantity=quantity, available=offered)
    # only the chosen examination's events are read: one chart, not the month's every event
    events = exam_events(session, run, chosen[0], window=window) if chosen else None
    if events is None:
        from beamaudit.dashboards import EVENTS

        events = EVENTS.validate([])
    return render_distributions(
        events, levels=levels, exam_type=chosen[0] if chosen else None,
        quantity=chosen[1] if chosen else quantity, period=run.period, periods=periods(session),
        log_y=log_y, exam_types=exam_types_table(session), offered=offered, context=ctx,
    )  # fmt: skip


@router.get("/distributions", response_class=HTMLResponse)
async def distributions(
    request: Request, session: DbSession, who: PageViewer,
    period: Annotated[str | None, Query(pattern=PERIOD_RE)] = None,
    exam_type: Annotated[str | None, Query(max_length=100)] = None,
    quantity: Annotated[str | None, Query(max_length=100)] = None,
    scale: Annotated[str | None, Query(pattern="^(log|linear)$")] = None,
) -> str:  # fmt: skip
    from beamaudit.dashboards import EVENT_QUANTITIES

    if quantity and quantity not in EVENT_QUANTITIES:
        raise HTTPException(
            400, f"quantity {quantity!r} is not one of {', '.join(EVENT_QUANTITIES)}."
        )
    return await run_in_threadpool(
        _distributions, session, period, exam_type, quantity, scale == "log", _context(request, who)
    )


def _room(session: Session, room: str, ctx: Any) -> str:
    from beamaudit.api.web.page_data import flags_table, room_history
    from beamaudit.api.web.page_inputs import exam_types_table
    from beamaudit.dashboards import render_room

    history = room_history(session, room)
    flags = flags_table(session)
    flags = flags.loc[flags["room"] == room] if len(flags) else flags
    if history.empty and flags.empty:
        known = _room_names(session)
        if room not in known:
            _unknown("room", room, known)
        raise HTTPException(404, f"Room {room!r} has no reviewed data yet.")
    return render_room(
        room, history, flags=flags, exam_types=exam_types_table(session), context=ctx
    )


@router.get("/rooms/{room}", response_class=HTMLResponse)
async def room_page(request: Request, room: str, session: DbSession, who: PageViewer) -> str:
    return await run_in_threadpool(_room, session, room, _context(request, who))


def _room_names(session: Session) -> set[str]:
    from sqlalchemy import select

    from beamaudit.api.store import models as m

    return set(session.scalars(select(m.Room.name)))


def _exam(session: Session, study_uid: str, ctx: Any) -> str:
    from beamaudit.api.store.skin_doses import skin_page_record
    from beamaudit.api.web.page_data import exam_record
    from beamaudit.api.web.page_inputs import exam_types_table
    from beamaudit.dashboards import render_exam

    record = exam_record(session, study_uid)
    if record is None:
        raise HTTPException(404, f"There is no study {study_uid!r} in the store.")
    return render_exam(
        record,
        exam_types=exam_types_table(session),
        context=ctx,
        skin_dose=skin_page_record(session, study_uid),
    )


@router.get("/exams/{study_uid}", response_class=HTMLResponse)
async def exam_page(
    request: Request, study_uid: str, session: DbSession, who: PagePhysicist
) -> str:
    return await run_in_threadpool(_exam, session, study_uid, _context(request, who))


def _flags(session: Session, kind: str | None, room: str | None, period: str | None,
           status: str | None, can_triage: bool, ctx: Any,
           followup: Any = None) -> str:  # fmt: skip
    from beamaudit.api.store.skin_doses import followup_states
    from beamaudit.api.web.page_data import flags_table
    from beamaudit.api.web.page_inputs import exam_types_table
    from beamaudit.dashboards import render_flags

    table = flags_table(session)
    if room:
        known = _room_names(session) | {r for r in table["room"] if r}
        if room not in known:
            _unknown("room", room, known)
    srdl = table.loc[table["kind"] == "srdl_exceeded", "study_uid"] if len(table) else []
    states = followup_states(session, {u for u in srdl if u})
    return render_flags(table, kind=kind, room=room, period=period, status=status,
                        can_triage=can_triage, exam_types=exam_types_table(session),
                        context=ctx, followup=followup, followup_states=states)  # fmt: skip


@router.get("/flags", response_class=HTMLResponse)
async def flags_page(
    request: Request, session: DbSession, who: PageViewer,
    kind: Annotated[str | None, Query(max_length=100)] = None,
    room: Annotated[str | None, Query(max_length=200)] = None,
    period: Annotated[str | None, Query(pattern=PERIOD_RE)] = None,
    status: Annotated[str | None, Query(pattern="^(open|acknowledged|closed)$")] = None,
) -> str:  # fmt: skip
    from beamaudit.api.review.flags import FLAG_KINDS

    if kind and kind not in FLAG_KINDS:
        raise HTTPException(400, f"kind {kind!r} is not one of {', '.join(FLAG_KINDS)}.")
    ctx = _context(request, who)
    # triage from the page: physicists and admins signed in by a browser session (its CSRF token)
    can_triage = has_role(who.role, "physicist") and bool(ctx.csrf_token)
    followup = None
    if has_role(who.role, "physicist"):  # rows about single patients: physicists only
        from beamaudit.api.store.skin_doses import followup_page_data

        window = request.app.state.settings.skin_dose_window_days
        followup = await run_in_threadpool(followup_page_data, session, window)
    return await run_in_threadpool(
        _flags, session, kind, room, period, status, can_triage, ctx, followup
    )


def _levels(session: Session, physicist: bool, ctx: Any) -> str:
    from beamaudit.api.web.levels_page import levels_page_data
    from beamaudit.dashboards import render_levels

    data = levels_page_data(session, physicist=physicist, today=date.today())
    return render_levels(**data, context=ctx)


@router.get("/levels", response_class=HTMLResponse)
async def levels_page(request: Request, session: DbSession, who: PageViewer) -> str:
    """Proposed local DRLs beside the levels in force; for physicists, the recurrent list."""
    physicist = has_role(who.role, "physicist")
    return await run_in_threadpool(_levels, session, physicist, _context(request, who))


def _report(session: Session, period: str) -> str:
    from beamaudit.api.store.skin_doses import followup_in_period
    from beamaudit.api.web.page_data import flags_table, groups_table, latest_run, periods
    from beamaudit.api.web.page_inputs import attention_table, exam_types_table
    from beamaudit.dashboards import render_committee_report

    run = latest_run(session, period)
    if run is None:
        raise HTTPException(404, _no_record(period, periods(session)))
    result = run.result or {}
    sets = ", ".join(f"{s.get('name')} {s.get('version')}" for s in result.get("level_sets", []))
    method = (
        "ICRP Publication 135 (2017): for each room, exam type and quantity, the median over "
        "standard-size patients (weights in the configured window, default 50-90 kg for a mean "
        "near 70 kg) is compared with each applicable reference level; the 95% confidence "
        "interval of the median (exact binomial order statistics) decides 'above' versus "
        "'possibly above'; groups below the minimum sample get no verdict. Reference-level "
        f"sets: {sets or 'none stored'}. Review run {run.id}, software {run.software_version}."
    )
    start, end = _period_bounds(period)
    flags = flags_table(session, [run.id])
    exam_types = exam_types_table(session)
    return render_committee_report(
        groups_table(run), period=period, method=method, software_version=run.software_version,
        flags=flags, attention=attention_table(session, run, flags, exam_types),
        exam_types=exam_types,
        followup=followup_in_period(session, start=start, end=end),
    )  # fmt: skip


def _period_bounds(period: str) -> tuple[str, str]:
    """A month ``YYYY-MM`` as ISO dates, the end exclusive."""
    year, month = int(period[:4]), int(period[5:7])
    start = date(year, month, 1)
    end = date(year + month // 12, month % 12 + 1, 1)
    return start.isoformat(), end.isoformat()


@router.get("/reports/{period}", response_class=HTMLResponse)
async def report_page(period: str, session: DbSession, who: PageViewer) -> str:
    import re

    if not re.match(PERIOD_RE, period):
        raise HTTPException(400, f"A report's period is a month written YYYY-MM, not {period!r}.")
    return await run_in_threadpool(_report, session, period)


def _ingest_errors(session: Session, period: str | None, ctx: Any) -> str:
    from beamaudit.api.web.page_data import latest_run, periods
    from beamaudit.api.web.page_inputs import ingest_errors_table, review_window
    from beamaudit.dashboards import render_ingest_errors

    since = until = None
    note = "Every file and object refused at ingest, newest first."
    if period:
        run = latest_run(session, period)
        if run is None:
            raise HTTPException(404, _no_record(period, periods(session)))
        since, until = review_window(run, newest=periods(session)[:1] == [period])
        note = (
            f"Files and objects refused from {since:%Y-%m-%d} until the review of {period} "
            f"({until:%Y-%m-%d %H:%M} UTC), newest first."
            if until is not None
            else f"Files and objects refused since {since:%Y-%m-%d}, newest first."
        )
    table, total = ingest_errors_table(session, since=since, until=until)
    if total > len(table):
        note += f" The newest {len(table)} of {total} are listed."
    return render_ingest_errors(table, note=note, context=ctx)


_month_page("/ingest-errors", _ingest_errors)


def _unmapped(session: Session, period: str | None, ctx: Any) -> str:
    from beamaudit.api.web.page_data import periods
    from beamaudit.api.web.page_inputs import unmapped_table
    from beamaudit.dashboards import render_unmapped

    run = _site_record(session, period)
    return render_unmapped(
        unmapped_table(run), period=run.period, periods=periods(session), context=ctx
    )


_month_page("/unmapped", _unmapped)
