"""The reconstructed photon spectrum of one exposure."""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np
import plotly.graph_objects as go

from beamaudit.dashboards._figstyle import INK, style
from beamaudit.dashboards.records import Spectrum, parse_spectrum
from beamaudit.dashboards.rounding import format_quantity
from beamaudit.dashboards.wording import OKABE_ITO

__all__ = ["build_spectra", "build_spectrum"]

#: Colours of the beams of one study's chart, in order (Okabe-Ito, told apart without red-green).
_BEAM_COLOURS = ("blue", "vermillion", "bluish_green", "orange", "reddish_purple", "sky_blue")

# ---------------------------------------------------------------- spectrum


def build_spectrum(
    spectrum: Mapping[str, Any] | Spectrum,
    *,
    kvp_kv: float | None = None,
    title: str | None = None,
) -> go.Figure:
    """The reconstructed photon spectrum, with its HVL and tube output in the subtitle.

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
        One filled line trace; HVL and output in the title's subtitle; the x axis ends a
        little past the tube voltage.
    """
    spec = spectrum if isinstance(spectrum, Spectrum) else parse_spectrum(spectrum)
    fig = go.Figure()
    style(
        fig,
        title=title if title is not None else "Reconstructed spectrum",
        x_title="Photon energy (keV)",
        y_title=f"Photon fluence<br>({spec.fluence_unit})",
    )
    fig.add_trace(
        go.Scatter(
            x=np.asarray(spec.energies_kev, dtype=float),
            y=np.asarray(spec.fluence_per_mas_1m, dtype=float),
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
        notes.append(f"HVL₁ {format_quantity(spec.hvl1_mm_al, 'mm Al')}")
    if spec.output_ugy_per_mas_1m is not None:
        notes.append(f"output {format_quantity(spec.output_ugy_per_mas_1m, 'µGy/mAs at 1 m')}")
    if notes:
        # beside the title, never over the curve (the K lines stand where a box would go)
        fig.update_layout(
            title={"subtitle": {"text": " · ".join(notes), "font": {"size": 12}}}, margin={"t": 84}
        )
    if kvp_kv is not None:
        fig.add_vline(
            x=float(kvp_kv),
            line={"color": INK, "dash": "dot", "width": 1},
            annotation={
                "text": f"{kvp_kv:g} kV",
                "yanchor": "bottom",
                "y": 1.0,
                "xanchor": "right",
            },
        )
        fig.update_xaxes(range=[0, float(kvp_kv) * 1.08])
    fig.update_yaxes(rangemode="tozero", exponentformat="power")
    return fig


def build_spectra(
    beams: Sequence[tuple[str, Spectrum]],
    *,
    kvp_kv: float | None = None,
    title: str = "Reconstructed spectra",
) -> go.Figure:
    """The spectra of several beams of one study on one chart (a line each, no fill).

    A fluoroscopy study has tens of exposures but few distinct beams; one chart of the beams
    reads better, and draws far faster, than a chart per exposure.

    Parameters
    ----------
    beams : sequence of (label, Spectrum)
        At most six, each labelled for the legend (kV, HVL and which exposures).
    kvp_kv : float, optional
        The highest tube voltage among them: the x axis ends a little past it.
    title : str

    Returns
    -------
    plotly.graph_objects.Figure
    """
    fig = go.Figure()
    unit = beams[0][1].fluence_unit if beams else ""
    style(fig, title=title, x_title="Photon energy (keV)", y_title=f"Photon fluence<br>({unit})")
    for (label, spec), colour in zip(beams, _BEAM_COLOURS, strict=False):
        energies = np.asarray(spec.energies_kev, dtype=float)
        fig.add_trace(
            go.Scatter(
                x=energies,
                y=np.asarray(spec.fluence_per_mas_1m, dtype=float),
                mode="lines",
                name=label,
                line={"color": OKABE_ITO[colour], "width": 2},
                hovertemplate="%{x:.1f} keV: %{y:.3g}<extra>" + label + "</extra>",
            )
        )
    fig.update_yaxes(rangemode="tozero", exponentformat="power")
    if kvp_kv:
        fig.update_xaxes(range=[0, float(kvp_kv) * 1.08])
    fig.update_layout(legend={"orientation": "h", "yanchor": "top", "y": -0.22, "x": 0})
    return fig
