"""The committee report: one self-contained HTML page for a review period.

It inlines its style sheet and plotly.js (so it opens from a file, with no
server and no network), prints on A4, and states the method, the reference
level sets, the software version and the caution about estimates.
"""

from __future__ import annotations

import re
from datetime import UTC, datetime

import plotly.graph_objects as go

from beamaudit.dashboards import _rows, _web, figures
from beamaudit.dashboards.errors import DashboardError
from beamaudit.dashboards.tables import EVENTS, FLAGS, GROUPS, LEVELS, TableLike
from beamaudit.dashboards.wording import (
    FLAG_STATUS_WORDS,
    LEVEL_KIND_WORDS,
    STATUS_LOOK,
    quantity_short,
)

__all__ = ["render_committee_report"]

_REPORT_WIDTH_PX = 700  # fits A4 portrait between 12 mm margins at 96 px per inch


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
        examination and quantity whose median is, or may be, over a level.
    flags : table, optional
        The ``FLAGS`` table; the period's flags are summarised.
    facility : str
        Hospital or department name.
    generated_at : datetime, optional
        When the report was made (timezone-aware; shown in UTC); defaults to now.
    """
    _web.check_period(period)
    if not method.strip():
        raise DashboardError("the committee report needs the review method in words")
    if not software_version.strip():
        raise DashboardError("the committee report needs the software version")
    table = GROUPS.validate(groups)
    rows = _rows.group_rows(table, None)
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
    blocks: list[tuple[str, str, _web.FigureBlock]] = []
    if events is not None:
        event_table = EVENTS.validate(events)
        concern = table[table["status"].isin(["above_level", "possibly_above"])]
        pairs = sorted(set(zip(concern["exam_type"], concern["quantity"], strict=True)))
        level_table = LEVELS.validate(table)
        for k, (exam, q) in enumerate(p for p in pairs if p[1] in figures.EVENT_QUANTITIES):
            blocks += _rows.distribution_blocks(
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
    period_flags = _rows.flag_rows(flag_table, period=period)
    return _web.render_page(
        "report.html",
        context=_web.PageContext(facility=facility, software_version=software_version),
        page_title=f"Dose review {period}" + (f", {facility}" if facility else ""),
        has_figures=True,
        inline_css=_web.css_text(),
        inline_plotly=_web.plotly_text(),
        period=period,
        facility=facility,
        method_paragraphs=[p.strip() for p in re.split(r"\n\s*\n", method) if p.strip()],
        software_version=software_version,
        generated=stamp.strftime("%Y-%m-%d %H:%M UTC"),
        status_counts=_rows.status_counts(rows),
        rows=rows,
        level_sets=_rows.level_sets(table),
        heatmap=heatmap,
        blocks=blocks,
        level_rows=[
            {
                "set": r["level_set"] or "(unnamed)",
                "kind": LEVEL_KIND_WORDS.get(r["level_kind"], "–"),
                "exam_type": r["exam_type"],
                "quantity": quantity_short(r["quantity"]),
                "value": _web.fmt(r["reference_level"]),
            }
            for _, r in applied.iterrows()
        ],
        flag_rows=[r for r in period_flags if r["status"] != "closed"],
        flag_counts={s: sum(r["status"] == s for r in period_flags) for s in FLAG_STATUS_WORDS},
        flag_words=FLAG_STATUS_WORDS,
        status_words={k: v.long for k, v in STATUS_LOOK.items()},
    )


def _report_figure(fig: go.Figure, fig_id: str) -> _web.FigureBlock:
    fig.update_layout(width=_REPORT_WIDTH_PX)
    return _web.figure_block(fig, fig_id, static=True)
