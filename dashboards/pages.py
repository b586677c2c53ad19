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

import pandas as pd

from beamaudit.dashboards import _exam_page, _history_figures, _rows, _web, figures
from beamaudit.dashboards._heatmap_figure import heatmap_key
from beamaudit.dashboards._intake_pages import render_ingest_errors, render_unmapped
from beamaudit.dashboards._levels_page import render_levels
from beamaudit.dashboards._web import (
    ROUTES,
    PageContext,
    exam_href,
    flags_href,
    ingest_errors_href,
    plotly_js_path,
    report_href,
    room_href,
    static_files,
    unmapped_href,
)
from beamaudit.dashboards.attention import rank_attention
from beamaudit.dashboards.distributions import ExamTypes, pick_distribution
from beamaudit.dashboards.errors import DashboardError
from beamaudit.dashboards.records import parse_exam
from beamaudit.dashboards.report import render_committee_report
from beamaudit.dashboards.tables import EVENTS, FLAGS, GROUPS, LEVELS, ROOM_HISTORY, TableLike
from beamaudit.dashboards.wording import (
    FLAG_KIND_WORDS,
    FLAG_STATUS_WORDS,
    SEVERITY_WORDS,
    STATUS_LOOK,
    TRIAGE_ACTIONS,
    exam_name,
    quantity_label,
    quantity_short,
    words_for,
)

__all__ = [
    "ROUTES",
    "PageContext",
    "exam_href",
    "flags_href",
    "ingest_errors_href",
    "plotly_js_path",
    "render_committee_report",
    "render_distributions",
    "render_error",
    "render_exam",
    "render_flags",
    "render_ingest_errors",
    "render_levels",
    "render_login",
    "render_overview",
    "render_room",
    "render_unmapped",
    "report_href",
    "room_href",
    "static_files",
    "unmapped_href",
]

#: attention lines shown before "and N more"
ATTENTION_SHOWN = 8
#: a room history with more lines than this takes the page's whole width
_LINES_IN_HALF_CARD = 7


# ------------------------------------------------------------------ pages


def render_overview(
    groups: TableLike,
    *,
    period: str,
    periods: Sequence[str] = (),
    attention: TableLike | None = None,
    open_flags: int | None = None,
    runs: Sequence[Mapping[str, Any]] = (),
    exam_types: TableLike | None = None,
    context: PageContext | None = None,
) -> str:
    """The period overview (served at ``/``): what needs attention, the heatmap, the rest.

    Parameters
    ----------
    groups : table
        The ``GROUPS`` table of ``period``.
    period : str
        The review period shown, ``YYYY-MM``.
    periods : sequence of str
        Periods offered by the period picker (``period`` is always offered).
    attention : table, optional
        The ``ATTENTION`` table of ``period``: its open findings, one line each (see
        :func:`beamaudit.dashboards.attention.attention_from_flags`); ranked here, the first
        :data:`ATTENTION_SHOWN` listed, the rest counted with a link to the flags. Without it,
        the page points to the flags list instead.
    open_flags : int, optional
        Number of open flags in the period, linked to the flags list.
    runs : sequence of mappings, optional
        The review runs of the period, listed under the groups: ``id``, ``kind``, ``scope`` (in
        words), ``state`` (in words), ``started_at`` (UTC) and ``record`` (the run shown).
    exam_types : table, optional
        The ``EXAM_TYPES`` table: examinations are shown by their catalogue names.
    context : PageContext, optional
        Facility, version, user.

    Returns
    -------
    str
        The HTML page.
    """
    _web.check_period(period)
    table = GROUPS.validate(groups)
    names = ExamTypes(exam_types).names
    rows = _rows.group_rows(table, period, names)
    lines = None
    if attention is not None:
        ranked = rank_attention(attention)
        lines = [
            {
                **r,
                "severity_words": words_for(SEVERITY_WORDS, r["severity"]),
                "kind_words": words_for(FLAG_KIND_WORDS, r["kind"]),
            }
            for r in ranked.to_dict("records")
        ]
    levelled = table[table["status"] != "no_level"]
    return _web.render_page(
        "overview.html",
        context=context,
        page_title=f"Review of {period}",
        active="overview",
        has_figures=not levelled.empty,
        period=period,
        periods=_web.period_choices(period, periods),
        rows=rows,
        level_sets=_rows.level_sets(table),
        status_counts=_rows.status_counts(rows),
        heatmap=_web.figure_block(
            figures.build_overview_heatmap(
                table, title="Median ÷ reference level, by room and examination", exam_names=names
            ),
            "overview-heatmap",
        )
        if not levelled.empty
        else None,
        key=heatmap_key(),
        attention=None if lines is None else lines[:ATTENTION_SHOWN],
        attention_more=0 if lines is None else max(len(lines) - ATTENTION_SHOWN, 0),
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
    exam_types: TableLike | None = None,
    offered: Mapping[str, Sequence[str]] | None = None,
    context: PageContext | None = None,
) -> str:
    """One distribution per room against the reference levels (served at ``/distributions``).

    The page shows one chart: the reader's choice of examination and quantity, or else the most
    urgent group's (:func:`beamaudit.dashboards.distributions.pick_distribution`), with a picker
    for the others. An examination-level type (a fluoroscopy or CT study) shows one value per
    study, its events aggregated by the catalogue's rule.

    Parameters
    ----------
    events : table
        The ``EVENTS`` table of the period (the chosen examination's events are enough).
    levels : table, optional
        A ``LEVELS`` table (the ``GROUPS`` table will do); it also lists the examinations the
        picker offers.
    exam_type, quantity : str, optional
        The examination type (code) and quantity to show (the picker's values).
    period : str, optional
        The period shown (``YYYY-MM``), for the picker.
    periods : sequence of str
        Periods offered by the picker.
    log_y : bool
        Logarithmic dose axes (the form sends ``scale=log`` for this).
    exam_types : table, optional
        The ``EXAM_TYPES`` table: names, and which types are judged per examination.
    offered : mapping, optional
        Examination -> quantities the picker offers besides those of ``events`` (when
        ``events`` holds only the chosen examination's events: the period's others).
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
    catalogue = ExamTypes(exam_types)
    available = {
        str(exam): [q for q in figures.EVENT_QUANTITIES if part[q].notna().any()]
        for exam, part in table.groupby("exam_type", sort=True)
    }
    for exam, quantities in (offered or {}).items():
        available.setdefault(exam, [q for q in quantities if q in figures.EVENT_QUANTITIES])
    chosen = pick_distribution(
        level_table, exam_type=exam_type, quantity=quantity, available=available
    )
    block = None
    if chosen is not None:
        block = _rows.distribution_block(
            table, level_table, exam_type=chosen[0], quantity=chosen[1],
            catalogue=catalogue, log_y=log_y,
        )  # fmt: skip
    exam_choices = _exam_choices(level_table, available, catalogue)
    chosen_exam, chosen_quantity = chosen if chosen is not None else ("", "")
    quantities = available.get(chosen_exam) or list(figures.EVENT_QUANTITIES)
    return _web.render_page(
        "distributions.html",
        context=context,
        page_title="Distributions" + (f" of {period}" if period else ""),
        active="distributions",
        has_figures=block is not None,
        block=block,
        exam_choices=exam_choices,
        quantities=[(q, quantity_short(q)) for q in quantities],
        exam_type=chosen_exam,
        exam_words=catalogue.name(chosen_exam) if chosen_exam else "",
        quantity=chosen_quantity,
        per_study=bool(chosen_exam and catalogue.study_rule(chosen_exam, chosen_quantity)),
        period=period or "",
        periods=_web.period_choices(period, periods),
        log_y=log_y,
        level_sets=[] if level_table is None else _rows.level_sets(level_table),
        n_events=len(table),
        quantity_label=quantity_label,
    )


def _exam_choices(
    levels: pd.DataFrame | None, available: Mapping[str, list[str]], catalogue: ExamTypes
) -> list[tuple[str, str]]:
    """The picker's examinations: (code, name marked with its most urgent status's symbol)."""
    worst: dict[str, int] = {}
    if levels is not None:
        for exam, status in zip(levels["exam_type"], levels["status"], strict=True):
            if status in STATUS_LOOK:
                worst[exam] = min(worst.get(exam, 9), STATUS_LOOK[status].rank)
    symbols = {look.rank: look.symbol for look in STATUS_LOOK.values()}
    codes = sorted(set(available) | set(worst), key=lambda c: catalogue.name(c).lower())
    return [
        (c, f"{symbols[worst[c]]} {catalogue.name(c)}" if c in worst else catalogue.name(c))
        for c in codes
    ]


def render_room(
    room: str,
    history: TableLike,
    *,
    flags: TableLike | None = None,
    exam_types: TableLike | None = None,
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
    exam_types : table, optional
        The ``EXAM_TYPES`` table, for the examinations' names.
    context : PageContext, optional
        Facility, version, user.
    """
    table = ROOM_HISTORY.validate(history)
    names = ExamTypes(exam_types).names
    quantities = sorted(table.loc[table["median"].notna(), "quantity"].unique())
    blocks = []
    for i, q in enumerate(quantities):
        lines = table.loc[(table["quantity"] == q) & table["median"].notna(), "exam_type"].nunique()
        block = _web.figure_block(
            _history_figures._room_history(table, quantity=q, room=room, exam_names=names),
            f"history-{i}",
        )
        blocks.append((block, lines > _LINES_IN_HALF_CARD))
    ratio_block, mgd_block = (
        _web.figure_block(
            _history_figures._ratio_history(table, ratio, room=room, exam_names=names), anchor
        )
        if table[ratio.column].notna().any()
        else None
        for ratio, anchor in ((_history_figures.DAP_RATIO, "dap-ratio"),
                              (_history_figures.MGD_RATIO, "mgd-ratio"))
    )  # fmt: skip
    flag_rows = _rows.flag_rows(
        FLAGS.validate(flags if flags is not None else []), names, room=room
    )
    # a mask, even on a room with no history (an empty object column would select columns)
    changes = table.loc[table["change_point"].astype(bool)].sort_values("month")
    return _web.render_page(
        "room.html",
        context=context,
        page_title=f"Room {room}",
        active="",
        has_figures=bool(blocks) or ratio_block is not None or mgd_block is not None,
        room=room,
        blocks=blocks,
        ratio_block=ratio_block,
        mgd_block=mgd_block,
        changes=[
            (m.strftime("%B %Y"), exam_name(e, names), quantity_short(q))
            for m, e, q in zip(
                changes["month"], changes["exam_type"], changes["quantity"], strict=True
            )
        ],
        flag_rows=[r for r in flag_rows if r["status"] != "closed"],
        flags_href=flags_href(room=room),
    )


#: The exam type of a drill-down record whose events map to no examination type.
UNMAPPED_EXAM = "(unmapped)"


def render_exam(
    exam: Mapping[str, Any],
    *,
    back_href: str | None = None,
    exam_types: TableLike | None = None,
    context: PageContext | None = None,
    skin_dose: Mapping[str, Any] | None = None,
) -> str:
    """An examination's drill-down (served at ``/exams/{study_uid}``).

    Exposures are listed in time order; every number is rounded to what it means and carries
    its unit; an estimate shows its standard uncertainty where one was computed.

    Parameters
    ----------
    exam : mapping
        The drill-down record; contract in :mod:`beamaudit.dashboards.records`.
    back_href : str, optional
        Where "back" goes; defaults to the room's page.
    exam_types : table, optional
        The ``EXAM_TYPES`` table, for the examination's name.
    context : PageContext, optional
        Facility, version, user.
    skin_dose : mapping, optional
        A fluoroscopy or interventional procedure's skin dose: ``status``, ``reason``,
        ``peak_skin_dose_mgy``, ``area_above_2gy_cm2`` / ``3gy`` / ``5gy``, ``uncertainty_pct``,
        ``events_used``, ``level_checks`` (each with ``crossed`` and ``text``),
        ``followup_status`` and ``record`` (the map record, drawn by
        :func:`~beamaudit.dashboards.figures.build_skin_dose_map`); with ``exam_id`` the
        section links the map as a PNG image (``GET /api/v1/exams/{exam_id}/skin-dose/map.png``).
    """
    detail = parse_exam(exam)
    skin = _exam_page.skin_view(skin_dose) if skin_dose is not None else None
    names = ExamTypes(exam_types).names
    spectra = _exam_page.spectra_view(detail)
    exposures = _exam_page.exposure_views(detail, spectra)
    title = exam_name(detail.exam_type, names)
    if detail.exam_type == UNMAPPED_EXAM:  # no examination type: its description says what it was
        described = dict(detail.info).get("description") or ""
        title = f"{described} (no examination type)" if described else "Examination of no type"
    return _web.render_page(
        "exam.html",
        context=context,
        page_title=f"{title}, {detail.room}",
        active="",
        has_figures=any(e["spectrum"] is not None for e in exposures)
        or spectra is not None
        or (skin is not None and skin["figure"] is not None),
        skin=skin,
        exam=detail,
        title=title,
        info=_exam_page.info_lines(detail),
        when=_rows.when(detail.study_datetime),
        weight=_web.fmt(detail.patient_weight_kg) if detail.patient_weight_kg is not None else "–",
        standard=_exam_page.standard_words(detail.standard_patient),
        exposures=exposures,
        spectra=spectra,
        flag_rows=_rows.flag_rows(detail.flags, names),
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
    can_triage: bool = False,
    exam_types: TableLike | None = None,
    context: PageContext | None = None,
    followup: Mapping[str, Any] | None = None,
    followup_states: Mapping[str, str] | None = None,
) -> str:
    """The flags list with filters (served at ``/flags``), and triage for physicists.

    With ``can_triage``, each flag that carries ``run_id`` and ``flag_id`` gets a form to
    acknowledge, close or reopen its finding with a note; the page's script sends it as
    ``PATCH /api/v1/reviews/{run_id}/flags/{flag_id}`` with the session's CSRF token
    (``X-CSRF-Token``, from the page's ``<meta name="csrf-token">``), and shows the answer.

    Parameters
    ----------
    flags : table
        The whole ``FLAGS`` table; the filters' choices come from it.
    kind, room, period, status : str, optional
        Filter values (the query parameters of the same names); empty shows all.
    can_triage : bool
        The reader may triage (a physicist or admin signed in by a browser session).
    exam_types : table, optional
        The ``EXAM_TYPES`` table, for the examinations' names.
    context : PageContext, optional
        Facility, version, user.
    followup : mapping, optional
        Patients to follow up after fluoroscopy or interventional procedures (physicists only):
        ``items`` (procedures at or above an NCRP 168 level: ``study_instance_uid``,
        ``study_datetime``, ``peak_skin_dose_mgy``, ``level_checks``, ``followup_status``,
        ``followup_note``), ``window_days`` and ``cumulative`` (per pseudonymised patient:
        ``patient_pseudo_id``, ``procedures``, ``peak_skin_dose_mgy``, ``upper_bound_mgy``,
        ``method``).
    followup_states : mapping, optional
        Study Instance UID to the NCRP 168 follow-up state of its procedure (``open``,
        ``patient_informed``, ``follow_up_booked``, ``closed``); each ``srdl_exceeded`` flag of
        such a study shows it.
    """
    table = FLAGS.validate(flags)
    if status and status not in FLAG_STATUS_WORDS:
        raise DashboardError(
            f"status must be one of {', '.join(FLAG_STATUS_WORDS)}, got {status!r}"
        )
    if period:
        _web.check_period(period)
    names = ExamTypes(exam_types).names
    states = {
        uid: _exam_page.FOLLOWUP_WORDS.get(state, state)
        for uid, state in (followup_states or {}).items()
    }
    rows = _rows.flag_rows(
        table, names, followup=states, kind=kind, room=room, period=period, status=status
    )

    def choices(column: str) -> list[str]:
        return sorted({v for v in table[column] if v})

    return _web.render_page(
        "flags.html",
        context=context,
        page_title="Flags",
        active="flags",
        rows=rows,
        total=len(table),
        can_triage=can_triage and bool(context and context.csrf_token),
        triage_actions=TRIAGE_ACTIONS,
        followup=_exam_page.followup_view(followup) if followup is not None else None,
        filters=[
            ("kind", "Kind", kind or "",
             [(v, words_for(FLAG_KIND_WORDS, v)) for v in choices("kind")]),
            ("room", "Room", room or "", [(v, v) for v in choices("room")]),
            ("period", "Period", period or "",
             [(v, v) for v in sorted(choices("period"), reverse=True)]),
            ("status", "Status", status or "", list(FLAG_STATUS_WORDS.items())),
        ],
    )  # fmt: skip


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
