"""Figures of a review period: the overview heatmap and the distributions per room."""

from __future__ import annotations

import math
from typing import Any

import pandas as pd
import plotly.graph_objects as go

from beamaudit.dashboards._figstyle import INK, fmt, no_data, series, style
from beamaudit.dashboards.errors import TableError
from beamaudit.dashboards.tables import EVENTS, GROUPS, LEVELS, TableLike
from beamaudit.dashboards.wording import (
    LEVEL_KIND_WORDS,
    OKABE_ITO,
    STATUS_LOOK,
    quantity_short,
    quantity_unit,
)

__all__ = ["EVENT_QUANTITIES", "build_distribution", "build_overview_heatmap"]

#: Dose columns of the events table that a distribution can show.
EVENT_QUANTITIES: tuple[str, ...] = (
    "dap_gy_cm2",
    "recon_dap_gy_cm2",
    "esak_mgy",
    "ctdivol_mgy",
    "dlp_mgy_cm",
    "ref_point_air_kerma_mgy",
    "agd_mgy",
)


# Ratio colour scale: blue under the level, warm paper at it, vermillion over it.
# Plotted on log2(ratio) so that half and double the level sit equally far from 1.
_RATIO_SCALE = [
    [0.0, OKABE_ITO["blue"]],
    [0.3, "#8DB8D9"],
    [0.5, "#F2EFE8"],
    [0.7, "#EEB184"],
    [1.0, OKABE_ITO["vermillion"]],
]
# Cells of these statuses are grey whatever their ratio: the ratio is not a finding.
_GREY_STATUSES = frozenset({"insufficient_sample", "no_level"})
_RATIO_SPAN_LOG2 = 2.0  # colour saturates at a quarter and at four times the level
_RATIO_TICKS = (0.25, 0.5, 0.75, 1.0, 1.5, 2.0, 4.0)


# ---------------------------------------------------------------- overview


def _cell_text(row: pd.Series) -> str:
    look = STATUS_LOOK[row["status"]]
    ratio = row["ratio_to_level"]
    if pd.isna(ratio):
        return f"{look.symbol} {look.brief}"
    if row["status"] in _GREY_STATUSES:
        return f"{look.symbol} {look.brief} · {ratio:.2f}×"
    return f"{look.symbol} {ratio:.2f}×"


def _cell_hover(rows: pd.DataFrame) -> str:
    first = rows.iloc[0]
    unit = quantity_short(first["quantity"])
    lines = [
        f"<b>{first['room']}</b> · {first['exam_type']}",
        f"{unit}: median {fmt(first['median'])}, n = {first['n']} ({first['n_standard']} standard)",
    ]
    for _, row in rows.iterrows():
        look = STATUS_LOOK[row["status"]]
        if pd.isna(row["reference_level"]):
            lines.append(f"{look.symbol} {look.short}")
            continue
        kind = LEVEL_KIND_WORDS.get(row["level_kind"], "Level")
        lines.append(
            f"{kind} {fmt(row['reference_level'])}: ratio {fmt(row['ratio_to_level'])}"
            f" {look.symbol} {look.short}"
        )
    return "<br>".join(lines)


def build_overview_heatmap(
    groups: TableLike, *, rooms_across: bool = False, title: str | None = None
) -> go.Figure:
    """A grid of rooms by examination (and quantity), coloured by median ÷ level.

    Each cell shows the symbol of the group's most urgent status and the ratio
    of its median to that level; the colour is the largest ratio over the
    levels the group is compared with, and the hover text lists each. Cells
    with too few patients or no level are grey and say so in words.

    Parameters
    ----------
    groups : table
        The ``GROUPS`` table of one review period.
    rooms_across : bool
        Put rooms on the horizontal axis and examinations down the side
        (for a narrow page with more examinations than rooms).
    title : str, optional
        Figure title.

    Returns
    -------
    plotly.graph_objects.Figure
        Trace 0: ratio cells (``z`` is log2 of the ratio); trace 1: grey cells
        (too few patients, no level). Without ``rooms_across``, ``x`` holds
        "examination<br>quantity (unit)" and ``y`` the rooms.
    """
    table = GROUPS.validate(groups)
    fig = go.Figure()
    exam_title = "Examination · quantity (unit)"
    style(
        fig,
        title=title,
        x_title="Room" if rooms_across else exam_title,
        y_title=exam_title if rooms_across else "Room",
        legend=False,
    )
    if table.empty:
        return no_data(fig, "No review groups in this period")
    table["column"] = table["exam_type"] + "<br>" + table["quantity"].map(quantity_short)
    # plotly draws the first y category at the bottom: reverse so the first reads at the top
    rooms = sorted(table["room"].unique())
    columns = sorted(table["column"].unique())
    x_values, y_values = (rooms, columns[::-1]) if rooms_across else (columns, rooms[::-1])
    shape = (len(y_values), len(x_values))
    z = _grid(shape, None)
    z_gap = _grid(shape, None)
    text = _grid(shape, "")
    hover = _grid(shape, "")
    for (room, column), rows in table.groupby(["room", "column"], sort=False):
        x, y = (room, column) if rooms_across else (column, room)
        i, j = y_values.index(y), x_values.index(x)
        ranked = rows.assign(
            _rank=rows["status"].map(lambda v: STATUS_LOOK[v].rank),
            _ratio=rows["ratio_to_level"].fillna(-1.0),
        ).sort_values(["_rank", "_ratio"], ascending=[True, False])
        pick = ranked.iloc[0]
        text[i][j] = _cell_text(pick)
        if pick["status"] in _GREY_STATUSES or pd.isna(pick["ratio_to_level"]):
            z_gap[i][j] = 0.0
        else:
            ratio = max(float(ranked["ratio_to_level"].max()), 1e-6)
            z[i][j] = max(-_RATIO_SPAN_LOG2, min(_RATIO_SPAN_LOG2, math.log2(ratio)))
        hover[i][j] = _cell_hover(rows)
    ticks = [math.log2(t) for t in _RATIO_TICKS]
    crowded = len(x_values) > 10  # many examinations: slanted labels, cell text only on hover
    if len(x_values) > 16:
        text = _grid(shape, "")
    common = {
        "x": x_values,
        "y": y_values,
        "text": text,
        "customdata": hover,
        "texttemplate": "%{text}",
        "hovertemplate": "%{customdata}<extra></extra>",
        "xgap": 3,
        "ygap": 3,
        "textfont": {"size": 10 if crowded else (11 if rooms_across else 13)},
    }
    fig.add_trace(
        go.Heatmap(
            z=z,
            name="Median ÷ level",
            colorscale=_RATIO_SCALE,
            zmin=-_RATIO_SPAN_LOG2,
            zmax=_RATIO_SPAN_LOG2,
            zmid=0.0,
            colorbar={
                "title": {"text": "Median ÷ level (1)", "side": "right"},
                "tickvals": ticks,
                "ticktext": [f"{t:g}" for t in _RATIO_TICKS],
            },
            **common,
        )
    )
    fig.add_trace(
        go.Heatmap(
            z=z_gap,
            name="No ratio",
            colorscale=[[0.0, "#E6E6E6"], [1.0, "#E6E6E6"]],
            showscale=False,
            **common,
        )
    )
    # crowded: each label on one line, steeply slanted, so that neighbours never overlap
    labels = [v.replace("<br>", " · ") for v in x_values] if crowded else x_values
    fig.update_xaxes(
        categoryorder="array",
        categoryarray=x_values,
        tickvals=x_values,
        ticktext=labels,
        showgrid=False,
        ticks="",
        tickangle=-60 if crowded else 0,
        tickfont={"size": 11} if crowded else None,
    )
    fig.update_yaxes(categoryorder="array", categoryarray=y_values, showgrid=False, ticks="")
    fig.update_layout(
        height=max(280, (56 if rooms_across else 64) * len(y_values) + (320 if crowded else 200))
    )
    return fig


def _grid(shape: tuple[int, int], fill: Any) -> list[list[Any]]:
    return [[fill] * shape[1] for _ in range(shape[0])]


# ----------------------------------------------------------- distributions


def _check_quantity(quantity: str) -> None:
    if quantity not in EVENT_QUANTITIES:
        raise TableError(
            f"quantity '{quantity}' is not a dose column of the events table; "
            f"choose one of {', '.join(EVENT_QUANTITIES)}"
        )


def build_distribution(
    events: TableLike,
    *,
    quantity: str,
    exam_type: str,
    levels: TableLike | None = None,
    log_y: bool = False,
    title: str | None = None,
) -> go.Figure:
    """Box plots per room of one examination's dose quantity, with its reference levels.

    Standard-size patients and other patients are separate boxes side by side
    (filled circles and open diamonds, in two colours), every examination drawn
    as a point. Each reference level is a horizontal line, solid for a national
    level and dashed for a local one, labelled with its value and set.

    Parameters
    ----------
    events : table
        The ``EVENTS`` table.
    quantity : str
        One of :data:`EVENT_QUANTITIES`.
    exam_type : str
        The examination type to show.
    levels : table, optional
        A ``LEVELS`` table (the ``GROUPS`` table will do); rows of other
        examinations or quantities are ignored.
    log_y : bool
        Use a logarithmic dose axis.
    title : str, optional
        Figure title; defaults to the examination and quantity.

    Returns
    -------
    plotly.graph_objects.Figure
        One box trace per patient group present; levels in ``layout.shapes``.

    Raises
    ------
    TableError
        A table breaks its contract, or ``quantity`` is not a dose column.
    """
    _check_quantity(quantity)
    return _distribution(
        EVENTS.validate(events),
        None if levels is None else LEVELS.validate(levels),
        quantity=quantity,
        exam_type=exam_type,
        log_y=log_y,
        title=title,
    )


def _distribution(
    table: pd.DataFrame,
    levels: pd.DataFrame | None,
    *,
    quantity: str,
    exam_type: str,
    log_y: bool = False,
    title: str | None = None,
) -> go.Figure:
    """:func:`build_distribution` on tables already validated (``EVENTS``, ``LEVELS``)."""
    rows = table[(table["exam_type"] == exam_type) & table[quantity].notna()]
    fig = go.Figure()
    style(
        fig,
        title=title if title is not None else f"{exam_type}: {quantity_short(quantity)}",
        x_title="Room (number of examinations)",
        y_title=quantity_short(quantity),
    )
    if rows.empty:
        return no_data(fig, f"No {quantity_short(quantity, with_unit=False)} values")
    rooms = sorted(rows["room"].unique())
    counts = rows.groupby("room").size()
    for i, (flag, name, symbol) in enumerate(
        (
            (True, "Standard-size patients", "circle"),
            (False, "Other patients", "diamond-open"),
        )
    ):
        part = rows[rows["standard_patient"] == flag]
        if part.empty:
            continue
        colour = series(i)[0]
        fig.add_trace(
            go.Box(
                x=list(part["room"]),
                y=list(part[quantity]),
                name=name,
                boxpoints="all",
                jitter=0.35,
                pointpos=0.0,
                marker={"symbol": symbol, "color": colour, "size": 6, "opacity": 0.75},
                line={"color": colour},
                fillcolor="rgba(0,0,0,0)",
                customdata=list(part["study_uid"]),
                hovertemplate=(
                    "%{x}<br>%{y:.3g} " + quantity_short(quantity) + "<br>%{customdata}"
                    "<extra>" + name + "</extra>"
                ),
            )
        )
    fig.update_layout(boxmode="group")
    fig.update_xaxes(
        categoryorder="array",
        categoryarray=rooms,
        tickvals=rooms,
        ticktext=[f"{r} ({int(counts[r])})" for r in rooms],
    )
    if log_y:
        fig.update_yaxes(type="log")
    if levels is not None:
        _draw_levels(fig, levels, exam_type=exam_type, quantity=quantity)
    return fig


def _draw_levels(fig: go.Figure, table: pd.DataFrame, *, exam_type: str, quantity: str) -> None:
    mine = table[
        (table["exam_type"] == exam_type)
        & (table["quantity"] == quantity)
        & table["reference_level"].notna()
    ].drop_duplicates(["reference_level", "level_kind", "level_set"])
    for _, row in mine.sort_values("reference_level").iterrows():
        local = row["level_kind"] == "local"
        kind = LEVEL_KIND_WORDS.get(row["level_kind"], "Reference level")
        fig.add_hline(
            y=float(row["reference_level"]),
            line={"color": INK, "width": 1.6, "dash": "dash" if local else "solid"},
            annotation={
                "text": f"{kind} {row['reference_level']:.3g} {quantity_unit(quantity)}",
                # local labels at the left end of their line, national at the right,
                # so that two levels close together do not hide each other
                "x": 0.0 if local else 1.0,
                "xanchor": "left" if local else "right",
                "yanchor": "bottom",
                "font": {"size": 11},
                "bgcolor": "rgba(255,255,255,0.85)",
            },
            name=str(row["level_set"] or kind),
        )
