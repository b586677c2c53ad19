"""HTML pages: each ``render_x(...)`` takes plain tables and returns one HTML string.

The API serves these strings behind its authentication. Links between pages
use the paths the API serves (see :data:`ROUTES`); plotly.js and the style
sheet are referenced as ``/static/plotly.min.js`` and ``/static/beamaudit.css``
(the files are found with :func:`static_files`), except in the committee
report (:func:`render_committee_report`), which inlines both so that it stands
alone as one file.

Every page carries the caution about estimates (:data:`~beamaudit.dashboards.wording.CAUTION`).
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from typing import Any

from beamaudit.dashboards import _history_figures, _rows, _web, figures
from beamaudit.dashboards._web import (
    ROUTES,
    PageContext,
    exam_href,
    flags_href,
    plotly_js_path,
    report_href,
    room_href,
    static_files,
)
from beamaudit.dashboards.errors import DashboardError
from beamaudit.dashboards.records import parse_exam
from beamaudit.dashboards.report import render_committee_report
from beamaudit.dashboards.tables import EVENTS, FLAGS, GROUPS, LEVELS, ROOM_HISTORY, TableLike
from beamaudit.dashboards.wording import FLAG_STATUS_WORDS, quantity_label, quantity_short

__all__ = [
    "ROUTES",
    "PageContext",
    "exam_href",
    "flags_href",
    "plotly_js_path",
    "render_committee_report",
    "render_distributions",
    "render_error",
    "render_exam",
    "render_flags",
    "render_login",
    "render_overview",
    "render_room",
    "report_href",
    "room_href",
    "static_files",
]


# ------------------------------------------------------------------ pages


def render_overview(
    groups: TableLike,
    *,
    period: str,
    periods: Sequence[str] = (),
    open_flags: int | None = None,
    runs: Sequence[Mapping[str, Any]] = (),
    context: PageContext | None = None,
) -> str:
    """The period overview (served at ``/``).

    Parameters
    ----------
    groups : table
        The ``GROUPS`` table of ``period``.
    period : str
        The review period shown, ``YYYY-MM``.
    periods : sequence of str
        Periods offered by the period picker (``period`` is always offered).
    open_flags : int, optional
        Number of open flags in the period, linked to the flags list.
    runs : sequence of mappings, optional
        The review runs of the period, listed under the groups: ``id``, ``kind``, ``scope`` (in
        words), ``state`` (in words), ``started_at`` (UTC) and ``record`` (the run shown).
    context : PageContext, optional
        Facility, version, user.

    Returns
    -------
    str
        The HTML page.
    """
    _web.check_period(period)
    table = GROUPS.validate(groups)
    rows = _rows.group_rows(table, period)
    return _web.render_page(
        "overview.html",
        context=context,
        page_title=f"Review of {period}",
        active="overview",
        has_figures=not table.empty,
        period=period,
        periods=_web.period_choices(period, periods),
        rows=rows,
        level_sets=_rows.level_sets(table),
        status_counts=_rows.status_counts(rows),
        heatmap=_web.figure_block(
            figures.build_overview_heatmap(
                table, title="Median ÷ reference level, by room and examination"
            ),
            "overview-heatmap",
        ),
        open_flags=open_flags,
        flags_href=flags_href(period=period, status="open"),
        report_href=report_href(period),
        runs=[{**r, "started": _rows.when(r.get("started_at"))} for r in runs],
    )


def render_distributions(
    events: TableLike,
    *,
    levels: TableLike | None = None,
    exam_type: str | None = None,
    quantity: str | None = None,
    period: str | None = None,
    periods: Sequence[str] = (),
    log_y: bool = False,
    context: PageContext | None = None,
) -> str:
    """Distributions per room against the reference levels (served at ``/distributions``).

    Parameters
    ----------
    events : table
        The ``EVENTS`` table of the period.
    levels : table, optional
        A ``LEVELS`` table (the ``GROUPS`` table will do).
    exam_type, quantity : str, optional
        Show only this examination type / quantity (the filter form's values).
        Without ``quantity``, each examination shows the quantities ``levels``
        lists for it (all dose columns present, if it lists none).
    period : str, optional
        The period shown (``YYYY-MM``), for the picker.
    periods : sequence of str
        Periods offered by the picker.
    log_y : bool
        Logarithmic dose axes (the form sends ``scale=log`` for this).
    context : PageContext, optional
        Facility, version, user.
    """
    table = EVENTS.validate(events)
    level_table = None if levels is None else LEVELS.validate(levels)
    if period is not None:
        _web.check_period(period)
    if quantity is not None and quantity not in figures.EVENT_QUANTITIES:
        raise DashboardError(
            f"quantity '{quantity}' is not one of {', '.join(figures.EVENT_QUANTITIES)}"
        )
    blocks = _rows.distribution_blocks(
        table, level_table, exam_type=exam_type, quantity=quantity, log_y=log_y
    )
    present = [q for q in figures.EVENT_QUANTITIES if table[q].notna().any()]
    return _web.render_page(
        "distributions.html",
        context=context,
        page_title="Distributions" + (f" of {period}" if period else ""),
        active="distributions",
        has_figures=bool(blocks),
        blocks=blocks,
        exam_types=sorted(table["exam_type"].unique()),
        quantities=[(q, quantity_short(q)) for q in present],
        exam_type=exam_type or "",
        quantity=quantity or "",
        period=period or "",
        periods=_web.period_choices(period, periods),
        log_y=log_y,
        level_sets=[] if level_table is None else _rows.level_sets(level_table),
        n_events=len(table),
        quantity_label=quantity_label,
    )


def render_room(
    room: str,
    history: TableLike,
    *,
    flags: TableLike | None = None,
    context: PageContext | None = None,
) -> str:
    """A room's history (served at ``/rooms/{room}``).

    Parameters
    ----------
    room : str
        Room name.
    history : table
        The ``ROOM_HISTORY`` table of this room.
    flags : table, optional
        A ``FLAGS`` table; the room's flags that are not closed are listed.
    context : PageContext, optional
        Facility, version, user.
    """
    table = ROOM_HISTORY.validate(history)
    quantities = sorted(table.loc[table["median"].notna(), "quantity"].unique())
    blocks = [
        _web.figure_block(
            _history_figures._room_history(table, quantity=q, room=room), f"history-{i}"
        )
        for i, q in enumerate(quantities)
    ]
    ratio_block = None
    if table["dap_ratio_median"].notna().any():
        ratio_block = _web.figure_block(
            _history_figures._dap_ratio_history(table, room=room), "dap-ratio"
        )
    flag_rows = _rows.flag_rows(FLAGS.validate(flags if flags is not None else []), room=room)
    changes = table[table["change_point"]].sort_values("month")
    return _web.render_page(
        "room.html",
        context=context,
        page_title=f"Room {room}",
        active="",
        has_figures=bool(blocks) or ratio_block is not None,
        room=room,
        blocks=blocks,
        ratio_block=ratio_block,
        changes=[
            (m.strftime("%B %Y"), e, quantity_short(q))
            for m, e, q in zip(
                changes["month"], changes["exam_type"], changes["quantity"], strict=True
            )
        ],
        flag_rows=[r for r in flag_rows if r["status"] != "closed"],
        flags_href=flags_href(room=room),
    )


def render_exam(
    exam: Mapping[str, Any],
    *,
    back_href: str | None = None,
    context: PageContext | None = None,
) -> str:
    """An examination's drill-down (served at ``/exams/{study_uid}``).

    Parameters
    ----------
    exam : mapping
        The drill-down record; contract in :mod:`beamaudit.dashboards.records`.
    back_href : str, optional
        Where "back" goes; defaults to the room's page.
    context : PageContext, optional
        Facility, version, user.
    """
    detail = parse_exam(exam)
    exposures = []
    for i, exposure in enumerate(detail.exposures):
        technique = dict(exposure.technique)
        spectrum_block = None
        if exposure.spectrum is not None:
            kvp = technique.get("kvp_kv")
            spectrum_block = _web.figure_block(
                figures.build_spectrum(
                    exposure.spectrum,
                    kvp_kv=float(kvp) if isinstance(kvp, (int, float)) else None,
                    title=f"Reconstructed spectrum, exposure {i + 1}",
                ),
                f"spectrum-{i}",
            )
        exposures.append(
            {
                "number": i + 1,
                "event_id": exposure.event_id,
                "when": _rows.when(exposure.event_datetime),
                "technique": [
                    (quantity_label(k), _web.fmt(v, 4) if isinstance(v, float) else _rows.plain(v))
                    for k, v in exposure.technique
                ],
                "dose": [
                    {
                        "label": quantity_label(d.name, with_unit=False),
                        "value": _web.fmt(d.value),
                        "uncertainty": _web.fmt(d.uncertainty, 2)
                        if d.uncertainty is not None
                        else "",
                        "unit": d.unit,
                        "reported": _web.fmt(d.reported) if d.reported is not None else "–",
                        "ratio": f"{d.ratio:.2f}" if d.ratio is not None else "–",
                        "source": d.source,
                    }
                    for d in exposure.dose
                ],
                "why": [
                    {
                        "label": quantity_label(s.quantity, with_unit=False),
                        "value": _web.fmt(s.value, 4),
                        "unit": s.unit,
                        "equation": s.equation,
                        "source": s.source,
                        "inputs": [f"{k} = {v}" if v else k for k, v in s.inputs],
                        "assumed": s.assumed,
                        "assumptions": s.assumptions,
                    }
                    for s in exposure.why
                ],
                "spectrum": spectrum_block,
            }
        )
    return _web.render_page(
        "exam.html",
        context=context,
        page_title=f"{detail.exam_type}, {detail.room}",
        active="",
        has_figures=any(e["spectrum"] is not None for e in exposures),
        exam=detail,
        when=_rows.when(detail.study_datetime),
        weight=_web.fmt(detail.patient_weight_kg) if detail.patient_weight_kg is not None else "–",
        standard={True: "yes", False: "no", None: "not known"}[detail.standard_patient],
        exposures=exposures,
        flag_rows=_rows.flag_rows(detail.flags),
        back_href=back_href or room_href(detail.room),
        room_href=room_href(detail.room),
    )


def render_flags(
    flags: TableLike,
    *,
    kind: str | None = None,
    room: str | None = None,
    period: str | None = None,
    status: str | None = None,
    context: PageContext | None = None,
) -> str:
    """The flags list with filters (served at ``/flags``).

    Parameters
    ----------
    flags : table
        The whole ``FLAGS`` table; the filters' choices come from it.
    kind, room, period, status : str, optional
        Filter values (the query parameters of the same names); empty shows all.
    context : PageContext, optional
        Facility, version, user.
    """
    table = FLAGS.validate(flags)
    if status and status not in FLAG_STATUS_WORDS:
        raise DashboardError(
            f"status must be one of {', '.join(FLAG_STATUS_WORDS)}, got {status!r}"
        )
    if period:
        _web.check_period(period)
    rows = _rows.flag_rows(table, kind=kind, room=room, period=period, status=status)

    def choices(column: str) -> list[str]:
        return sorted({v for v in table[column] if v})

    return _web.render_page(
        "flags.html",
        context=context,
        page_title="Flags",
        active="flags",
        rows=rows,
        total=len(table),
        filters=[
            ("kind", "Kind", kind or "", [(v, v) for v in choices("kind")]),
            ("room", "Room", room or "", [(v, v) for v in choices("room")]),
            (
                "period",
                "Period",
                period or "",
                [(v, v) for v in sorted(choices("period"), reverse=True)],
            ),
            ("status", "Status", status or "", list(FLAG_STATUS_WORDS.items())),
        ],
    )


def render_error(
    status_code: int,
    message: str,
    *,
    title: str | None = None,
    context: PageContext | None = None,
) -> str:
    """A page saying why a request was refused (served with ``status_code``).

    Parameters
    ----------
    status_code : int
        The HTTP status (400 a bad parameter, 403 a role too low, 404 nothing by that name).
    message : str
        What was wrong, in one or two sentences (e.g. naming the closest known name).
    title : str, optional
        The heading; by default one for the status.
    context : PageContext, optional
        Facility, version, user.
    """
    default = {
        400: "That request cannot be answered",
        401: "Sign in first",
        403: "Not for this role",
        404: "Not found",
    }.get(status_code, "Something went wrong")
    return _web.render_page(
        "error.html",
        context=context,
        page_title=title or default,
        status_code=status_code,
        message=message,
    )


def render_login(
    *, error: str | None = None, next_path: str = "/", context: PageContext | None = None
) -> str:
    """The sign-in page (served at ``/login``): a form that posts an API token.

    The form posts ``token`` and ``next`` to ``/login``; the API checks the
    token, sets the session cookie and redirects to ``next``.

    Parameters
    ----------
    error : str, optional
        A message to show (e.g. after a wrong token).
    next_path : str
        Where to go after signing in; only a local path (starting with one
        ``/``) is kept, anything else becomes ``/``.
    context : PageContext, optional
        Facility and version (no user yet).
    """
    safe_next = next_path if next_path.startswith("/") and not next_path.startswith("//") else "/"
    return _web.render_page(
        "login.html",
        context=context,
        page_title="Sign in",
        active="",
        error=error,
        next_path=safe_next,
    )
