"""What every page shares: routes and links, the template environment, files, figure blocks.

Package-internal; the public names are re-exported by :mod:`beamaudit.dashboards.pages`.
"""

from __future__ import annotations

import math
import re
from collections.abc import Sequence
from dataclasses import dataclass
from functools import lru_cache
from importlib import resources
from pathlib import Path
from typing import Any
from urllib.parse import quote, urlencode

import jinja2
import pandas as pd
import plotly.graph_objects as go

from beamaudit.dashboards.errors import DashboardError
from beamaudit.dashboards.tables import PERIOD_PATTERN
from beamaudit.dashboards.wording import CAUTION, STATUS_LOOK, VOCABULARY

__all__ = [
    "ROUTES",
    "TRIAGE_PATH",
    "FigureBlock",
    "PageContext",
    "check_period",
    "css_text",
    "distributions_href",
    "exam_href",
    "figure_block",
    "figure_text",
    "flags_href",
    "fmt",
    "ingest_errors_href",
    "period_choices",
    "plotly_js_path",
    "plotly_text",
    "render_page",
    "report_href",
    "room_href",
    "sort_value",
    "static_files",
    "triage_href",
    "unmapped_href",
]

#: URL paths of the pages, as the API serves them.
ROUTES: dict[str, str] = {
    "overview": "/",
    "distributions": "/distributions",
    "room": "/rooms/{room}",
    "exam": "/exams/{study_uid}",
    "flags": "/flags",
    "report": "/reports/{period}",
    "ingest_errors": "/ingest-errors",
    "unmapped": "/unmapped",
    "levels": "/levels",
    "login": "/login",
}

_NAV = (
    ("/", "Overview", "overview"),
    ("/distributions", "Distributions", "distributions"),
    ("/flags", "Flags", "flags"),
    ("/levels", "Reference levels", "levels"),
    ("/unmapped", "Unmapped protocols", "unmapped"),
    ("/ingest-errors", "Rejected files", "ingest_errors"),
)

#: The API path a flag's triage is sent to (``PATCH``, JSON ``{"status": ..., "note": ...}``).
TRIAGE_PATH = "/api/v1/reviews/{run_id}/flags/{flag_id}"
#: where a procedure's skin-dose map is served as a PNG image
SKIN_MAP_PNG_PATH = "/api/v1/exams/{exam_id}/skin-dose/map.png"
#: where a patient's cumulative skin-dose map is served as a PNG image (pseudonym URL-quoted)
PATIENT_SKIN_MAP_PNG_PATH = "/api/v1/skin-doses/patients/{patient}/map.png"


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
        Who is signed in, shown in the masthead with a sign-out link; empty to show nothing.
    csrf_token : str
        The browser session's CSRF token, in a ``<meta name="csrf-token">`` for the page's own
        scripts (a change made with the session cookie sends it as ``X-CSRF-Token``).
    """

    facility: str = ""
    software_version: str = ""
    signed_in_as: str = ""
    csrf_token: str = ""


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
    env.globals["words"] = VOCABULARY
    return env


def render_page(template: str, *, context: PageContext | None, **values: Any) -> str:
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


def distributions_href(**filters: str | None) -> str:
    """Path of the distributions page, showing ``exam_type``, ``quantity`` of ``period``."""
    query = urlencode({k: v for k, v in filters.items() if v})
    return ROUTES["distributions"] + (f"?{query}" if query else "")


def unmapped_href(period: str | None = None) -> str:
    """Path of the unmapped protocols page (of ``period``)."""
    return ROUTES["unmapped"] + (f"?{urlencode({'period': period})}" if period else "")


def ingest_errors_href() -> str:
    """Path of the rejected files page."""
    return ROUTES["ingest_errors"]


def triage_href(run_id: str, flag_id: str) -> str:
    """The API path that triages one flag (``PATCH``)."""
    return TRIAGE_PATH.format(run_id=quote(run_id, safe=""), flag_id=quote(flag_id, safe=""))


def check_period(period: str, what: str = "period") -> str:
    if not isinstance(period, str) or not PERIOD_PATTERN.match(period):
        raise DashboardError(f"{what} must be a month written YYYY-MM, got {period!r}")
    return period


def period_choices(period: str | None, periods: Sequence[str]) -> list[str]:
    chosen = [check_period(p, "each of periods") for p in periods]
    if period and period not in chosen:
        chosen.append(period)
    return sorted(set(chosen), reverse=True)


# ---------------------------------------------------------------- figures


@dataclass(frozen=True)
class FigureBlock:
    id: str
    label: str
    json: str  # escaped for a <script> element; the template marks it safe
    static: bool = False


#: plotly's own markup that our figures use; any other tag in a figure's texts (a room named
#: ``<a href=...>`` would be a live link, ``<span style=...>`` restyles the chart) is shown as
#: text: its ``<`` becomes ``&lt;``, which plotly displays as ``<`` without reading a tag
_FIGURE_TAGS = re.compile(r"<(?!/?(?:br|b|i|em|sup|sub|extra)>)")
_FIGURE_TAGS_IN_JSON = re.compile(r"\\u003c(?!(?:/|\\u002f)?(?:br|b|i|em|sup|sub|extra)\\u003e)")


def figure_text(text: str) -> str:
    """``text`` as a figure shows it: every tag but plotly's plain formatting (``<br>``, ``<b>``,
    ``<i>``, ``<em>``, ``<sup>``, ``<sub>``, ``<extra>``) written so that it shows as text.

    Examples
    --------
    >>> figure_text('<a href="http://x">room</a><br>DAP')
    '&lt;a href="http://x">room&lt;/a><br>DAP'
    """
    return _FIGURE_TAGS.sub("&lt;", text)


def figure_block(fig: go.Figure, fig_id: str, *, static: bool = False) -> FigureBlock:
    # Escape what could close the <script> element or start markup; JSON.parse reads it back.
    # plotly writes < > / in strings as \u003c \u003e \u002f; make it so whatever the version,
    # then every tag but plotly's plain formatting becomes "&lt;" (as figure_text, in JSON).
    text = (
        fig.to_json()
        .replace("<", "\\u003c")
        .replace(">", "\\u003e")
        .replace("&", "\\u0026")
        .replace("\u2028", "\\u2028")
        .replace("\u2029", "\\u2029")
    )
    text = _FIGURE_TAGS_IN_JSON.sub(r"\\u0026lt;", text)
    title = fig.layout.title.text or fig_id
    return FigureBlock(id=fig_id, label=re.sub(r"<[^>]+>", " ", title), json=text, static=static)


def fmt(value: Any, digits: int = 3) -> str:
    if value is None or (isinstance(value, float) and math.isnan(value)) or value is pd.NA:
        return "–"
    return f"{float(value):.{digits}g}"


def sort_value(value: Any) -> str:
    if value is None or value is pd.NA or (isinstance(value, float) and math.isnan(value)):
        return ""
    return repr(float(value))


def css_text() -> str:
    return static_files()["beamaudit.css"].read_text(encoding="utf-8")


def plotly_text() -> str:
    # "</script" inside the bundle would end the inline element early; break it if present.
    return plotly_js_path().read_text(encoding="utf-8").replace("</script", "<\\/script")
