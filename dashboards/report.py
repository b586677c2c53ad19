"""The committee report: one self-contained HTML page for a review period.

It inlines its style sheet and plotly.js (so it opens from a file, with no
server and no network), prints on A4, and states the method, the reference
level sets, the software version and the caution about estimates.
"""

from __future__ import annotations

import re
from collections.abc import Mapping, Sequence
from datetime import UTC, datetime
from typing import Any

import pandas as pd
import plotly.graph_objects as go

from beamaudit.dashboards import _exam_page, _rows, _web, figures
from beamaudit.dashboards._heatmap_figure import heatmap_key
from beamaudit.dashboards.attention import rank_attention
from beamaudit.dashboards.distributions import ExamTypes
from beamaudit.dashboards.errors import DashboardError
from beamaudit.dashboards.rounding import format_level
from beamaudit.dashboards.tables import EVENTS, FLAGS, GROUPS, LEVELS, TableLike
from beamaudit.dashboards.wording import (
    FLAG_STATUS_WORDS,
    LEVEL_KIND_WORDS,
    SEVERITY_WORDS,
    STATUS_LOOK,
    quantity_short,
    words_for,
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
    attention: TableLike | None = None,
    exam_types: TableLike | None = None,
    facility: str = "",
    generated_at: datetime | None = None,
    followup: Sequence[Mapping[str, Any]] | None = None,
) -> str:
    """A self-contained committee report for one review period (served at ``/reports/{period}``).

    The page inlines its style sheet and plotly.js, makes no request, and prints on A4 (on
    screen it is as wide as the window allows, up to a comfortable reading width). It opens with
    what needs attention, then states the method, the reference-level sets used, the results,
    the software version and the caution about estimates. Links back to the other pages are
    shown on screen, not on paper.

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
        examination and quantity whose median is, or may be, above a level.
    flags : table, optional
        The ``FLAGS`` table; the period's flags are summarised.
    attention : table, optional
        The ``ATTENTION`` table of the period (as the overview's); its lines open the report.
    exam_types : table, optional
        The ``EXAM_TYPES`` table: names, and which types are judged per examination.
    facility : str
        Hospital or department name.
    generated_at : datetime, optional
        When the report was made (timezone-aware; shown in UTC); defaults to now.
    followup : sequence of mappings, optional
        Fluoroscopy and interventional procedures of the period at or above an NCRP 168
        substantial radiation dose level, closed ones included (``study_instance_uid``,
        ``study_datetime``, ``room``, ``exam_type``, ``peak_skin_dose_mgy``, ``uncertainty_pct``,
        ``level_checks``, ``followup_status``, ``followup_at``); a section lists them with their
        follow-up state. No pseudonym and no note is shown. None leaves the section out.
    """
    _web.check_period(period)
    if not method.strip():
        raise DashboardError("the committee report needs the review method in words")
    if not software_version.strip():
        raise DashboardError("the committee report needs the software version")
    table = GROUPS.validate(groups)
    catalogue = ExamTypes(exam_types)
    rows = _rows.group_rows(table, None, catalogue.names)
    stamp = (generated_at or datetime.now(UTC)).astimezone(UTC)
    applied = _applied_levels(table, catalogue)
    heatmap = _report_heatmap(table, catalogue)
    blocks = _distribution_blocks(events, table, catalogue) if events is not None else []
    flag_table = FLAGS.validate(flags if flags is not None else [])
    period_flags = _rows.flag_rows(flag_table, catalogue.names, period=period)
    lines = None
    if attention is not None:
        lines = [
            {**r, "severity_words": words_for(SEVERITY_WORDS, r["severity"])}
            for r in rank_attention(attention).to_dict("records")
        ]
    return _web.render_page(
        "report.html",
        context=_web.PageContext(facility=facility, software_version=software_version),
        page_title=f"Dose review {period}" + (f", {facility}" if facility else ""),
        has_figures=heatmap is not None or bool(blocks),
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
        key=heatmap_key(),
        blocks=blocks,
        attention=lines,
        level_rows=_level_rows(applied, catalogue),
        flag_rows=[r for r in period_flags if r["status"] != "closed"],
        followup=(
            _exam_page.followup_report_view(followup, catalogue.names)
            if followup is not None
            else None
        ),
        flag_counts=[
            (words, sum(r["status"] == s for r in period_flags))
            for s, words in FLAG_STATUS_WORDS.items()
        ],
        status_words={k: v.long for k, v in STATUS_LOOK.items()},
        overview_href=_web.ROUTES["overview"] + f"?period={period}",
        flags_href=_web.flags_href(period=period),
        distributions_href=_web.distributions_href(period=period),
    )


def _applied_levels(table: pd.DataFrame, catalogue: ExamTypes) -> pd.DataFrame:
    """One row per level applied in the period (by kind, set, examination name, quantity)."""
    return (
        table[table["reference_level"].notna()]
        .drop_duplicates(["level_set", "level_kind", "exam_type", "quantity", "reference_level"])
        .assign(_name=lambda t: t["exam_type"].map(catalogue.name))
        .sort_values(["level_kind", "level_set", "_name", "quantity"])
    )


def _level_rows(applied: pd.DataFrame, catalogue: ExamTypes) -> list[dict[str, Any]]:
    """The report's table of the levels applied, in words."""
    return [
        {
            "set": r["level_set"] or "(unnamed)",
            "kind": LEVEL_KIND_WORDS.get(r["level_kind"], "–"),
            "exam_type": catalogue.name(r["exam_type"]),
            "quantity": quantity_short(r["quantity"]),
            "value": format_level(r["reference_level"]),
        }
        for _, r in applied.iterrows()
    ]


def _report_heatmap(table: pd.DataFrame, catalogue: ExamTypes) -> _web.FigureBlock | None:
    """The median ÷ level heatmap at the report's width, or None when no group has a level."""
    levelled = table[table["status"] != "no_level"]
    if levelled.empty:
        return None
    return _report_figure(
        figures.build_overview_heatmap(
            table,
            title="Median ÷ reference level",
            exam_names=catalogue.names,
            width_px=_REPORT_WIDTH_PX,
            colour_bar=False,  # the key above the figure names the colours
        ),
        "report-heatmap",
    )


def _distribution_blocks(
    events: TableLike, table: pd.DataFrame, catalogue: ExamTypes
) -> list[tuple[str, str, _web.FigureBlock]]:
    """A distribution figure per examination and quantity above, or possibly above, a level."""
    blocks: list[tuple[str, str, _web.FigureBlock]] = []
    event_table = EVENTS.validate(events)
    concern = table[table["status"].isin(["above_level", "possibly_above"])]
    pairs = sorted(set(zip(concern["exam_type"], concern["quantity"], strict=True)))
    level_table = LEVELS.validate(table)
    for k, (exam, q) in enumerate(p for p in pairs if p[1] in figures.EVENT_QUANTITIES):
        block = _rows.distribution_block(
            event_table, level_table, exam_type=exam, quantity=q, catalogue=catalogue,
            log_y=False, static=True, width_px=_REPORT_WIDTH_PX, fig_id=f"report-dist-{k}",
        )  # fmt: skip
        if block is not None:
            blocks.append((exam, q, block))
    return blocks


def _report_figure(fig: go.Figure, fig_id: str) -> _web.FigureBlock:
    fig.update_layout(width=_REPORT_WIDTH_PX)
    return _web.figure_block(fig, fig_id, static=True)
