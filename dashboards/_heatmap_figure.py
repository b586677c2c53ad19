"""The overview heatmap: each room's median against its reference level, per examination."""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

import pandas as pd
import plotly.graph_objects as go

from beamaudit.dashboards._figstyle import INK, fmt, no_data, style
from beamaudit.dashboards.tables import GROUPS, TableLike
from beamaudit.dashboards.wording import (
    LEVEL_KIND_WORDS,
    STATUS_LOOK,
    exam_name,
    quantity_short,
    short_group_label,
)

__all__ = ["RATIO_SCALE", "RATIO_TICKS", "TOO_FEW_FILL", "build_overview_heatmap", "heatmap_key"]

# Ratio colours, plotted on log2(ratio) so that half and double the level sit equally far from 1:
# blue below the level, pale yellow at it, orange to vermillion above it. Every stop is light
# enough for the page's ink (#1d2a33) to be read on it at 4.5:1 or better (WCAG 2.1, 1.4.3).
RATIO_SCALE: list[list[Any]] = [
    [0.0, "#6CA6D9"],
    [0.25, "#A9CCEA"],
    [0.5, "#FBF1C4"],
    [0.75, "#F3A66E"],
    [1.0, "#E5743A"],
]
#: Fill of a cell with too few patients for a verdict: no colour, a dashed outline, grey words.
TOO_FEW_FILL = "#FFFFFF"
_TOO_FEW_LINE = "#7A7A7A"
_TOO_FEW_TEXT = "#555555"
_RATIO_SPAN_LOG2 = 2.0  # colour saturates at a quarter and at four times the level
#: The ratios named on the colour bar.
RATIO_TICKS = (0.25, 0.5, 0.75, 1.0, 1.5, 2.0, 4.0)
_JUDGED = frozenset({"above_level", "possibly_above", "below_level"})
_FIGURE_WIDTH_PX = 1300  # a full-width card at 1400 px, for choosing the cell text's size


def _label(exam: str, quantity: str, names: Mapping[str, str] | None, group: object = None) -> str:
    who = short_group_label(group)
    return f"{exam_name(exam, names)}{', ' + who if who else ''} · {quantity_short(quantity)}"


_EM = 0.62  # width of a character of the figures' font, in font sizes (DejaVu Sans, digits)


def _text_fit(cell_px: float) -> tuple[int, bool, bool]:
    """Font size, whether a ratio is written short ("▲1.14") and whether "too few" fits."""
    full = (cell_px - 8) / (_EM * 7)  # "▲ 1.20×"
    short = full < 9
    font = (cell_px - 8) / (_EM * 5) if short else full
    size = int(max(8, min(13, font)))
    return size, short, _EM * size * 9 + 8 <= cell_px  # "○ too few"


def _cell_text(row: pd.Series, *, short: bool, words: bool) -> str:
    look = STATUS_LOOK[row["status"]]
    ratio = row["ratio_to_level"]
    if row["status"] not in _JUDGED or pd.isna(ratio):
        return f"{look.symbol} {look.brief}" if words else look.symbol
    return f"{look.symbol}{ratio:.2f}" if short else f"{look.symbol} {ratio:.2f}×"


def _cell_hover(rows: pd.DataFrame, names: Mapping[str, str] | None) -> str:
    first = rows.iloc[0]
    unit = quantity_short(first["quantity"])
    lines = [
        f"<b>{first['room']}</b> · {exam_name(first['exam_type'], names)}",
        f"{unit}: median {fmt(first['median'])}, n = {first['n']} ({first['n_standard']} standard)",
    ]
    for _, row in rows.iterrows():
        look = STATUS_LOOK[row["status"]]
        kind = LEVEL_KIND_WORDS.get(row["level_kind"], "Level")
        ratio = "" if pd.isna(row["ratio_to_level"]) else f": ratio {fmt(row['ratio_to_level'])}"
        lines.append(f"{kind} {fmt(row['reference_level'])}{ratio} {look.symbol} {look.short}")
    return "<br>".join(lines)


@dataclass
class _Cells:
    """The grids of the two heatmap traces (rows are y values, columns x values)."""

    z: list[list[Any]]
    z_few: list[list[Any]]
    text: list[list[Any]]
    text_few: list[list[Any]]
    hover: list[list[Any]]
    outlines: list[tuple[int, int]]


def _add_columns(table: pd.DataFrame, exam_names: Mapping[str, str] | None) -> None:
    """Add each row's examination-axis label (``column``, with ``_group``) to ``table``."""
    # a patient group is named where an examination's quantity has groups of more than one
    # (children of a band beside the adults), not where all its groups share one (mammography's
    # thickness band): the labels stay short enough for the cells
    groups = [short_group_label(g) for g in table["patient_group_label"]]
    table["_group"] = groups
    kinds = table.groupby(["exam_type", "quantity"])["_group"].transform("nunique")
    table["column"] = [
        _label(e, q, exam_names, g if n > 1 else None)
        for e, q, g, n in zip(table["exam_type"], table["quantity"], groups, kinds, strict=True)
    ]


def _cells(
    table: pd.DataFrame,
    x_values: list[Any],
    y_values: list[Any],
    *,
    rooms_across: bool,
    short: bool,
    few_words: bool,
    exam_names: Mapping[str, str] | None,
) -> _Cells:
    """Each cell's colour, text and hover: judged ones in the ratio grid, the rest outlined."""
    shape = (len(y_values), len(x_values))
    z, z_few = _grid(shape, None), _grid(shape, None)
    text, text_few, hover = _grid(shape, ""), _grid(shape, ""), _grid(shape, "")
    outlines = []
    for (room, column), rows in table.groupby(["room", "column"], sort=False):
        x, y = (room, column) if rooms_across else (column, room)
        i, j = y_values.index(y), x_values.index(x)
        ranked = rows.assign(
            _rank=rows["status"].map(lambda v: STATUS_LOOK[v].rank),
            _ratio=rows["ratio_to_level"].fillna(-1.0),
        ).sort_values(["_rank", "_ratio"], ascending=[True, False])
        pick = ranked.iloc[0]
        hover[i][j] = _cell_hover(rows, exam_names)
        if pick["status"] in _JUDGED and not pd.isna(pick["ratio_to_level"]):
            ratio = max(float(ranked["ratio_to_level"].max()), 1e-6)
            z[i][j] = max(-_RATIO_SPAN_LOG2, min(_RATIO_SPAN_LOG2, math.log2(ratio)))
            text[i][j] = _cell_text(pick, short=short, words=True)
        else:
            z_few[i][j] = 0.0
            text_few[i][j] = _cell_text(pick, short=short, words=few_words)
            outlines.append((j, i))
    return _Cells(z, z_few, text, text_few, hover, outlines)


def _add_cell_traces(
    fig: go.Figure,
    cells: _Cells,
    x_values: list[Any],
    y_values: list[Any],
    *,
    font: int,
    colour_bar: bool,
) -> None:
    """Add the ratio trace, the too-few trace and the too-few cells' dashed outlines."""
    common = {
        "x": x_values,
        "y": y_values,
        "customdata": cells.hover,
        "texttemplate": "%{text}",
        "hovertemplate": "%{customdata}<extra></extra>",
        "xgap": 3,
        "ygap": 3,
    }
    ticks = [math.log2(t) for t in RATIO_TICKS]
    fig.add_trace(
        go.Heatmap(
            z=cells.z,
            text=cells.text,
            name="Median ÷ level",
            colorscale=RATIO_SCALE,
            zmin=-_RATIO_SPAN_LOG2,
            zmax=_RATIO_SPAN_LOG2,
            zmid=0.0,
            showscale=colour_bar,
            textfont={"size": font, "color": INK},
            colorbar={
                "title": {"text": "Median ÷ level", "side": "right"},
                "tickvals": ticks,
                "ticktext": [f"{t:g}×" for t in RATIO_TICKS],
                "thickness": 14,
            },
            **common,
        )
    )
    fig.add_trace(
        go.Heatmap(
            z=cells.z_few,
            text=cells.text_few,
            name="Too few patients",
            colorscale=[[0.0, TOO_FEW_FILL], [1.0, TOO_FEW_FILL]],
            showscale=False,
            textfont={"size": font, "color": _TOO_FEW_TEXT},
            **common,
        )
    )
    # one assignment: adding shapes one by one re-validates every earlier shape (quadratic)
    fig.update_layout(
        shapes=[
            {"type": "rect", "xref": "x", "yref": "y", "x0": j - 0.46, "x1": j + 0.46,
             "y0": i - 0.44, "y1": i + 0.44, "layer": "above",
             "line": {"color": _TOO_FEW_LINE, "width": 1, "dash": "dot"}}
            for j, i in cells.outlines
        ]
    )  # fmt: skip


def build_overview_heatmap(
    groups: TableLike,
    *,
    rooms_across: bool | None = None,
    title: str | None = None,
    exam_names: Mapping[str, str] | None = None,
    width_px: int | None = None,
    colour_bar: bool = True,
) -> go.Figure:
    """A grid of rooms by examination and quantity, coloured by median ÷ level.

    Only groups that have a level are drawn (a group without one has no ratio; the group table
    lists it). Each cell shows the symbol of its most urgent status and the ratio of its median
    to that level; the colour is the largest ratio over the levels the group is compared with,
    and the hover text lists each. A cell with too few patients for a verdict has no colour: a
    dashed outline and the words "too few". Every cell keeps its text, however many columns:
    the text gets shorter (no space, no "×"; "too few" as its symbol) when the cells get narrow.

    Parameters
    ----------
    groups : table
        The ``GROUPS`` table of one review period.
    rooms_across : bool, optional
        Rooms on the horizontal axis and examinations down the side; by default so when there
        are more examination-quantity pairs than rooms (long names read better down the side).
    title : str, optional
        Figure title.
    exam_names : mapping, optional
        Examination code -> the catalogue's name; codes without a name are shown as they are.
    width_px : int, optional
        A fixed figure width (the committee report's); the cell text is sized for it.
    colour_bar : bool
        Draw the colour bar (a page that shows the colours' key beside the figure, as the
        committee report does, may leave it out to give the cells its width).

    Returns
    -------
    plotly.graph_objects.Figure
        Trace 0: ratio cells (``z`` is log2 of the ratio); trace 1: cells with too few patients
        (``z`` 0, white, with a dashed outline among ``layout.shapes``). The examination axis
        holds "name · quantity (unit)".
    """
    table = GROUPS.validate(groups)
    table = table[table["status"] != "no_level"].copy()
    fig = go.Figure()
    if table.empty:
        style(fig, title=title, x_title="", y_title="", legend=False)
        return no_data(fig, "No review groups with a reference level in this period")
    _add_columns(table, exam_names)
    rooms = sorted(table["room"].unique())
    columns = sorted(table["column"].unique(), key=str.lower)
    if rooms_across is None:
        rooms_across = len(columns) > len(rooms)
    style(
        fig,
        title=title,
        x_title="" if rooms_across else "Examination · quantity (unit)",
        y_title="" if rooms_across else "Room",
        legend=False,
    )
    # plotly draws the first y category at the bottom: reverse so the first reads at the top
    x_values, y_values = (rooms, columns[::-1]) if rooms_across else (columns, rooms[::-1])
    # the plot area: the figure less the labels down the side, the colour bar and the margins
    labels_px = 7 * max(len(v) for v in y_values) + 20
    plot_px = max((width_px or _FIGURE_WIDTH_PX) - labels_px - (170 if colour_bar else 80), 120)
    cell_px = plot_px / len(x_values)
    font, short, few_words = _text_fit(cell_px)
    cells = _cells(
        table,
        x_values,
        y_values,
        rooms_across=rooms_across,
        short=short,
        few_words=few_words,
        exam_names=exam_names,
    )
    _add_cell_traces(fig, cells, x_values, y_values, font=font, colour_bar=colour_bar)
    _axes(fig, x_values, y_values, rooms_across=rooms_across, cell_px=cell_px)
    return fig


def _axes(
    fig: go.Figure, x_values: list[str], y_values: list[str], *, rooms_across: bool, cell_px: float
) -> None:
    # labels across that would not fit their cell are slanted, so that neighbours never overlap
    slanted = 7 * max(len(v) for v in x_values) > cell_px
    fig.update_xaxes(
        categoryorder="array",
        categoryarray=x_values,
        showgrid=False,
        ticks="",
        tickangle=-35 if slanted else 0,
        side="top" if rooms_across else "bottom",
        linecolor="rgba(0,0,0,0)",
    )
    fig.update_yaxes(
        categoryorder="array",
        categoryarray=y_values,
        showgrid=False,
        ticks="",
        linecolor="rgba(0,0,0,0)",
    )
    row_px = 30 if rooms_across else 44
    across_px = 7 * max(len(v) for v in x_values) * (0.7 if slanted else 0.0) + 24
    fig.update_layout(
        height=max(240, int(row_px * len(y_values) + across_px + 90)),
        margin={"t": int(across_px + 60) if rooms_across else 60, "b": 20 if rooms_across else 40},
    )


def _grid(shape: tuple[int, int], fill: Any) -> list[list[Any]]:
    return [[fill] * shape[1] for _ in range(shape[0])]


def heatmap_key() -> dict[str, Any]:
    """What the heatmap's legend lists: the colour stops and every cell kind, in words."""
    stops = []
    for ratio in (0.25, 0.5, 1.0, 2.0, 4.0):
        position = (math.log2(ratio) + 2.0) / 4.0
        colour = next(c for p, c in RATIO_SCALE if abs(p - position) < 1e-9)
        stops.append((f"{ratio:g}×", colour))
    statuses = ["above_level", "possibly_above", "below_level"]
    return {
        "stops": stops,
        "ticks": RATIO_TICKS,
        "symbols": [(STATUS_LOOK[s].symbol, STATUS_LOOK[s].short) for s in statuses],
        "too_few": STATUS_LOOK["insufficient_sample"],
    }
