"""beamaudit.dashboards: plotly figures and HTML pages built from plain tables.

This stage takes plain data (pandas DataFrames or lists of row mappings, see
:mod:`beamaudit.dashboards.tables` and :mod:`beamaudit.dashboards.records`)
and returns plotly figures and HTML strings. It never reads the store; the
API calls the ``render_*`` functions and serves their HTML, and serves
:func:`static_files` under ``/static/``.

Every page carries :data:`CAUTION`: every dose figure is an estimate.
"""

from beamaudit.dashboards.errors import DashboardError, TableError
from beamaudit.dashboards.figures import (
    EVENT_QUANTITIES,
    build_dap_ratio_history,
    build_distribution,
    build_overview_heatmap,
    build_room_history,
    build_skin_dose_map,
    build_spectrum,
)
from beamaudit.dashboards.pages import (
    ROUTES,
    PageContext,
    exam_href,
    flags_href,
    plotly_js_path,
    render_committee_report,
    render_distributions,
    render_error,
    render_exam,
    render_flags,
    render_login,
    render_overview,
    render_room,
    report_href,
    room_href,
    static_files,
)
from beamaudit.dashboards.records import parse_exam
from beamaudit.dashboards.tables import EVENTS, FLAGS, GROUPS, LEVELS, ROOM_HISTORY, TableSpec
from beamaudit.dashboards.wording import CAUTION, STATUS_LOOK

__all__ = [
    "CAUTION",
    "EVENTS",
    "EVENT_QUANTITIES",
    "FLAGS",
    "GROUPS",
    "LEVELS",
    "ROOM_HISTORY",
    "ROUTES",
    "STATUS_LOOK",
    "DashboardError",
    "PageContext",
    "TableError",
    "TableSpec",
    "build_dap_ratio_history",
    "build_distribution",
    "build_overview_heatmap",
    "build_room_history",
    "build_skin_dose_map",
    "build_spectrum",
    "exam_href",
    "flags_href",
    "parse_exam",
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
