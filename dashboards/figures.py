"""Plotly figures, each a pure function of a plain table.

Every builder has the shape ``build_x(table, *, options) -> go.Figure``: it
validates its table against the contract in :mod:`beamaudit.dashboards.tables`,
reads nothing else and changes nothing. Every axis is titled with its unit;
colour always comes with a symbol, a line style or text, and the colours are
Okabe-Ito (see :mod:`beamaudit.dashboards.wording`).
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from typing import Any

import pandas as pd
import plotly.graph_objects as go

from beamaudit.dashboards.errors import TableError
from beamaudit.dashboards.records import Spectrum, parse_spectrum
from beamaudit.dashboards.tables import EVENTS, GROUPS, LEVELS, ROOM_HISTORY, TableLike
from beamaudit.dashboards.wording import (
    LEVEL_KIND_WORDS,
    OKABE_ITO,
    STATUS_LOOK,
    quantity_short,
    quantity_unit,
)

__all__ = [
    "EVENT_QUANTITIES",
    "LOG_AXIS_SPAN",
    "build_dap_ratio_history",
    "build_distribution",
    "build_overview_heatmap",
    "build_room_history",
    "build_spectrum",
]

#: Dose columns of the events table that a distribution can show.
EVENT_QUANTITIES: tuple[str, ...] = (
    "dap_gy_cm2",
    "recon_dap_gy_cm2",
    "esak_mgy",
    "ctdivol_mgy",
    "dlp_mgy_cm",
    "ref_point_air_kerma_mgy",
)

_HEIGHT_PX = 420
_INK = "#1d2a33"
_GRID = "#e3e0d8"
_PAPER = "#ffffff"
_FONT = "DejaVu Sans, Verdana, sans-serif"
# Series colours, in order (Okabe-Ito, without yellow, which is too light on white).
_SERIES = ("blue", "orange", "bluish_green", "reddish_purple", "vermillion", "sky_blue", "black")
_SYMBOLS = ("circle", "square", "diamond", "triangle-up", "cross", "star", "hexagon")

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
#: Span of medians (max / min) over which a room history gets a log axis by default.
LOG_AXIS_SPAN = 10.0
_RATIO_TICKS = (0.25, 0.5, 0.75, 1.0, 1.5, 2.0, 4.0)


def _series(i: int) -> tuple[str, str]:
    return OKABE_ITO[_SERIES[i % len(_SERIES)]], _SYMBOLS[i % len(_SYMBOLS)]


def _style(
    fig: go.Figure, *, title: str | None, x_title: str, y_title: str, legend: bool = True
) -> go.Figure:
    axis = {
        "showgrid": True,
        "gridcolor": _GRID,
        "zeroline": False,
        "linecolor": _INK,
        "ticks": "outside",
        "tickcolor": _INK,
        "automargin": True,
    }
    fig.update_layout(
        title={
            "text": title or "",
            "x": 0.0,
            "xanchor": "left",
            "xref": "paper",
            "y": 0.98,
            "yref": "container",
            "yanchor": "top",
            "font": {"size": 15},
        },
        font={"family": _FONT, "size": 13, "color": _INK},
        paper_bgcolor=_PAPER,
        plot_bgcolor=_PAPER,
        margin={"l": 70, "r": 30, "t": (40 if legend else 0) + (56 if title else 20), "b": 60},
        legend={
            "orientation": "h",
            "yanchor": "bottom",
            "y": 1.02,
            "x": 0.0,
            "traceorder": "normal",
            "font": {"size": 12},
        },
        hoverlabel={"font": {"family": _FONT}},
        height=_HEIGHT_PX,
    )
    fig.update_xaxes(title={"text": x_title}, **axis)
    fig.update_yaxes(title={"text": y_title}, **axis)
    return fig


def _no_data(fig: go.Figure, message: str) -> go.Figure:
    fig.add_annotation(
        text=message,
        xref="paper",
        yref="paper",
        x=0.5,
        y=0.5,
        showarrow=False,
        font={"size": 15},
    )
    return fig


def _fmt(value: float | None, digits: int = 3) -> str:
    if value is None or (isinstance(value, float) and math.isnan(value)):
        return "–"
    return f"{value:.{digits}g}"


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
        f"{unit}: median {_fmt(first['median'])}, "
        f"n = {first['n']} ({first['n_standard']} standard)",
    ]
    for _, row in rows.iterrows():
        look = STATUS_LOOK[row["status"]]
        if pd.isna(row["reference_level"]):
            lines.append(f"{look.symbol} {look.short}")
            continue
        kind = LEVEL_KIND_WORDS.get(row["level_kind"], "Level")
        lines.append(
            f"{kind} {_fmt(row['reference_level'])}: ratio {_fmt(row['ratio_to_level'])}"
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
    _style(
        fig,
        title=title,
        x_title="Room" if rooms_across else exam_title,
        y_title=exam_title if rooms_across else "Room",
        legend=False,
    )
    if table.empty:
        return _no_data(fig, "No review groups in this period")
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
    common = {
        "x": x_values,
        "y": y_values,
        "text": text,
        "customdata": hover,
        "texttemplate": "%{text}",
        "hovertemplate": "%{customdata}<extra></extra>",
        "xgap": 3,
        "ygap": 3,
        "textfont": {"size": 11 if rooms_across else 13},
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
    fig.update_xaxes(
        categoryorder="array", categoryarray=x_values, showgrid=False, ticks="", tickangle=0
    )
    fig.update_yaxes(categoryorder="array", categoryarray=y_values, showgrid=False, ticks="")
    fig.update_layout(height=max(280, (56 if rooms_across else 64) * len(y_values) + 200))
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
    _style(
        fig,
        title=title if title is not None else f"{exam_type}: {quantity_short(quantity)}",
        x_title="Room (number of examinations)",
        y_title=quantity_short(quantity),
    )
    if rows.empty:
        return _no_data(fig, f"No {quantity_short(quantity, with_unit=False)} values")
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
        colour = _series(i)[0]
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
            line={"color": _INK, "width": 1.6, "dash": "dash" if local else "solid"},
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


# ----------------------------------------------------------------- history


def build_room_history(
    history: TableLike,
    *,
    quantity: str,
    room: str | None = None,
    log_y: bool | None = None,
    title: str | None = None,
) -> go.Figure:
    """Monthly medians of one quantity in one room, one line per examination type.

    Months where the review detected a change are marked with a large open
    star on top of the line's own marker, and named in the hover text.

    Parameters
    ----------
    history : table
        The ``ROOM_HISTORY`` table of one room.
    quantity : str
        The quantity to draw (a field name with its unit suffix).
    room : str, optional
        Room name, for the default title.
    log_y : bool, optional
        Logarithmic axis; by default chosen when the medians span more than
        a factor of :data:`LOG_AXIS_SPAN` (examinations of very different dose
        share the axis).
    title : str, optional
        Figure title.

    Returns
    -------
    plotly.graph_objects.Figure
        One line trace per examination type, then one marker trace named
        ``"Change detected"`` if any change point exists.
    """
    return _room_history(
        ROOM_HISTORY.validate(history), quantity=quantity, room=room, log_y=log_y, title=title
    )


def _room_history(
    table: pd.DataFrame,
    *,
    quantity: str,
    room: str | None = None,
    log_y: bool | None = None,
    title: str | None = None,
) -> go.Figure:
    """:func:`build_room_history` on a ``ROOM_HISTORY`` table already validated."""
    rows = table[table["quantity"] == quantity].sort_values("month")
    default = f"{room + ': ' if room else ''}monthly median {quantity_short(quantity)}"
    fig = go.Figure()
    _style(
        fig,
        title=title if title is not None else default,
        x_title="Month",
        y_title=f"Median {quantity_short(quantity)}",
    )
    if rows.empty:
        return _no_data(fig, "No monthly medians")
    for i, (exam_type, part) in enumerate(rows.groupby("exam_type", sort=True)):
        colour, symbol = _series(i)
        fig.add_trace(
            go.Scatter(
                x=list(part["month"]),
                y=list(part["median"]),
                mode="lines+markers",
                name=str(exam_type),
                line={"color": colour, "width": 2},
                marker={"symbol": symbol, "color": colour, "size": 7},
                customdata=list(part["n"]),
                hovertemplate=(
                    "%{x|%b %Y}: %{y:.3g}, n = %{customdata}<extra>%{fullData.name}</extra>"
                ),
            )
        )
    changes = rows[rows["change_point"] & rows["median"].notna()]
    if not changes.empty:
        fig.add_trace(
            go.Scatter(
                x=list(changes["month"]),
                y=list(changes["median"]),
                mode="markers",
                name="Change detected",
                marker={
                    "symbol": "star-open",
                    "size": 18,
                    "color": _INK,
                    "line": {"width": 2},
                },
                customdata=list(changes["exam_type"]),
                hovertemplate="Change detected in %{x|%b %Y}<br>%{customdata}<extra></extra>",
            )
        )
    fig.update_xaxes(tickformat="%b %Y", dtick="M1" if rows["month"].nunique() <= 12 else "M3")
    medians = rows["median"].dropna()
    positive = medians[medians > 0]
    if log_y is None:
        log_y = len(positive) == len(medians) and positive.max() > LOG_AXIS_SPAN * positive.min()
    if log_y:
        fig.update_yaxes(type="log", tickvals=_log_ticks(positive), tickformat=".3g")
    else:
        fig.update_yaxes(rangemode="tozero")
    fig.update_layout(showlegend=True)
    return fig


def _log_ticks(values: pd.Series) -> list[float]:
    """Ticks at 1, 2 and 5 times the powers of ten that span ``values`` (and one step beyond)."""
    if values.empty:
        return []
    low = math.floor(math.log10(float(values.min())))
    high = math.ceil(math.log10(float(values.max())))
    ticks = [m * 10.0**k for k in range(low, high + 1) for m in (1, 2, 5)]
    lo, hi = float(values.min()) / 2, float(values.max()) * 2
    return [t for t in ticks if lo <= t <= hi]


def _monthly_band(rows: pd.DataFrame) -> pd.DataFrame:
    band = rows.dropna(subset=["tolerance_low", "tolerance_high"])
    spread = band.groupby("month")[["tolerance_low", "tolerance_high"]].nunique()
    clash = spread[(spread > 1).any(axis=1)]
    if not clash.empty:
        months = ", ".join(m.strftime("%Y-%m") for m in clash.index[:3])
        raise TableError(
            f"room history table: the DAP tolerance band differs between rows of the same month "
            f"({months}); it is a property of the room and month"
        )
    return band.groupby("month")[["tolerance_low", "tolerance_high"]].first().reset_index()


def build_dap_ratio_history(
    history: TableLike, *, room: str | None = None, title: str | None = None
) -> go.Figure:
    """The median ratio of reported to reconstructed DAP per month, with its band.

    A ratio of 1 means the modality's DAP and the reconstruction agree. The
    shaded band is the accepted tolerance; months outside it get a large
    cross. If every row of a month carries the same ratio, one line is drawn
    for the room; otherwise one per examination type.

    Parameters
    ----------
    history : table
        The ``ROOM_HISTORY`` table of one room.
    room : str, optional
        Room name, for the default title.
    title : str, optional
        Figure title.

    Returns
    -------
    plotly.graph_objects.Figure
        Traces in order: band lower edge, band upper edge (filled, named
        ``"Tolerance band"``), the ratio line(s), ``"Outside the band"`` markers.

    Raises
    ------
    TableError
        The table breaks its contract, or the band differs within a month.
    """
    return _dap_ratio_history(ROOM_HISTORY.validate(history), room=room, title=title)


def _dap_ratio_history(
    table: pd.DataFrame, *, room: str | None = None, title: str | None = None
) -> go.Figure:
    """:func:`build_dap_ratio_history` on a ``ROOM_HISTORY`` table already validated."""
    rows = table[table["dap_ratio_median"].notna()].sort_values("month")
    default = f"{room + ': ' if room else ''}reported ÷ reconstructed DAP"
    fig = go.Figure()
    _style(
        fig,
        title=title if title is not None else default,
        x_title="Month",
        y_title="Reported ÷ reconstructed DAP (1)",
    )
    if rows.empty:
        return _no_data(fig, "No DAP comparisons")
    band = _monthly_band(table)
    if not band.empty:
        fig.add_trace(
            go.Scatter(
                x=list(band["month"]),
                y=list(band["tolerance_low"]),
                mode="lines",
                line={"color": "#9a9a9a", "width": 1, "dash": "dot"},
                name="Tolerance band (lower edge)",
                showlegend=False,
                hovertemplate="lower edge %{y:.2f}<extra></extra>",
            )
        )
        fig.add_trace(
            go.Scatter(
                x=list(band["month"]),
                y=list(band["tolerance_high"]),
                mode="lines",
                line={"color": "#9a9a9a", "width": 1, "dash": "dot"},
                fill="tonexty",
                fillcolor="rgba(86,180,233,0.18)",
                name="Tolerance band",
                hovertemplate="upper edge %{y:.2f}<extra></extra>",
            )
        )
    one_line = bool((rows.groupby("month")["dap_ratio_median"].nunique() <= 1).all())
    groups = (
        [("All examinations", rows.drop_duplicates("month"))]
        if one_line
        else list(rows.groupby("exam_type", sort=True))
    )
    for i, (name, part) in enumerate(groups):
        colour, symbol = _series(i)
        fig.add_trace(
            go.Scatter(
                x=list(part["month"]),
                y=list(part["dap_ratio_median"]),
                mode="lines+markers",
                name=str(name),
                line={"color": colour, "width": 2},
                marker={"symbol": symbol, "color": colour, "size": 7},
                hovertemplate="%{x|%b %Y}: %{y:.3f}<extra>%{fullData.name}</extra>",
            )
        )
    drawn = pd.concat([part for _, part in groups])
    if not band.empty:
        merged = drawn.merge(band, on="month", suffixes=("_row", ""))
        outside = merged[
            (merged["dap_ratio_median"] < merged["tolerance_low"])
            | (merged["dap_ratio_median"] > merged["tolerance_high"])
        ]
        if not outside.empty:
            fig.add_trace(
                go.Scatter(
                    x=list(outside["month"]),
                    y=list(outside["dap_ratio_median"]),
                    mode="markers",
                    name="Outside the band",
                    marker={
                        "symbol": "x-thin-open",
                        "size": 16,
                        "color": OKABE_ITO["vermillion"],
                        "line": {"width": 3, "color": OKABE_ITO["vermillion"]},
                    },
                    hovertemplate="%{x|%b %Y}: %{y:.3f} is outside the band<extra></extra>",
                )
            )
    fig.add_hline(
        y=1.0,
        line={"color": _INK, "width": 1, "dash": "dot"},
        annotation={
            "text": "reported = reconstructed",
            "xanchor": "right",
            "x": 1.0,
            "yanchor": "top",
            "font": {"size": 11},
        },
    )
    fig.update_xaxes(tickformat="%b %Y")
    return fig


# ---------------------------------------------------------------- spectrum


def build_spectrum(
    spectrum: Mapping[str, Any] | Spectrum,
    *,
    kvp_kv: float | None = None,
    title: str | None = None,
) -> go.Figure:
    """The reconstructed photon spectrum, with its HVL and tube output stated.

    Parameters
    ----------
    spectrum : mapping or Spectrum
        ``energies_kev``, ``fluence_per_mas_1m`` and optionally
        ``fluence_unit``, ``hvl1_mm_al``, ``output_ugy_per_mas_1m`` (see
        :mod:`beamaudit.dashboards.records`).
    kvp_kv : float, optional
        Tube voltage, drawn as a dotted line at the maximum photon energy.
    title : str, optional
        Figure title.

    Returns
    -------
    plotly.graph_objects.Figure
        One filled line trace; HVL and output in an annotation.
    """
    spec = spectrum if isinstance(spectrum, Spectrum) else parse_spectrum(spectrum)
    fig = go.Figure()
    _style(
        fig,
        title=title if title is not None else "Reconstructed spectrum",
        x_title="Photon energy (keV)",
        y_title=f"Photon fluence<br>({spec.fluence_unit})",
    )
    fig.add_trace(
        go.Scatter(
            x=list(spec.energies_kev),
            y=list(spec.fluence_per_mas_1m),
            mode="lines",
            name="Photon fluence",
            line={"color": OKABE_ITO["blue"], "width": 2, "shape": "linear"},
            fill="tozeroy",
            fillcolor="rgba(0,114,178,0.15)",
            hovertemplate="%{x:.1f} keV: %{y:.3g}<extra></extra>",
        )
    )
    notes = []
    if spec.hvl1_mm_al is not None:
        notes.append(f"HVL₁ {spec.hvl1_mm_al:.2f} mm Al")
    if spec.output_ugy_per_mas_1m is not None:
        notes.append(f"Output {spec.output_ugy_per_mas_1m:.3g} µGy/mAs at 1 m")
    if notes:
        fig.add_annotation(
            text="<br>".join(notes),
            xref="paper",
            yref="paper",
            x=0.02,
            y=0.95,
            xanchor="left",
            showarrow=False,
            align="left",
            bgcolor="rgba(255,255,255,0.85)",
            bordercolor=_GRID,
        )
    if kvp_kv is not None:
        fig.add_vline(
            x=float(kvp_kv),
            line={"color": _INK, "dash": "dot", "width": 1},
            annotation={"text": f"{kvp_kv:g} kVp", "yanchor": "top", "y": 1.0},
        )
    fig.update_yaxes(rangemode="tozero", exponentformat="power")
    fig.update_xaxes(rangemode="tozero")
    return fig
