"""HTML pages: each ``render_x(...)`` takes plain tables and returns one HTML string.

The API serves these strings behind its authentication. Links between pages
use the paths the API serves (see :data:`ROUTES`); plotly.js and the style
sheet are referenced as ``/static/plotly.min.js`` and ``/static/beamaudit.css``
(the files are found with :func:`static_files`), except in the committee
report, which inlines both so that it stands alone as one file.

Every page carries the caution about estimates (:data:`~beamaudit.dashboards.wording.CAUTION`).
"""

from __future__ import annotations

import math
import re
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from datetime import UTC, datetime
from functools import lru_cache
from importlib import resources
from pathlib import Path
from typing import Any
from urllib.parse import quote, urlencode

import jinja2
import pandas as pd
import plotly.graph_objects as go

from beamaudit.dashboards import figures
from beamaudit.dashboards.errors import DashboardError
from beamaudit.dashboards.records import parse_exam
from beamaudit.dashboards.tables import (
    EVENTS,
    FLAGS,
    GROUPS,
    LEVELS,
    PERIOD_PATTERN,
    ROOM_HISTORY,
    TableLike,
)
from beamaudit.dashboards.wording import (
    CAUTION,
    FLAG_STATUS_WORDS,
    LEVEL_KIND_WORDS,
    STATUS_LOOK,
    quantity_label,
    quantity_short,
    quantity_unit,
)

__all__ = [
    "ROUTES",
    "PageContext",
    "exam_href",
    "flags_href",
    "plotly_js_path",
    "render_committee_report",
    "render_distributions",
    "render_exam",
    "render_flags",
    "render_login",
    "render_overview",
    "render_room",
    "report_href",
    "room_href",
    "static_files",
]

#: URL paths of the pages, as the API serves them.
ROUTES: dict[str, str] = {
    "overview": "/",
    "distributions": "/distributions",
    "room": "/rooms/{room}",
    "exam": "/exams/{study_uid}",
    "flags": "/flags",
    "report": "/reports/{period}",
    "login": "/login",
}

_NAV = (
    ("/", "Overview", "overview"),
    ("/distributions", "Distributions", "distributions"),
    ("/flags", "Flags", "flags"),
)


@dataclass(frozen=True)
class PageContext:
    """What every page may show about where it runs.

    Attributes
    ----------
    facility : str
        Name of the hospital or department, shown in the masthead.
    software_version : str
        beamaudit's version, shown in the footer (the API passes it).
    signed_in_as : str
        Who is signed in, shown in the masthead; empty to show nothing.
    """

    facility: str = ""
    software_version: str = ""
    signed_in_as: str = ""


# ------------------------------------------------------------------ files


def plotly_js_path() -> Path:
    """Path of ``plotly.min.js`` inside the installed plotly package.

    Raises
    ------
    DashboardError
        The installed plotly has no bundled ``plotly.min.js``.
    """
    path = Path(str(resources.files("plotly") / "package_data" / "plotly.min.js"))
    if not path.is_file():
        raise DashboardError(f"plotly.min.js is not where plotly keeps it: {path}")
    return path


def static_files() -> dict[str, Path]:
    """The files the API serves under ``/static/{name}``, by name.

    Returns
    -------
    dict of str to Path
        ``"plotly.min.js"`` (from the plotly package) and every file in this
        package's ``static/`` folder.
    """
    folder = Path(str(resources.files("beamaudit.dashboards") / "static"))
    files = {p.name: p for p in sorted(folder.iterdir()) if p.is_file()}
    files["plotly.min.js"] = plotly_js_path()
    return files


@lru_cache(maxsize=1)
def _environment() -> jinja2.Environment:
    env = jinja2.Environment(
        loader=jinja2.PackageLoader("beamaudit.dashboards", "templates"),
        autoescape=True,
        undefined=jinja2.StrictUndefined,
        trim_blocks=True,
        lstrip_blocks=True,
    )
    env.globals["status_look"] = STATUS_LOOK
    return env


def _render(template: str, *, context: PageContext | None, **values: Any) -> str:
    values.setdefault("has_figures", False)
    values.setdefault("inline_css", None)
    values.setdefault("inline_plotly", None)
    values.setdefault("active", "")
    return (
        _environment()
        .get_template(template)
        .render(
            caution=CAUTION,
            context=context or PageContext(),
            nav_links=_NAV,
            **values,
        )
    )


# ------------------------------------------------------------------ links


def room_href(room: str) -> str:
    """Path of a room's page."""
    return ROUTES["room"].format(room=quote(room, safe=""))


def exam_href(study_uid: str) -> str:
    """Path of an examination's drill-down page."""
    return ROUTES["exam"].format(study_uid=quote(study_uid, safe=""))


def report_href(period: str) -> str:
    """Path of a period's committee report."""
    return ROUTES["report"].format(period=quote(period, safe=""))


def flags_href(**filters: str | None) -> str:
    """Path of the flags list, filtered by ``kind``, ``room``, ``period``, ``status``."""
    query = urlencode({k: v for k, v in filters.items() if v})
    return ROUTES["flags"] + (f"?{query}" if query else "")


def _distributions_href(**filters: str | None) -> str:
    query = urlencode({k: v for k, v in filters.items() if v})
    return ROUTES["distributions"] + (f"?{query}" if query else "")


def _check_period(period: str, what: str = "period") -> str:
    if not isinstance(period, str) or not PERIOD_PATTERN.match(period):
        raise DashboardError(f"{what} must be a month written YYYY-MM, got {period!r}")
    return period


def _periods(period: str | None, periods: Sequence[str]) -> list[str]:
    chosen = [_check_period(p, "each of periods") for p in periods]
    if period and period not in chosen:
        chosen.append(period)
    return sorted(set(chosen), reverse=True)


# ---------------------------------------------------------------- figures


@dataclass(frozen=True)
class _FigureBlock:
    id: str
    label: str
    json: str  # escaped for a <script> element; the template marks it safe
    static: bool = False


def _figure_block(fig: go.Figure, fig_id: str, *, static: bool = False) -> _FigureBlock:
    # Escape what could close the <script> element or start markup; JSON.parse reads it back.
    text = (
        fig.to_json()
        .replace("<", "\\u003c")
        .replace(">", "\\u003e")
        .replace("&", "\\u0026")
        .replace("\u2028", "\\u2028")
        .replace("\u2029", "\\u2029")
    )
    title = fig.layout.title.text or fig_id
    return _FigureBlock(id=fig_id, label=re.sub(r"<[^>]+>", " ", title), json=text, static=static)


def _fmt(value: Any, digits: int = 3) -> str:
    if value is None or (isinstance(value, float) and math.isnan(value)) or value is pd.NA:
        return "–"
    return f"{float(value):.{digits}g}"


def _sort_value(value: Any) -> str:
    if value is None or value is pd.NA or (isinstance(value, float) and math.isnan(value)):
        return ""
    return repr(float(value))


def _comparison(row: pd.Series) -> dict[str, Any]:
    """One level a group is compared with, in words."""
    if pd.isna(row["reference_level"]):
        level = "–"
    else:
        kind = {"local": "Local", "national": "National"}.get(row["level_kind"], "Level")
        level = f"{kind} {_fmt(row['reference_level'])} {quantity_unit(row['quantity'])}"
    return {
        "level": level,
        "level_set": row["level_set"] or "",
        "ratio": "" if pd.isna(row["ratio_to_level"]) else f"{row['ratio_to_level']:.2f}×",
        "status": row["status"],
        "reason": row["status_reason"] or "",
    }


def _group_rows(table: pd.DataFrame, period: str | None) -> list[dict[str, Any]]:
    """One row per (room, exam_type, quantity), its comparisons with each level inside.

    The row's status is its most urgent comparison's; its ratio the largest.
    Rows come most urgent first, then by ratio, room and examination.
    """
    rows = []
    for (room, exam, quantity), part in table.groupby(["room", "exam_type", "quantity"], sort=True):
        part = part.assign(_rank=part["status"].map(lambda v: STATUS_LOOK[v].rank))
        part = part.sort_values(["_rank", "ratio_to_level"], ascending=[True, False])
        first = part.iloc[0]
        ratio = part["ratio_to_level"].max()
        comparisons = [_comparison(r) for _, r in part.iterrows()]
        reasons = list(dict.fromkeys(c["reason"] for c in comparisons if c["reason"]))
        rows.append(
            {
                "room": room,
                "room_href": room_href(room),
                "exam_type": exam,
                "exam_href": _distributions_href(exam_type=exam, quantity=quantity, period=period),
                "quantity": quantity,
                "quantity_label": quantity_short(quantity),
                "n": int(first["n"]),
                "n_standard": int(first["n_standard"]),
                "median": _fmt(first["median"]),
                "median_value": _sort_value(first["median"]),
                "quartiles": f"{_fmt(first['q1'])} – {_fmt(first['q3'])}",
                "comparisons": comparisons,
                "ratio": "–" if pd.isna(ratio) else f"{ratio:.2f}",
                "ratio_value": _sort_value(ratio),
                "status": first["status"],
                "status_rank": STATUS_LOOK[first["status"]].rank,
                "reasons": reasons,
            }
        )
    rows.sort(key=lambda r: (r["status_rank"], -float(r["ratio_value"] or -1), r["room"]))
    return rows


def _level_sets(table: pd.DataFrame) -> list[tuple[str, str]]:
    """The (kind in words, set name) pairs used in a groups table."""
    used = table.dropna(subset=["reference_level"]).drop_duplicates(["level_kind", "level_set"])
    return sorted(
        (LEVEL_KIND_WORDS.get(k, "Level"), s or "(no name given)")
        for k, s in zip(used["level_kind"], used["level_set"], strict=True)
    )


def _status_counts(rows: list[dict[str, Any]]) -> list[tuple[str, int]]:
    """How many groups (rows of :func:`_group_rows`) have each status, most urgent first."""
    counts: dict[str, int] = {}
    for row in rows:
        counts[row["status"]] = counts.get(row["status"], 0) + 1
    return sorted(counts.items(), key=lambda item: STATUS_LOOK[item[0]].rank)


# ------------------------------------------------------------------ pages


def render_overview(
    groups: TableLike,
    *,
    period: str,
    periods: Sequence[str] = (),
    open_flags: int | None = None,
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
    context : PageContext, optional
        Facility, version, user.

    Returns
    -------
    str
        The HTML page.
    """
    _check_period(period)
    table = GROUPS.validate(groups)
    rows = _group_rows(table, period)
    return _render(
        "overview.html",
        context=context,
        page_title=f"Review of {period}",
        active="overview",
        has_figures=not table.empty,
        period=period,
        periods=_periods(period, periods),
        rows=rows,
        level_sets=_level_sets(table),
        status_counts=_status_counts(rows),
        heatmap=_figure_block(
            figures.build_overview_heatmap(
                table, title="Median ÷ reference level, by room and examination"
            ),
            "overview-heatmap",
        ),
        open_flags=open_flags,
        flags_href=flags_href(period=period, status="open"),
        report_href=report_href(period),
    )


def _distribution_blocks(
    events: pd.DataFrame,
    levels: pd.DataFrame | None,
    *,
    exam_type: str | None,
    quantity: str | None,
    log_y: bool,
    static: bool = False,
    width_px: int | None = None,
    id_prefix: str = "dist",
) -> list[tuple[str, str, _FigureBlock]]:
    blocks: list[tuple[str, str, _FigureBlock]] = []
    exam_types = sorted(events["exam_type"].unique()) if exam_type is None else [exam_type]
    for exam in exam_types:
        rows = events[events["exam_type"] == exam]
        if quantity is not None:
            quantities = [quantity]
        elif levels is not None and (levels["exam_type"] == exam).any():
            # the quantities the review covers for this examination
            covered = set(levels.loc[levels["exam_type"] == exam, "quantity"])
            quantities = [q for q in figures.EVENT_QUANTITIES if q in covered]
        else:
            quantities = list(figures.EVENT_QUANTITIES)
        for q in quantities:
            if q not in rows.columns or not rows[q].notna().any():
                continue
            fig = figures._distribution(rows, levels, quantity=q, exam_type=exam, log_y=log_y)
            if width_px is not None:
                fig.update_layout(width=width_px)
            fig_id = f"{id_prefix}-{len(blocks)}"
            blocks.append((exam, q, _figure_block(fig, fig_id, static=static)))
    return blocks


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
        _check_period(period)
    if quantity is not None and quantity not in figures.EVENT_QUANTITIES:
        raise DashboardError(
            f"quantity '{quantity}' is not one of {', '.join(figures.EVENT_QUANTITIES)}"
        )
    blocks = _distribution_blocks(
        table, level_table, exam_type=exam_type, quantity=quantity, log_y=log_y
    )
    present = [q for q in figures.EVENT_QUANTITIES if table[q].notna().any()]
    return _render(
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
        periods=_periods(period, periods),
        log_y=log_y,
        level_sets=[] if level_table is None else _level_sets(level_table),
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
        _figure_block(figures._room_history(table, quantity=q, room=room), f"history-{i}")
        for i, q in enumerate(quantities)
    ]
    ratio_block = None
    if table["dap_ratio_median"].notna().any():
        ratio_block = _figure_block(figures._dap_ratio_history(table, room=room), "dap-ratio")
    flag_rows = _flag_rows(FLAGS.validate(flags if flags is not None else []), room=room)
    changes = table[table["change_point"]].sort_values("month")
    return _render(
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


def _flag_rows(table: pd.DataFrame, **only: str | None) -> list[dict[str, Any]]:
    for key, value in only.items():
        if value:
            table = table[table[key] == value]
    status_order = {"open": 0, "acknowledged": 1, "closed": 2}
    table = table.assign(_order=table["status"].map(status_order)).sort_values(
        ["_order", "period", "room", "kind"],
        ascending=[True, False, True, True],
        na_position="last",
    )
    return [
        {
            "kind": r["kind"],
            "severity": r["severity"],
            "reason": r["reason"],
            "room": r["room"] or "",
            "room_href": room_href(r["room"]) if r["room"] else "",
            "exam_type": r["exam_type"] or "",
            "period": r["period"],
            "status": r["status"],
            "status_words": FLAG_STATUS_WORDS[r["status"]],
            "study_uid": r["study_uid"] or "",
            "exam_href": exam_href(r["study_uid"]) if r["study_uid"] else "",
            "event_id": r["event_id"] or "",
        }
        for _, r in table.iterrows()
    ]


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
            spectrum_block = _figure_block(
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
                "when": _when(exposure.event_datetime),
                "technique": [
                    (quantity_label(k), _fmt(v, 4) if isinstance(v, float) else _plain(v))
                    for k, v in exposure.technique
                ],
                "dose": [
                    {
                        "label": quantity_label(d.name, with_unit=False),
                        "value": _fmt(d.value),
                        "uncertainty": _fmt(d.uncertainty, 2) if d.uncertainty is not None else "",
                        "unit": d.unit,
                        "reported": _fmt(d.reported) if d.reported is not None else "–",
                        "ratio": f"{d.ratio:.2f}" if d.ratio is not None else "–",
                    }
                    for d in exposure.dose
                ],
                "why": [
                    {
                        "label": quantity_label(s.quantity, with_unit=False),
                        "value": _fmt(s.value, 4),
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
    return _render(
        "exam.html",
        context=context,
        page_title=f"{detail.exam_type}, {detail.room}",
        active="",
        has_figures=any(e["spectrum"] is not None for e in exposures),
        exam=detail,
        when=_when(detail.study_datetime),
        weight=_fmt(detail.patient_weight_kg) if detail.patient_weight_kg is not None else "–",
        standard={True: "yes", False: "no", None: "not known"}[detail.standard_patient],
        exposures=exposures,
        flag_rows=_flag_rows(detail.flags),
        back_href=back_href or room_href(detail.room),
        room_href=room_href(detail.room),
    )


def _plain(value: Any) -> str:
    if value is None:
        return "–"
    if isinstance(value, bool):
        return "yes" if value else "no"
    return str(value)


def _when(stamp: pd.Timestamp | None) -> str:
    return "–" if stamp is None else stamp.strftime("%Y-%m-%d %H:%M UTC")


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
        _check_period(period)
    rows = _flag_rows(table, kind=kind, room=room, period=period, status=status)

    def choices(column: str) -> list[str]:
        return sorted({v for v in table[column] if v})

    return _render(
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
    return _render(
        "login.html",
        context=context,
        page_title="Sign in",
        active="",
        error=error,
        next_path=safe_next,
    )


def render_committee_report(
    groups: TableLike,
    *,
    period: str,
    method: str,
    software_version: str,
    events: TableLike | None = None,
    flags: TableLike | None = None,
    facility: str = "",
    generated_at: datetime | None = None,
) -> str:
    """A self-contained committee report for one review period (served at ``/reports/{period}``).

    The page inlines its style sheet and plotly.js, makes no request and
    prints on A4. It states the method, the reference-level sets used, the
    software version and the caution about estimates.

    Parameters
    ----------
    groups : table
        The ``GROUPS`` table of ``period``.
    period : str
        The review period, ``YYYY-MM``.
    method : str
        How the review was done, in words (paragraphs separated by blank lines).
    software_version : str
        beamaudit's version.
    events : table, optional
        The ``EVENTS`` table of the period; adds a distribution figure for each
        examination and quantity with a status other than "under the level".
    flags : table, optional
        The ``FLAGS`` table; the period's flags are summarised.
    facility : str
        Hospital or department name.
    generated_at : datetime, optional
        When the report was made (UTC); defaults to now.
    """
    _check_period(period)
    if not method.strip():
        raise DashboardError("the committee report needs the review method in words")
    if not software_version.strip():
        raise DashboardError("the committee report needs the software version")
    table = GROUPS.validate(groups)
    rows = _group_rows(table, None)
    stamp = (generated_at or datetime.now(UTC)).astimezone(UTC)
    applied = (
        table[table["reference_level"].notna()]
        .drop_duplicates(["level_set", "level_kind", "exam_type", "quantity", "reference_level"])
        .sort_values(["level_kind", "level_set", "exam_type", "quantity"])
    )
    n_columns = len(table.drop_duplicates(["exam_type", "quantity"]))
    heatmap = _report_figure(
        figures.build_overview_heatmap(
            table,
            rooms_across=n_columns > table["room"].nunique(),
            title="Median ÷ reference level",
        ),
        "report-heatmap",
    )
    blocks: list[tuple[str, str, _FigureBlock]] = []
    if events is not None:
        event_table = EVENTS.validate(events)
        concern = table[table["status"].isin(["above_level", "possibly_above"])]
        pairs = sorted(set(zip(concern["exam_type"], concern["quantity"], strict=True)))
        level_table = LEVELS.validate(table)
        for k, (exam, q) in enumerate(p for p in pairs if p[1] in figures.EVENT_QUANTITIES):
            blocks += _distribution_blocks(
                event_table,
                level_table,
                exam_type=exam,
                quantity=q,
                log_y=False,
                static=True,
                width_px=_REPORT_WIDTH_PX,
                id_prefix=f"report-dist-{k}",
            )
    flag_table = FLAGS.validate(flags if flags is not None else [])
    period_flags = _flag_rows(flag_table, period=period)
    return _render(
        "report.html",
        context=PageContext(facility=facility, software_version=software_version),
        page_title=f"Dose review {period}" + (f", {facility}" if facility else ""),
        has_figures=True,
        inline_css=_css_text(),
        inline_plotly=_plotly_text(),
        period=period,
        facility=facility,
        method_paragraphs=[p.strip() for p in re.split(r"\n\s*\n", method) if p.strip()],
        software_version=software_version,
        generated=stamp.strftime("%Y-%m-%d %H:%M UTC"),
        status_counts=_status_counts(rows),
        rows=rows,
        level_sets=_level_sets(table),
        heatmap=heatmap,
        blocks=blocks,
        level_rows=[
            {
                "set": r["level_set"] or "(unnamed)",
                "kind": LEVEL_KIND_WORDS.get(r["level_kind"], "–"),
                "exam_type": r["exam_type"],
                "quantity": quantity_short(r["quantity"]),
                "value": _fmt(r["reference_level"]),
            }
            for _, r in applied.iterrows()
        ],
        flag_rows=[r for r in period_flags if r["status"] != "closed"],
        flag_counts={s: sum(r["status"] == s for r in period_flags) for s in FLAG_STATUS_WORDS},
        flag_words=FLAG_STATUS_WORDS,
        status_words={k: v.long for k, v in STATUS_LOOK.items()},
    )


_REPORT_WIDTH_PX = 700  # fits A4 portrait between 12 mm margins at 96 px per inch


def _report_figure(fig: go.Figure, fig_id: str) -> _FigureBlock:
    fig.update_layout(width=_REPORT_WIDTH_PX)
    return _figure_block(fig, fig_id, static=True)


def _css_text() -> str:
    return static_files()["beamaudit.css"].read_text(encoding="utf-8")


def _plotly_text() -> str:
    # "</script" inside the bundle would end the inline element early; break it if present.
    return plotly_js_path().read_text(encoding="utf-8").replace("</script", "<\\/script")
