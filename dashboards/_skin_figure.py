"""The skin-dose map of one procedure: the patient's back and front, unrolled.

Drawn from the plain record a skin-dose map gives (``SkinDoseMap.as_record()`` in
:mod:`beamaudit.model.skin_dose`): two panels side by side, the back as seen from behind (the
patient's left on the reader's left) and the front as seen from the front (the patient's left
on the reader's right), the head at the top; the dose in Gy as a shaded field; isodose lines at
the follow-up levels the skin reached; an outline of a body of the patient's height for
orientation; the peak marked with its dose; the caution and the uncertainty under the map.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np
import plotly.graph_objects as go
from numpy.typing import NDArray
from plotly.subplots import make_subplots

from beamaudit.dashboards._figstyle import AXIS, FONT, INK, PAPER, no_data
from beamaudit.dashboards.errors import TableError
from beamaudit.dashboards.wording import CAUTION, OKABE_ITO

__all__ = ["SKIN_DOSE_COLOURS", "build_skin_dose_map"]

#: Light to dark, so dose reads without colour: white, pale sky, blue, deep ink-violet.
SKIN_DOSE_COLOURS: list[list[float | str]] = [
    [0.0, "#ffffff"],
    [0.15, "#d8ecf7"],
    [0.45, OKABE_ITO["sky_blue"]],
    [0.75, OKABE_ITO["blue"]],
    [1.0, "#2a1a4a"],
]
#: Isodose lines: colour, dash and width per follow-up level (Gy); any other level gets the last.
_ISODOSE_LOOK: dict[float, tuple[str, str, float]] = {
    2.0: (OKABE_ITO["orange"], "dash", 2.0),
    3.0: (OKABE_ITO["vermillion"], "solid", 2.5),
    5.0: ("#000000", "solid", 3.0),
}
_ISODOSE_WORDS = {2.0: "transient erythema threshold", 3.0: "NCRP 168 level", 5.0: ""}
_HEIGHT_PX = 760

# Outline of a body, ours: (half-width as a fraction of the unrolled trunk's half-width,
# depth as a fraction of the body height below the vertex), down one side and up the other.
_OUTLINE_OUTER: tuple[tuple[float, float], ...] = (
    (0.0, 0.0),
    (0.22, 0.01),
    (0.30, 0.05),
    (0.26, 0.11),
    (0.18, 0.13),
    (0.18, 0.165),
    (0.85, 0.19),
    (1.0, 0.23),
    (0.96, 0.36),
    (1.0, 0.47),
    (0.92, 0.53),
    (0.62, 0.715),
    (0.55, 0.80),
    (0.45, 0.96),
    (0.52, 1.0),
    (0.10, 1.0),
    (0.12, 0.80),
    (0.10, 0.715),
    (0.05, 0.53),
    (0.0, 0.52),
)


def _fail(path: str, message: str) -> TableError:
    return TableError(f"skin-dose map: {path}: {message}")


def _array(raw: Any, path: str, ndim: int) -> NDArray[np.float64]:
    try:
        array = np.asarray(raw, dtype=np.float64)
    except (TypeError, ValueError):
        raise _fail(path, "is not an array of numbers") from None
    if array.ndim != ndim or array.size == 0:
        raise _fail(path, f"must be a non-empty {ndim}-dimensional array")
    if not np.all(np.isfinite(array)):
        raise _fail(path, "holds a value that is not a finite number")
    return array


def _parse(record: Mapping[str, Any]) -> dict[str, Any]:
    if not isinstance(record, Mapping):
        raise _fail("record", "must be a mapping (SkinDoseMap.as_record())")
    grid = record.get("map")
    if not isinstance(grid, Mapping):
        raise _fail("map", "missing")
    around = _array(grid.get("around_mm"), "map.around_mm", 1)
    along = _array(grid.get("along_mm"), "map.along_mm", 1)
    dose = _array(grid.get("dose_mgy"), "map.dose_mgy", 2)
    if dose.shape != (along.size, around.size):
        raise _fail(
            "map.dose_mgy",
            f"shape {dose.shape} is not (along, around) ({along.size}, {around.size})",
        )
    if around.size % 2 or np.any(dose < 0):
        raise _fail("map", "needs an even number of cells around and no negative dose")
    try:
        perimeter = float(grid["perimeter_mm"])
        psd = float(record["peak_skin_dose_mgy"])
        levels = [float(v) for v in record.get("isodose_levels_mgy") or ()]
        uncertainty = record.get("uncertainty_pct")
        uncertainty = None if uncertainty is None else float(uncertainty)
    except (KeyError, TypeError, ValueError) as exc:
        raise _fail("record", f"missing or not a number: {exc}") from None
    landmarks = {str(k): float(v) for k, v in (grid.get("landmarks_mm") or {}).items()}
    patient = record.get("patient") or {}
    return {
        "around_cm": around / 10.0,
        "along_cm": along / 10.0,
        "dose_gy": dose / 1000.0,
        "perimeter_cm": perimeter / 10.0,
        "psd_gy": psd / 1000.0,
        "levels_gy": [v / 1000.0 for v in levels],
        "uncertainty_pct": uncertainty,
        "peak": record.get("peak"),
        "landmarks_cm": {k: v / 10.0 for k, v in landmarks.items()},
        "height_cm": float(patient.get("height_mm") or along[-1] + along[0]) / 10.0,
    }


def _outline(half_width_cm: float, height_cm: float) -> tuple[list[float], list[float]]:
    right = [(w * half_width_cm, d * height_cm) for w, d in _OUTLINE_OUTER]
    left = [(-x, y) for x, y in reversed(right)]
    points = right + left
    return [p[0] for p in points], [p[1] for p in points]


def _panel_x(around_cm: NDArray[np.float64], perimeter_cm: float, side: str) -> NDArray[np.float64]:
    """Horizontal position in a panel, cm: back seen from behind, front seen from the front."""
    if side == "back":
        return -around_cm  # + toward the patient's right, on the reader's right
    return perimeter_cm / 2.0 - around_cm  # + toward the patient's left, on the reader's right


def build_skin_dose_map(record: Mapping[str, Any], *, title: str | None = None) -> go.Figure:
    """The skin-dose map of one procedure (module docstring for how it is drawn).

    Parameters
    ----------
    record : mapping
        ``SkinDoseMap.as_record()``: ``peak_skin_dose_mgy``, ``isodose_levels_mgy``, ``peak``,
        ``uncertainty_pct``, ``patient`` and ``map`` (``around_mm``, ``along_mm``,
        ``dose_mgy`` as rows along the body, ``perimeter_mm``, ``landmarks_mm``).
    title : str, optional

    Returns
    -------
    plotly.graph_objects.Figure
        Two heatmaps (back, front), an isodose contour per level reached, the outline in each
        panel, a peak marker, and the caution under the plot.

    Raises
    ------
    TableError
        A record that does not meet that contract.
    """
    data = _parse(record)
    n_around = data["around_cm"].size
    half = n_around // 2
    fig = make_subplots(
        rows=1,
        cols=2,
        shared_yaxes=True,
        horizontal_spacing=0.08,
        subplot_titles=("Back, seen from behind", "Front, seen from the front"),
    )
    zmax = max(data["psd_gy"], 1e-3)
    quarter = data["perimeter_cm"] / 4.0
    reached = [level for level in data["levels_gy"] if data["psd_gy"] >= level]
    for col, side, cells in ((1, "back", slice(0, half)), (2, "front", slice(half, n_around))):
        x = _panel_x(data["around_cm"][cells], data["perimeter_cm"], side)
        order = np.argsort(x)
        x = x[order]
        z = data["dose_gy"][:, cells][:, order]
        _add_skin_heatmap(fig, x, data["along_cm"], z, col=col, side=side, zmax=zmax)
        for level in reached:
            _add_isodose_line(fig, x, data["along_cm"], z, col=col, level=level)
        _add_outline(fig, quarter, data["height_cm"], col=col)
    _mark_peak(fig, data, half)
    _style(fig, data, title, quarter, reached)
    return fig


def _add_skin_heatmap(
    fig: go.Figure,
    x: NDArray[np.float64],
    y: NDArray[np.float64],
    z: NDArray[np.float64],
    *,
    col: int,
    side: str,
    zmax: float,
) -> None:
    """One panel's skin dose (Gy) as a heatmap; the colour bar once, beside the first panel."""
    fig.add_trace(
        go.Heatmap(
            x=x,
            y=y,
            z=z,
            zmin=0.0,
            zmax=zmax,
            colorscale=SKIN_DOSE_COLOURS,
            showscale=col == 1,
            name=f"{side} skin dose",
            colorbar={"title": {"text": "Skin dose (Gy)"}, "thickness": 14, "len": 0.75},
            hovertemplate=(
                f"{side}: %{{x:.0f}} cm across, %{{y:.0f}} cm below the top of "
                "the head<br>%{z:.2f} Gy<extra></extra>"
            ),
        ),
        row=1,
        col=col,
    )


def _add_isodose_line(
    fig: go.Figure,
    x: NDArray[np.float64],
    y: NDArray[np.float64],
    z: NDArray[np.float64],
    *,
    col: int,
    level: float,
) -> None:
    """The isodose contour of ``level`` Gy in one panel, in its own look and words; one legend
    entry for both panels."""
    colour, dash, width = _ISODOSE_LOOK.get(level, _ISODOSE_LOOK[5.0])
    words = _ISODOSE_WORDS.get(level, "")
    fig.add_trace(
        go.Contour(
            x=x,
            y=y,
            z=z,
            contours={
                "coloring": "none",
                "start": level,
                "end": level,
                "size": 1.0,
                "showlabels": True,
                "labelfont": {"color": colour, "size": 11},
            },
            line={"color": colour, "dash": dash, "width": width},
            showscale=False,
            hoverinfo="skip",
            name=f"{level:g} Gy" + (f" ({words})" if words else ""),
            legendgroup=f"{level:g}",
            showlegend=col == 1,
        ),
        row=1,
        col=col,
    )


def _add_outline(fig: go.Figure, quarter: float, height_cm: float, *, col: int) -> None:
    """The body outline in one panel, for orientation; one legend entry for both panels."""
    ox, oy = _outline(quarter, height_cm)
    fig.add_trace(
        go.Scatter(
            x=ox,
            y=oy,
            mode="lines",
            line={"color": "#8C8C8C", "width": 1.2},
            name="body outline (for orientation)",
            hoverinfo="skip",
            legendgroup="outline",
            showlegend=col == 1,
        ),
        row=1,
        col=col,
    )


def _mark_peak(fig: go.Figure, data: dict[str, Any], half: int) -> None:
    peak = data["peak"]
    if not isinstance(peak, Mapping) or data["psd_gy"] <= 0:
        no_data(fig, "No dose reached the skin in this model")
        return
    side = "back" if int(peak.get("around_index", 0)) < half else "front"
    x = float(_panel_x(np.array([float(peak["around_mm"]) / 10.0]), data["perimeter_cm"], side)[0])
    y = float(peak["along_mm"]) / 10.0
    col = 1 if side == "back" else 2
    fig.add_trace(
        go.Scatter(
            x=[x],
            y=[y],
            mode="markers",
            marker={
                "symbol": "star",
                "size": 16,
                "color": OKABE_ITO["yellow"],
                "line": {"color": INK, "width": 1.5},
            },
            name=f"peak skin dose {data['psd_gy']:.2f} Gy ({side})",
            hovertemplate=f"peak skin dose {data['psd_gy']:.2f} Gy<extra></extra>",
        ),
        row=1,
        col=col,
    )
    fig.add_annotation(
        x=x,
        y=y,
        xref=f"x{'' if col == 1 else '2'}",
        yref=f"y{'' if col == 1 else '2'}",
        text=f"Peak {data['psd_gy']:.2f} Gy",
        showarrow=True,
        arrowhead=0,
        ax=60,
        ay=-40,
        bgcolor="rgba(255,255,255,0.9)",
        bordercolor=INK,
        font={"size": 13, "color": INK},
    )


def _style(
    fig: go.Figure,
    data: dict[str, Any],
    title: str | None,
    quarter: float,
    reached: Sequence[float],
) -> None:
    levels = ", ".join(f"{v:g}" for v in data["levels_gy"]) or "none"
    note = (
        f"No skin reached {min(data['levels_gy']):g} Gy. "
        if data["levels_gy"] and not reached
        else ""
    )
    if data["uncertainty_pct"] is not None and math.isfinite(data["uncertainty_pct"]):
        note += f"Expanded uncertainty of the peak ±{data['uncertainty_pct']:.0f} % (k = 2). "
    caution = (
        f"{note}Isodose lines at {levels} Gy. A patient model (an elliptical cylinder) unrolled: "
        f"not the patient's own surface.<br>{CAUTION}"
    )
    fig.add_annotation(
        text=caution,
        xref="paper",
        yref="paper",
        x=0.0,
        y=-0.12,
        xanchor="left",
        yanchor="top",
        showarrow=False,
        align="left",
        font={"size": 11, "color": INK},
    )
    fig.update_layout(
        title={"text": title or "Skin-dose map", "x": 0.0, "xanchor": "left", "font": {"size": 15}},
        font={"family": FONT, "size": 13, "color": INK},
        paper_bgcolor=PAPER,
        plot_bgcolor=PAPER,
        height=_HEIGHT_PX,
        margin={"l": 70, "r": 30, "t": 90, "b": 150},
        legend={"orientation": "h", "yanchor": "bottom", "y": 1.04, "x": 0.0, "font": {"size": 12}},
    )
    axis = dict(AXIS)
    for col in (1, 2):
        side_words = "patient's right →" if col == 1 else "patient's left →"
        fig.update_xaxes(
            title={"text": f"cm from the midline ({side_words})"},
            range=[-quarter * 1.05, quarter * 1.05],
            scaleanchor=f"y{'' if col == 1 else '2'}",
            scaleratio=1.0,
            row=1,
            col=col,
            **axis,
        )
    fig.update_yaxes(
        autorange="reversed", row=1, col=1, **axis, title={"text": "cm below the top of the head"}
    )
    fig.update_yaxes(autorange="reversed", row=1, col=2, **axis)
