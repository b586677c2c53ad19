"""Shared look of the figures: fonts, ink, grid, series colours and symbols.

Colours are Okabe-Ito (see :mod:`beamaudit.dashboards.wording`); each series
also gets its own marker symbol, so no series is told apart by colour alone.
"""

from __future__ import annotations

import math

import plotly.graph_objects as go

from beamaudit.dashboards.wording import OKABE_ITO

__all__ = [
    "AXIS",
    "FONT",
    "GRID",
    "HEIGHT_PX",
    "INK",
    "PAPER",
    "fmt",
    "legend_below_when_long",
    "no_data",
    "series",
    "series_dash",
    "style",
]

HEIGHT_PX = 420
INK = "#1d2a33"
GRID = "#e3e0d8"
PAPER = "#ffffff"
FONT = "DejaVu Sans, Verdana, sans-serif"
# Series colours, in order (Okabe-Ito, without yellow, which is too light on white).
SERIES = ("blue", "orange", "bluish_green", "reddish_purple", "vermillion", "sky_blue", "black")
SYMBOLS = ("circle", "square", "diamond", "triangle-up", "cross", "star", "hexagon")
DASHES = ("solid", "dash", "dot", "dashdot")


def series(i: int) -> tuple[str, str]:
    """Colour and marker of series ``i``: no two of the first 49 series share both (the marker
    moves on by one each time the colours start again)."""
    n = len(SERIES)
    return OKABE_ITO[SERIES[i % n]], SYMBOLS[(i + i // n) % len(SYMBOLS)]


def series_dash(i: int) -> str:
    """Line style of series ``i``: solid for the first round of colours, then dashed, dotted..."""
    return DASHES[(i // len(SERIES)) % len(DASHES)]


#: The look of every axis: light grid, ink line and outside ticks, room for long labels.
AXIS: dict[str, object] = {
    "showgrid": True,
    "gridcolor": GRID,
    "zeroline": False,
    "linecolor": INK,
    "ticks": "outside",
    "tickcolor": INK,
    "automargin": True,
}


def style(
    fig: go.Figure, *, title: str | None, x_title: str, y_title: str, legend: bool = True
) -> go.Figure:
    axis = dict(AXIS)
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
        font={"family": FONT, "size": 13, "color": INK},
        paper_bgcolor=PAPER,
        plot_bgcolor=PAPER,
        margin={"l": 70, "r": 30, "t": (40 if legend else 0) + (56 if title else 20), "b": 60},
        legend={
            "orientation": "h",
            "yanchor": "bottom",
            "y": 1.02,
            "x": 0.0,
            "traceorder": "normal",
            "font": {"size": 12},
        },
        hoverlabel={"font": {"family": FONT}},
        height=HEIGHT_PX,
    )
    fig.update_xaxes(title={"text": x_title}, **axis)
    fig.update_yaxes(title={"text": y_title}, **axis)
    return fig


#: above this many legend entries a legend goes below the plot (above, it covers the title)
_LEGEND_ABOVE_MAX = 4
_LEGEND_ROW_PX = 22


def legend_below_when_long(fig: go.Figure) -> None:
    """Move a long legend of a :func:`style`-d figure under the x axis, and make the figure
    taller by its rows (about three entries to a row in a half-width card)."""
    entries = sum(1 for trace in fig.data if trace.showlegend is not False)
    if entries <= _LEGEND_ABOVE_MAX:
        return
    fig.update_layout(
        legend={"orientation": "h", "yanchor": "top", "y": -0.22, "x": 0.0},
        margin={"t": 56},
        height=HEIGHT_PX + math.ceil(entries / 3) * _LEGEND_ROW_PX,
    )


def no_data(fig: go.Figure, message: str) -> go.Figure:
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


def fmt(value: float | None, digits: int = 3) -> str:
    if value is None or (isinstance(value, float) and math.isnan(value)):
        return "–"
    return f"{value:.{digits}g}"
