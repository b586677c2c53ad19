"""beamaudit.dashboards: plotly figures and HTML pages built from plain tables.

This stage takes plain data (pandas DataFrames or lists of row mappings, see
:mod:`beamaudit.dashboards.tables` and :mod:`beamaudit.dashboards.records`)
and returns plotly figures and HTML strings. It never reads the store; the
API calls the ``render_*`` functions and serves their HTML, and serves
:func:`static_files` under ``/static/``.

Every page carries :data:`CAUTION`: every dose figure is an estimate. Every state a reader
meets is named once, in :data:`VOCABULARY`.
"""

from beamaudit.dashboards.attention import KIND_TIERS, attention_from_flags, rank_attention
from beamaudit.dashboards.distributions import ExamTypes, pick_distribution, study_values
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
    ingest_errors_href,
    plotly_js_path,
    render_committee_report,
    render_distributions,
    render_error,
    render_exam,
    render_flags,
    render_ingest_errors,
    render_levels,
    render_login,
    render_overview,
    render_room,
    render_unmapped,
    report_href,
    room_href,
    static_files,
    unmapped_href,
)
from beamaudit.dashboards.records import parse_exam
from beamaudit.dashboards.skin_image import SkinDoseImage, render_skin_dose_png
from beamaudit.dashboards.tables import (
    ATTENTION,
    EVENTS,
    EXAM_TYPES,
    FLAGS,
    GROUPS,
    INGEST_ERRORS,
    LEVELS,
    ROOM_HISTORY,
    UNMAPPED,
    TableSpec,
)
from beamaudit.dashboards.wording import CAUTION, STATUS_LOOK, VOCABULARY

__all__ = [
    "ATTENTION",
    "CAUTION",
    "EVENTS",
    "EVENT_QUANTITIES",
    "EXAM_TYPES",
    "FLAGS",
    "GROUPS",
    "INGEST_ERRORS",
    "KIND_TIERS",
    "LEVELS",
    "ROOM_HISTORY",
    "ROUTES",
    "STATUS_LOOK",
    "UNMAPPED",
    "VOCABULARY",
    "DashboardError",
    "ExamTypes",
    "PageContext",
    "SkinDoseImage",
    "TableError",
    "TableSpec",
    "attention_from_flags",
    "build_dap_ratio_history",
    "build_distribution",
    "build_overview_heatmap",
    "build_room_history",
    "build_skin_dose_map",
    "build_spectrum",
    "exam_href",
    "flags_href",
    "ingest_errors_href",
    "parse_exam",
    "pick_distribution",
    "plotly_js_path",
    "rank_attention",
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
    "render_skin_dose_png",
    "render_unmapped",
    "report_href",
    "room_href",
    "static_files",
    "study_values",
    "unmapped_href",
]
