"""Figures of one room over time: monthly medians, reported against reconstructed DAP and AGD."""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass
from functools import partial
from typing import Literal

import pandas as pd
import plotly.graph_objects as go

from beamaudit.dashboards._figstyle import (
    INK,
    legend_below_when_long,
    no_data,
    series,
    series_dash,
    style,
)
from beamaudit.dashboards.errors import TableError
from beamaudit.dashboards.tables import ROOM_HISTORY, TableLike
from beamaudit.dashboards.wording import OKABE_ITO, exam_name, quantity_short

__all__ = [
    "LOG_AXIS_SPAN",
    "build_dap_ratio_history",
    "build_ratio_history",
    "build_room_history",
]

#: Span of medians (max / min) over which a room history gets a log axis by default.
LOG_AXIS_SPAN = 10.0


# ----------------------------------------------------------------- history


def build_room_history(
    history: TableLike,
    *,
    quantity: str,
    room: str | None = None,
    log_y: bool | None = None,
    title: str | None = None,
    exam_names: Mapping[str, str] | None = None,
) -> go.Figure:
    """Monthly medians of one quantity in one room, one line per examination type.

    Months where the review detected a change are marked with a large open
    star on top of the line's own marker, and named in the hover text. No two
    lines share colour and marker (and beyond seven lines, the line style
    changes too).

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
    exam_names : mapping, optional
        Examination code -> the catalogue's name (lines are named by it).

    Returns
    -------
    plotly.graph_objects.Figure
        One line trace per examination type (by name), then one marker trace
        named ``"Change detected"`` if any change point exists.
    """
    return _room_history(
        ROOM_HISTORY.validate(history),
        quantity=quantity,
        room=room,
        log_y=log_y,
        title=title,
        exam_names=exam_names,
    )


def _room_history(
    table: pd.DataFrame,
    *,
    quantity: str,
    room: str | None = None,
    log_y: bool | None = None,
    title: str | None = None,
    exam_names: Mapping[str, str] | None = None,
) -> go.Figure:
    """:func:`build_room_history` on a ``ROOM_HISTORY`` table already validated."""
    rows = table[table["quantity"] == quantity].sort_values("month")
    rows = rows.assign(exam_type=rows["exam_type"].map(lambda e: exam_name(e, exam_names)))
    default = f"{room + ': ' if room else ''}monthly median {quantity_short(quantity)}"
    fig = go.Figure()
    style(
        fig,
        title=title if title is not None else default,
        x_title="Month",
        y_title=f"Median {quantity_short(quantity)}",
    )
    if rows.empty:
        return no_data(fig, "No monthly medians")
    ordered = sorted(rows.groupby("exam_type", sort=False), key=lambda item: str(item[0]).lower())
    for i, (exam_type, part) in enumerate(ordered):
        colour, symbol = series(i)
        fig.add_trace(
            go.Scatter(
                x=list(part["month"]),
                y=list(part["median"]),
                mode="lines+markers",
                name=str(exam_type),
                line={"color": colour, "width": 2, "dash": series_dash(i)},
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
                    "color": INK,
                    "line": {"width": 2},
                },
                customdata=list(changes["exam_type"]),
                hovertemplate="Change detected in %{x|%b %Y}<br>%{customdata}<extra></extra>",
            )
        )
    _month_axis(fig, rows["month"])
    medians = rows["median"].dropna()
    positive = medians[medians > 0]
    if log_y is None:
        log_y = len(positive) == len(medians) and positive.max() > LOG_AXIS_SPAN * positive.min()
    if log_y:
        fig.update_yaxes(type="log", tickvals=_log_ticks(positive), tickformat="~g")
    else:
        fig.update_yaxes(rangemode="tozero")
    fig.update_layout(showlegend=True)
    legend_below_when_long(fig)
    return fig


def _month_axis(fig: go.Figure, months: pd.Series) -> None:
    """One tick per month (per quarter beyond a year), labelled "Nov 2026"."""
    fig.update_xaxes(tickformat="%b %Y", dtick="M1" if months.nunique() <= 12 else "M3")


def _log_ticks(values: pd.Series) -> list[float]:
    """Ticks at 1, 2 and 5 times the powers of ten that span ``values`` (and one step beyond)."""
    if values.empty:
        return []
    low = math.floor(math.log10(float(values.min())))
    high = math.ceil(math.log10(float(values.max())))
    ticks = [m * 10.0**k for k in range(low, high + 1) for m in (1, 2, 5)]
    lo, hi = float(values.min()) / 2, float(values.max()) * 2
    return [t for t in ticks if lo <= t <= hi]


@dataclass(frozen=True)
class _Ratio:
    """One reported ÷ reconstructed series of ``ROOM_HISTORY``: its columns and its words."""

    column: str
    low: str
    high: str
    label: str  # the axis title, "Reported ÷ reconstructed DAP"
    none: str  # the empty figure's text
    band: str  # what the band is, for the legend
    one: bool  # draw the line "reported = reconstructed" at 1


DAP_RATIO = _Ratio(
    "dap_ratio_median", "tolerance_low", "tolerance_high", "Reported ÷ reconstructed DAP",
    "No DAP comparisons", "Tolerance band", one=True,
)  # fmt: skip
MGD_RATIO = _Ratio(
    "mgd_ratio_median", "mgd_band_low", "mgd_band_high", "Unit's AGD ÷ reconstructed D_G",
    "No AGD comparisons", "Room's usual ratio ± tolerance", one=False,
)  # fmt: skip


def _monthly_band(rows: pd.DataFrame, ratio: _Ratio) -> pd.DataFrame:
    edges = [ratio.low, ratio.high]
    band = rows.dropna(subset=edges)
    spread = band.groupby("month")[edges].nunique()
    clash = spread[(spread > 1).any(axis=1)]
    if not clash.empty:
        months = ", ".join(m.strftime("%Y-%m") for m in clash.index[:3])
        raise TableError(
            f"room history table: the {ratio.band.lower()} differs between rows of the same "
            f"month ({months}); it is a property of the room and month"
        )
    return band.groupby("month")[edges].first().reset_index()


def build_ratio_history(
    history: TableLike,
    *,
    ratio: Literal["dap_ratio", "mgd_ratio"] = "dap_ratio",
    room: str | None = None,
    title: str | None = None,
    exam_names: Mapping[str, str] | None = None,
) -> go.Figure:
    """A room's monthly median ratio of a reported dose figure to its reconstruction, with its
    band.

    ``dap_ratio``: reported ÷ reconstructed DAP (``dap_ratio_median``); a ratio
    of 1 means the modality's DAP and the reconstruction agree, and the shaded
    band (``tolerance_low``, ``tolerance_high``) is the accepted tolerance.
    ``mgd_ratio``: a mammography unit's AGD ÷ the reconstructed D_G
    (``mgd_ratio_median``); vendors' dosimetry methods differ, so the ratio is
    not expected to be 1 (no line at 1), and the band (``mgd_band_low``,
    ``mgd_band_high``) is the room's usual ratio ± the tolerance. Months
    outside the band get a large cross. If every row of a month carries the
    same ratio, one line is drawn for the room; otherwise one per examination
    type.

    Parameters
    ----------
    history : table
        The ``ROOM_HISTORY`` table of one room.
    ratio : {"dap_ratio", "mgd_ratio"}
        Which ratio.
    room : str, optional
        Room name, for the default title.
    title : str, optional
        Figure title.

    Returns
    -------
    plotly.graph_objects.Figure
        Traces in order: band lower edge, band upper edge (filled, named
        ``"Tolerance band"`` or ``"Room's usual ratio ± tolerance"``), the
        ratio line(s), ``"Outside the band"`` markers.

    Raises
    ------
    TableError
        The table breaks its contract, or the band differs within a month.
    """
    spec = {"dap_ratio": DAP_RATIO, "mgd_ratio": MGD_RATIO}[ratio]
    return _ratio_history(
        ROOM_HISTORY.validate(history), spec, room=room, title=title, exam_names=exam_names
    )


#: :func:`build_ratio_history` of the DAP ratio (its name before the AGD ratio came).
build_dap_ratio_history = partial(build_ratio_history, ratio="dap_ratio")


def _ratio_history(
    table: pd.DataFrame,
    ratio: _Ratio,
    *,
    room: str | None = None,
    title: str | None = None,
    exam_names: Mapping[str, str] | None = None,
) -> go.Figure:
    """A ratio series of a validated ``ROOM_HISTORY`` table, with its band and crosses."""
    rows = table[table[ratio.column].notna()].sort_values("month")
    default = f"{room + ': ' if room else ''}{ratio.label[0].lower()}{ratio.label[1:]}"
    fig = go.Figure()
    style(fig, title=title if title is not None else default, x_title="Month", y_title=ratio.label)
    if rows.empty:
        return no_data(fig, ratio.none)
    band = _monthly_band(table, ratio)
    if not band.empty:
        _add_tolerance_band(fig, band, ratio)
    groups = _ratio_series(rows, ratio.column)
    for i, (name, part) in enumerate(groups):
        colour, symbol = series(i)
        name = exam_name(str(name), exam_names)
        fig.add_trace(
            go.Scatter(
                x=list(part["month"]),
                y=list(part[ratio.column]),
                mode="lines+markers",
                name=str(name),
                line={"color": colour, "width": 2},
                marker={"symbol": symbol, "color": colour, "size": 7},
                hovertemplate="%{x|%b %Y}: %{y:.3f}<extra>%{fullData.name}</extra>",
            )
        )
    if not band.empty:
        _mark_outside_band(fig, pd.concat([part for _, part in groups]), band, ratio)
    if ratio.one:
        fig.add_hline(
            y=1.0,
            line={"color": INK, "width": 1, "dash": "dot"},
            annotation={
                "text": "reported = reconstructed",
                "xanchor": "right",
                "x": 1.0,
                "yanchor": "top",
                "font": {"size": 11},
            },
        )
    _month_axis(fig, table["month"])
    return fig


def _add_tolerance_band(fig: go.Figure, band: pd.DataFrame, ratio: _Ratio) -> None:
    """Draw the monthly band of a ratio: its lower edge, then its upper edge filled down to the
    lower one."""
    fig.add_trace(
        go.Scatter(
            x=list(band["month"]),
            y=list(band[ratio.low]),
            mode="lines",
            line={"color": "#9a9a9a", "width": 1, "dash": "dot"},
            name=f"{ratio.band} (lower edge)",
            showlegend=False,
            hovertemplate="lower edge %{y:.2f}<extra></extra>",
        )
    )
    fig.add_trace(
        go.Scatter(
            x=list(band["month"]),
            y=list(band[ratio.high]),
            mode="lines",
            line={"color": "#9a9a9a", "width": 1, "dash": "dot"},
            fill="tonexty",
            fillcolor="rgba(86,180,233,0.18)",
            name=ratio.band,
            hovertemplate="upper edge %{y:.2f}<extra></extra>",
        )
    )


def _ratio_series(rows: pd.DataFrame, column: str) -> list[tuple[object, pd.DataFrame]]:
    """The lines to draw: one for all examinations when every month has one median, else one per
    examination type."""
    one_line = bool((rows.groupby("month")[column].nunique() <= 1).all())
    if one_line:
        return [("All examinations", rows.drop_duplicates("month"))]
    return list(rows.groupby("exam_type", sort=True))


def _mark_outside_band(
    fig: go.Figure, drawn: pd.DataFrame, band: pd.DataFrame, ratio: _Ratio
) -> None:
    """Cross the drawn monthly medians that fall outside that month's band."""
    merged = drawn.merge(band, on="month", suffixes=("_row", ""))
    outside = merged[
        (merged[ratio.column] < merged[ratio.low]) | (merged[ratio.column] > merged[ratio.high])
    ]
    if outside.empty:
        return
    fig.add_trace(
        go.Scatter(
            x=list(outside["month"]),
            y=list(outside[ratio.column]),
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
