"""The skin-dose map as a static PNG: for the patient's record and the follow-up letter.

The same picture as the exam page's map (:func:`beamaudit.dashboards.build_skin_dose_map`), drawn
with Matplotlib's Agg renderer (no browser): an A4 page upright at 150 dots per inch, the back
seen from behind on the left and the front seen from the front on the right, the head at the top;
the dose per skin cell in Gy on the map's own light-to-dark scale (the darkest colour is the
peak), a colour bar in Gy marked at the follow-up levels, isodose lines at the levels the skin
reached (2 Gy dashed orange, 3 Gy vermillion, 5 Gy black), the body outline, the peak ringed and
labelled with its dose, head/feet, the patient's left/right and posterior/anterior written on
every panel, and under the map the uncertainty, how the map was made and the caution.

Only what the caller passes as ``heading`` and ``lines`` is written about the patient: the API
passes the pseudonymised patient id and the exam id, never a name, a birth date or a date of the
procedure.
"""

from __future__ import annotations

import io
import math
import textwrap
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
from numpy.typing import NDArray

from beamaudit.dashboards._skin_figure import (
    _ISODOSE_LOOK,
    _ISODOSE_WORDS,
    SKIN_DOSE_COLOURS,
    _outline,
    _panel_x,
    _parse,
)
from beamaudit.dashboards.wording import CAUTION, OKABE_ITO

__all__ = ["SKIN_DOSE_PNG_DPI", "SKIN_DOSE_PNG_SIZE_PX", "SkinDoseImage", "render_skin_dose_png"]

#: Width and height of the image, pixels: an A4 page upright at :data:`SKIN_DOSE_PNG_DPI`.
SKIN_DOSE_PNG_SIZE_PX = (1240, 1754)
SKIN_DOSE_PNG_DPI = 150
_INK = "#1d2a33"
_OUTLINE_GREY = "#8C8C8C"
_DASHES: dict[str, Any] = {"dash": (0, (5, 3)), "solid": "solid"}
_GAP = 0.09  # between the panels, figure fraction
#: lines of text under the heading that fit above the panels
_MAX_LINES = 13


@dataclass(frozen=True)
class SkinDoseImage:
    """A rendered map: the PNG's bytes, its size and where the peak is drawn.

    ``peak_px`` is the centre of the peak cell in image pixels (x from the left, y from the top),
    None when no dose reached the skin; ``panels_px`` where the two panels are.
    """

    png: bytes
    width_px: int
    height_px: int
    peak_px: tuple[float, float] | None
    #: the back's and the front's panel, (left, top, right, bottom) in image pixels
    panels_px: tuple[tuple[float, float, float, float], ...] = ()


def _edges(centres: NDArray[np.float64]) -> NDArray[np.float64]:
    step = float(centres[1] - centres[0]) if centres.size > 1 else 1.0
    return np.concatenate((centres - step / 2.0, [centres[-1] + step / 2.0]))


def _wrap(text: str, width: int = 118) -> str:
    return "\n".join(textwrap.fill(p, width) for p in text.split("\n"))


def render_skin_dose_png(
    record: Mapping[str, Any],
    *,
    heading: str = "Skin-dose map",
    lines: Sequence[str] = (),
) -> SkinDoseImage:
    """Draw a skin-dose map record as a PNG (module docstring for what it shows).

    Parameters
    ----------
    record : mapping
        ``SkinDoseMap.as_record()`` (or a cumulative map in the same shape): see
        :func:`beamaudit.dashboards.build_skin_dose_map`.
    heading : str
        The first line, e.g. the pseudonymised patient id and the exam.
    lines : sequence of str
        Lines under the heading (the peak, the areas, how a cumulative map was made).

    Returns
    -------
    SkinDoseImage

    Raises
    ------
    TableError
        A record that does not meet the contract.
    """
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.colors import LinearSegmentedColormap, Normalize
    from matplotlib.figure import Figure

    data = _parse(record)
    width_px, height_px = SKIN_DOSE_PNG_SIZE_PX
    fig = Figure(
        figsize=(width_px / SKIN_DOSE_PNG_DPI, height_px / SKIN_DOSE_PNG_DPI), dpi=SKIN_DOSE_PNG_DPI
    )
    canvas = FigureCanvasAgg(fig)
    fig.set_facecolor("#ffffff")
    cmap = LinearSegmentedColormap.from_list(
        "beamaudit_skin", [(float(p), str(c)) for p, c in SKIN_DOSE_COLOURS]
    )
    zmax = max(data["psd_gy"], 1e-3)
    norm = Normalize(vmin=0.0, vmax=zmax)
    n_around = data["around_cm"].size
    half = n_around // 2
    quarter = data["perimeter_cm"] / 4.0
    height_cm = data["height_cm"]
    reached = [level for level in data["levels_gy"] if data["psd_gy"] >= level]
    # panels: [left, bottom, width, height] in figure fractions; equal scale on both axes
    top, bottom = 0.76, 0.20
    panel_h = top - bottom
    panel_w = panel_h * (height_px / width_px) * (2.1 * quarter) / (height_cm * 1.04)
    axes = []
    for k, (side, cells) in enumerate((("back", slice(0, half)), ("front", slice(half, None)))):
        ax = fig.add_axes((0.10 + k * (panel_w + _GAP), bottom, panel_w, panel_h))
        axes.append(ax)
        _draw_side(ax, side, data, cells, cmap=cmap, norm=norm, reached=reached)
    axes[0].set_ylabel("cm below the top of the head", fontsize=8, color=_INK)
    cax = fig.add_axes((0.10 + 2 * panel_w + _GAP + 0.05, bottom + 0.1, 0.022, panel_h - 0.2))
    _draw_colour_bar(fig, cax, data["levels_gy"], cmap=cmap, norm=norm, zmax=zmax)
    peak_px = _mark_peak(fig, axes, data, half, canvas)
    _write_legend_and_words(fig, data, heading, lines, reached=reached, bottom=bottom)
    buffer = io.BytesIO()
    canvas.print_png(buffer)
    png = buffer.getvalue()
    boxes = tuple(
        (float(b.x0), float(height_px - b.y1), float(b.x1), float(height_px - b.y0))
        for b in (ax.get_window_extent() for ax in axes)
    )
    return SkinDoseImage(png, width_px, height_px, peak_px, boxes)


def _draw_side(
    ax: Any,
    side: str,
    data: dict[str, Any],
    cells: slice,
    *,
    cmap: Any,
    norm: Any,
    reached: list[float],
) -> None:
    """One side of the body unrolled (``back`` seen from behind, ``front`` from the front):
    the dose, the isodose lines the skin reached, the outline and the orientation words."""
    quarter = data["perimeter_cm"] / 4.0
    height_cm = data["height_cm"]
    x = _panel_x(data["around_cm"][cells], data["perimeter_cm"], side)
    order = np.argsort(x)
    x = x[order]
    z = data["dose_gy"][:, cells][:, order]
    mesh = ax.pcolormesh(
        _edges(x), _edges(data["along_cm"]), z, cmap=cmap, norm=norm, shading="flat"
    )
    mesh.set_rasterized(True)
    for level in reached:
        colour, dash, width = _ISODOSE_LOOK.get(level, _ISODOSE_LOOK[5.0])
        if np.nanmax(z) < level:
            continue
        lines_ = ax.contour(
            x,
            data["along_cm"],
            z,
            levels=[level],
            colors=[colour],
            linewidths=[width * 0.8],
            linestyles=[_DASHES.get(dash, "solid")],
        )
        ax.clabel(lines_, fmt=lambda v: f"{v:g} Gy", fontsize=7, inline=True)
    ox, oy = _outline(quarter, height_cm)
    ax.plot(ox, oy, color=_OUTLINE_GREY, linewidth=1.0)
    ax.set_xlim(-quarter * 1.05, quarter * 1.05)
    ax.set_ylim(height_cm * 1.02, -height_cm * 0.02)  # head at the top
    ax.set_aspect("equal", adjustable="box")
    ax.tick_params(labelsize=7, colors=_INK)
    ax.set_xlabel("cm from the midline", fontsize=8, color=_INK, labelpad=2)
    title = (
        "BACK (posterior)\nseen from behind"
        if side == "back"
        else "FRONT (anterior)\nseen from the front"
    )
    ax.set_title(title, fontsize=10, color=_INK, pad=16)
    # the patient's sides as the reader sees them (DEVELOPERS.md, skin-dose maps)
    left_word, right_word = ("patient's LEFT", "patient's RIGHT")
    if side == "front":
        left_word, right_word = right_word, left_word
    for xpos, word, align in ((0.0, left_word, "left"), (1.0, right_word, "right")):
        ax.text(xpos, 1.005, word, transform=ax.transAxes, ha=align, va="bottom",
                fontsize=7.5, color=_INK)  # fmt: skip
    ax.text(0.5, 0.995, "HEAD", transform=ax.transAxes, ha="center", va="top",
            fontsize=8, color=_INK, weight="bold")  # fmt: skip
    ax.text(0.5, 0.005, "FEET", transform=ax.transAxes, ha="center", va="bottom",
            fontsize=8, color=_INK, weight="bold")  # fmt: skip


def _draw_colour_bar(
    fig: Any, cax: Any, levels_gy: Sequence[float], *, cmap: Any, norm: Any, zmax: float
) -> None:
    """The colour scale in Gy, with the follow-up levels marked in their isodose colours."""
    from matplotlib.cm import ScalarMappable

    bar = fig.colorbar(ScalarMappable(norm, cmap), cax=cax)
    bar.set_label("Skin dose (Gy)", fontsize=9, color=_INK)
    bar.ax.tick_params(labelsize=7)
    for level in levels_gy:
        if level <= zmax:
            colour, _, _ = _ISODOSE_LOOK.get(level, _ISODOSE_LOOK[5.0])
            bar.ax.axhline(level, color=colour, linewidth=2.0)


def _write_legend_and_words(
    fig: Any,
    data: dict[str, Any],
    heading: str,
    lines: Sequence[str],
    *,
    reached: list[float],
    bottom: float,
) -> None:
    """The isodose legend, the heading and its lines, the note on the model and the caution."""
    from matplotlib.lines import Line2D

    handles = [
        Line2D([], [], color=_ISODOSE_LOOK.get(v, _ISODOSE_LOOK[5.0])[0],
               linestyle=_DASHES.get(_ISODOSE_LOOK.get(v, _ISODOSE_LOOK[5.0])[1], "solid"),
               label=f"{v:g} Gy" + (f" ({_ISODOSE_WORDS.get(v)})" if _ISODOSE_WORDS.get(v) else ""))
        for v in data["levels_gy"]
    ] + [Line2D([], [], color=_OUTLINE_GREY, label="body outline (for orientation)")]  # fmt: skip
    fig.legend(handles=handles, loc="upper left", bbox_to_anchor=(0.04, bottom - 0.04), ncol=2,
               fontsize=7.5, frameon=False, title="Isodose lines", title_fontsize=8,
               alignment="left")  # fmt: skip
    fig.text(0.05, 0.985, heading, fontsize=13, color=_INK, va="top", weight="bold")
    text = _wrap("\n".join(line for line in lines if line), 112)
    if text.count("\n") >= _MAX_LINES:
        text = "\n".join([*text.split("\n")[: _MAX_LINES - 1], "..."])
    fig.text(0.05, 0.962, text, fontsize=8.5, color=_INK, va="top")
    note = ""
    if data["levels_gy"] and not reached:
        note = f"No skin reached {min(data['levels_gy']):g} Gy. "
    if data["uncertainty_pct"] is not None and math.isfinite(data["uncertainty_pct"]):
        note += f"Expanded uncertainty of the peak ±{data['uncertainty_pct']:.0f} % (k = 2). "
    note += (
        "A patient model (an elliptical cylinder) unrolled: not the patient's own surface. "
        "The peak is ringed."
    )
    fig.text(0.05, 0.085, _wrap(note, 120), fontsize=8, color=_INK, va="top")
    fig.text(0.05, 0.05, _wrap(CAUTION, 120), fontsize=8, color=_INK, va="top", style="italic")


def _mark_peak(
    fig: Any, axes: Sequence[Any], data: dict[str, Any], half: int, canvas: Any
) -> tuple[float, float] | None:
    from matplotlib.patches import Circle

    peak = data["peak"]
    if not isinstance(peak, Mapping) or data["psd_gy"] <= 0:
        fig.text(0.5, 0.5, "No dose reached the skin in this model", ha="center", fontsize=12,
                 color=_INK, bbox={"facecolor": "#ffffff", "edgecolor": _INK})  # fmt: skip
        return None
    side = "back" if int(peak.get("around_index", 0)) < half else "front"
    ax = axes[0] if side == "back" else axes[1]
    x = float(_panel_x(np.array([float(peak["around_mm"]) / 10.0]), data["perimeter_cm"], side)[0])
    y = float(peak["along_mm"]) / 10.0
    ring = 3.0 * float(
        data["along_cm"][1] - data["along_cm"][0] if data["along_cm"].size > 1 else 1
    )
    for colour, width in ((_INK, 3.2), (OKABE_ITO["yellow"], 1.6)):
        ax.add_patch(Circle((x, y), ring, fill=False, edgecolor=colour, linewidth=width, zorder=5))
    ax.annotate(
        f"Peak {data['psd_gy']:.2f} Gy",
        xy=(x + ring * 0.7, y - ring * 0.7),
        xytext=(28, -26 if y > 20 else 26),
        textcoords="offset points",
        fontsize=9,
        color=_INK,
        arrowprops={"arrowstyle": "-", "color": _INK, "linewidth": 1.0},
        bbox={"facecolor": "#ffffff", "edgecolor": _INK, "alpha": 0.9, "boxstyle": "round"},
        zorder=6,
    )
    canvas.draw()
    px, py = ax.transData.transform((x, y))
    return float(px), float(fig.bbox.height - py)
