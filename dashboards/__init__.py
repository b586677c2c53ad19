"""beamaudit.dashboards: plotly figures and HTML pages built from plain tables.

This stage takes plain data (pandas DataFrames or lists of row mappings, see
:mod:`beamaudit.dashboards.tables` and :mod:`beamaudit.dashboards.records`)
and returns plotly figures and HTML strings. It never reads the store; the
API calls the ``render_*`` functions and serves their HTML, and serves
:func:`static_files` under ``/static/``.

Every page carries :data:`CAUTION`: every dose figure is an estimate. Every state a reader
meets is named once, in :data:`VOCABULARY`.
"""

from typing import TYPE_CHECKING

from beamaudit import lazy_exports

if TYPE_CHECKING:
    from beamaudit.dashboards.attention import KIND_TIERS, attention_from_flags, rank_attention
    from beamaudit.dashboards.distributions import ExamTypes, pick_distribution, study_values
    from beamaudit.dashboards.errors import DashboardError, TableError
    from beamaudit.dashboards.figures import (
        EVENT_QUANTITIES,
        build_dap_ratio_history,
        build_distribution,
        build_overview_heatmap,
        build_ratio_history,
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

#: where each public name lives: imported on first use, so that a command that needs only the
#: wording (the review's summary) does not import the figures and pages
_LAZY: dict[str, str] = {
    "KIND_TIERS": "beamaudit.dashboards.attention",
    "attention_from_flags": "beamaudit.dashboards.attention",
    "rank_attention": "beamaudit.dashboards.attention",
    "ExamTypes": "beamaudit.dashboards.distributions",
    "pick_distribution": "beamaudit.dashboards.distributions",
    "study_values": "beamaudit.dashboards.distributions",
    "DashboardError": "beamaudit.dashboards.errors",
    "TableError": "beamaudit.dashboards.errors",
    "EVENT_QUANTITIES": "beamaudit.dashboards.figures",
    "build_dap_ratio_history": "beamaudit.dashboards.figures",
    "build_distribution": "beamaudit.dashboards.figures",
    "build_ratio_history": "beamaudit.dashboards.figures",
    "build_overview_heatmap": "beamaudit.dashboards.figures",
    "build_room_history": "beamaudit.dashboards.figures",
    "build_skin_dose_map": "beamaudit.dashboards.figures",
    "build_spectrum": "beamaudit.dashboards.figures",
    "ROUTES": "beamaudit.dashboards.pages",
    "PageContext": "beamaudit.dashboards.pages",
    "exam_href": "beamaudit.dashboards.pages",
    "flags_href": "beamaudit.dashboards.pages",
    "ingest_errors_href": "beamaudit.dashboards.pages",
    "plotly_js_path": "beamaudit.dashboards.pages",
    "render_committee_report": "beamaudit.dashboards.pages",
    "render_distributions": "beamaudit.dashboards.pages",
    "render_error": "beamaudit.dashboards.pages",
    "render_exam": "beamaudit.dashboards.pages",
    "render_flags": "beamaudit.dashboards.pages",
    "render_ingest_errors": "beamaudit.dashboards.pages",
    "render_levels": "beamaudit.dashboards.pages",
    "render_login": "beamaudit.dashboards.pages",
    "render_overview": "beamaudit.dashboards.pages",
    "render_room": "beamaudit.dashboards.pages",
    "render_unmapped": "beamaudit.dashboards.pages",
    "report_href": "beamaudit.dashboards.pages",
    "room_href": "beamaudit.dashboards.pages",
    "static_files": "beamaudit.dashboards.pages",
    "unmapped_href": "beamaudit.dashboards.pages",
    "parse_exam": "beamaudit.dashboards.records",
    "SkinDoseImage": "beamaudit.dashboards.skin_image",
    "render_skin_dose_png": "beamaudit.dashboards.skin_image",
    "ATTENTION": "beamaudit.dashboards.tables",
    "EVENTS": "beamaudit.dashboards.tables",
    "EXAM_TYPES": "beamaudit.dashboards.tables",
    "FLAGS": "beamaudit.dashboards.tables",
    "GROUPS": "beamaudit.dashboards.tables",
    "INGEST_ERRORS": "beamaudit.dashboards.tables",
    "LEVELS": "beamaudit.dashboards.tables",
    "ROOM_HISTORY": "beamaudit.dashboards.tables",
    "UNMAPPED": "beamaudit.dashboards.tables",
    "TableSpec": "beamaudit.dashboards.tables",
    "CAUTION": "beamaudit.dashboards.wording",
    "STATUS_LOOK": "beamaudit.dashboards.wording",
    "VOCABULARY": "beamaudit.dashboards.wording",
}

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
    "build_ratio_history",
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


__getattr__ = lazy_exports(__name__, _LAZY)
