"""The reconstructed photon spectrum of one exposure."""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

import plotly.graph_objects as go

from beamaudit.dashboards._figstyle import INK, style
from beamaudit.dashboards.records import Spectrum, parse_spectrum
from beamaudit.dashboards.rounding import format_quantity
from beamaudit.dashboards.wording import OKABE_ITO

__all__ = ["build_spectrum"]

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
