"""The dashboard pages, served behind the API's authentication.

Pages accept the API token as ``Authorization: Bearer``, or the session cookie
that signing in on the login page sets: a browser session of its own (HttpOnly,
SameSite=Strict, Secure over HTTPS, ``api.session_hours`` long), never the token
itself; signing out ends it in the store. A page asked for
without a valid token redirects to ``/login``; one whose role is too low
answers 403. The period overview is ``/``. The exam drill-down shows
individual events and needs the physicist role; the other pages show reviews
and aggregates and need a viewer.
"""

from __future__ import annotations

from datetime import date, timedelta
from pathlib import Path
from typing import Annotated, Any
from urllib.parse import quote

from fastapi import APIRouter, Depends, Form, HTTPException, Query, Request
from fastapi.concurrency import run_in_threadpool
from fastapi.responses import FileResponse, HTMLResponse, RedirectResponse, Response
from sqlalchemy.orm import Session

from beamaudit import __version__
from beamaudit.api.auth import (
    Principal,
    authenticate,
    end_browser_session,
    has_role,
    open_browser_session,
)
from beamaudit.api.deps import SESSION_COOKIE, DbSession, identify, same_origin

__all__ = ["router"]

router = APIRouter(include_in_schema=False)

PERIOD_RE = r"^\d{4}-\d{2}$"


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


def _overview(session: Session, period: str | None, ctx: Any) -> str:
    from beamaudit.api.page_data import flags_table, groups_table, latest_run, periods
    from beamaudit.dashboards import render_overview

    run = latest_run(session, period)
    known = periods(session)
    if run is None:
        if period:
            raise HTTPException(404, f"no finished review for {period}")
        import pandas as pd

        from beamaudit.api.page_data import GROUP_KEYS

        return render_overview(
            pd.DataFrame(columns=[*GROUP_KEYS, "status_reason"]),
            period=_this_month(),
            periods=known,
            open_flags=0,
            context=ctx,
        )
    flags = flags_table(session, [run.id])
    open_flags = int((flags["status"] == "open").sum()) if len(flags) else 0
    return render_overview(groups_table(run), period=run.period or "", periods=known,
                           open_flags=open_flags, context=ctx)  # fmt: skip


def _this_month() -> str:
    today = date.today()
    return f"{today.year:04d}-{today.month:02d}"


@router.get("/", response_class=HTMLResponse)
async def overview(
    request: Request, session: DbSession, who: PageViewer,
    period: Annotated[str | None, Query(pattern=PERIOD_RE)] = None,
) -> str:  # fmt: skip
    return await run_in_threadpool(_overview, session, period, _context(request, who))


def _distributions(session: Session, period: str | None, exam_type: str | None,
                   quantity: str | None, log_y: bool, ctx: Any) -> str:  # fmt: skip
    from beamaudit.api.page_data import distribution_events, groups_table, latest_run, periods
    from beamaudit.api.review import Period
    from beamaudit.dashboards import render_distributions

    run = latest_run(session, period)
    if run is None or not run.period:
        raise HTTPException(404, "no finished review to show")
    p = Period.parse(run.period)
    window = tuple((run.parameters or {}).get("weight_window_kg") or (50.0, 90.0))
    events = distribution_events(session, start=p.start, end=p.end, window=window)
    return render_distributions(
        events, levels=groups_table(run), exam_type=exam_type, quantity=quantity,
        period=run.period, periods=periods(session), log_y=log_y, context=ctx,
    )  # fmt: skip


@router.get("/distributions", response_class=HTMLResponse)
async def distributions(
    request: Request, session: DbSession, who: PageViewer,
    period: Annotated[str | None, Query(pattern=PERIOD_RE)] = None,
    exam_type: Annotated[str | None, Query(max_length=100)] = None,
    quantity: Annotated[str | None, Query(max_length=100)] = None,
    scale: Annotated[str | None, Query(pattern="^(log|linear)$")] = None,
) -> str:  # fmt: skip
    return await run_in_threadpool(
        _distributions, session, period, exam_type, quantity, scale == "log", _context(request, who)
    )


def _room(session: Session, room: str, ctx: Any) -> str:
    from beamaudit.api.page_data import flags_table, room_history
    from beamaudit.dashboards import render_room

    history = room_history(session, room)
    flags = flags_table(session)
    flags = flags.loc[flags["room"] == room] if len(flags) else flags
    if history.empty and flags.empty:
        raise HTTPException(404, f"no reviewed data for room {room!r}")
    return render_room(room, history, flags=flags, context=ctx)


@router.get("/rooms/{room}", response_class=HTMLResponse)
async def room_page(request: Request, room: str, session: DbSession, who: PageViewer) -> str:
    return await run_in_threadpool(_room, session, room, _context(request, who))


def _exam(session: Session, study_uid: str, ctx: Any) -> str:
    from beamaudit.api.page_data import exam_record
    from beamaudit.dashboards import render_exam

    record = exam_record(session, study_uid)
    if record is None:
        raise HTTPException(404, "no such study")
    return render_exam(record, context=ctx)


@router.get("/exams/{study_uid}", response_class=HTMLResponse)
async def exam_page(
    request: Request, study_uid: str, session: DbSession, who: PagePhysicist
) -> str:
    return await run_in_threadpool(_exam, session, study_uid, _context(request, who))


def _flags(session: Session, kind: str | None, room: str | None, period: str | None,
           status: str | None, ctx: Any) -> str:  # fmt: skip
    from beamaudit.api.page_data import flags_table
    from beamaudit.dashboards import render_flags

    return render_flags(flags_table(session), kind=kind, room=room, period=period, status=status,
                        context=ctx)  # fmt: skip


@router.get("/flags", response_class=HTMLResponse)
async def flags_page(
    request: Request, session: DbSession, who: PageViewer,
    kind: Annotated[str | None, Query(max_length=100)] = None,
    room: Annotated[str | None, Query(max_length=200)] = None,
    period: Annotated[str | None, Query(pattern=PERIOD_RE)] = None,
    status: Annotated[str | None, Query(pattern="^(open|acknowledged|closed)$")] = None,
) -> str:  # fmt: skip
    return await run_in_threadpool(
        _flags, session, kind, room, period, status, _context(request, who)
    )


def _report(session: Session, period: str) -> str:
    from beamaudit.api.page_data import flags_table, groups_table, latest_run
    from beamaudit.dashboards import render_committee_report

    run = latest_run(session, period)
    if run is None:
        raise HTTPException(404, f"no finished review for {period}")
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
    return render_committee_report(
        groups_table(run), period=period, method=method, software_version=run.software_version,
        flags=flags_table(session, [run.id]),
    )  # fmt: skip


@router.get("/reports/{period}", response_class=HTMLResponse)
async def report_page(period: str, session: DbSession, who: PageViewer) -> str:
    import re

    if not re.match(PERIOD_RE, period):
        raise HTTPException(404, "a report period is YYYY-MM")
    return await run_in_threadpool(_report, session, period)
