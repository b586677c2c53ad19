"""``beamaudit beam``: the beam model's figures for one technique (output, HVLs, spectrum).

The summary leads with what a dose audit uses: output per mAs at 1 m, first HVL, mean energy;
``--all`` adds the second HVL, the HVL in copper, the homogeneity coefficient, the effective
energy, the K-lines' share and the tube, and says over which anode angles the model was checked;
``--json`` prints every field. Each ``--filter THICKNESS_MM:MATERIAL`` is one layer of the total
filtration, inherent included; without ``--filter`` the default total filtration (2.5 mm Al) is
used and flagged as assumed. Impossible input ends in one line on stderr and exit code 2.
"""

from __future__ import annotations

import json
from pathlib import Path
from typing import TYPE_CHECKING, Annotated

import typer

from beamaudit import CAUTION
from beamaudit.api.cli._common import console, fail

if TYPE_CHECKING:
    from beamaudit.model import BeamResult

__all__ = ["register"]


#: The summary: what a dose audit uses (label, attribute, format).
_SUMMARY = (
    ("output at 1 m (µGy/mAs)", "output_ugy_per_mas_1m", ".1f"),
    ("first HVL (mm Al)", "hvl1_mm_al", ".2f"),
    ("mean energy (keV)", "mean_energy_kev", ".1f"),
)
#: The rest, with ``--all``.
_MORE = (
    ("second HVL (mm Al)", "hvl2_mm_al", ".2f"),
    ("homogeneity coefficient", "homogeneity", ".3f"),
    ("first HVL (mm Cu)", "hvl1_mm_cu", ".3f"),
    ("effective energy (keV)", "effective_energy_kev", ".1f"),
    ("K-line share of the air kerma", "characteristic_kerma_fraction", ".3f"),
)


def _table(result: BeamResult, *, everything: bool) -> None:
    from rich.table import Table

    from beamaudit.model.beam import ANODE_ANGLE_CHECK, ANODE_ANGLE_CHECKED_DEG
    from beamaudit.model.filtration import describe_filters

    u = result.uncertainty
    table = Table(title=f"Beam at {result.kv:g} kV", show_header=True, header_style="bold")
    table.add_column("quantity")
    table.add_column("value", justify="right")
    table.add_column("std. uncertainty", justify="right")
    for label, key, fmt in (*_SUMMARY, *(_MORE if everything else ())):
        value, spread = getattr(result, key), u.get(key)
        table.add_row(label, format(value, fmt), format(spread, fmt) if spread else "")
    console.print(table)
    console.print(
        f"filtration: {describe_filters(result.filters)}"
        f"{' (assumed)' if result.filtration_assumed else ''}; "
        + ("calibrated: yes" if result.calibrated else "calibrated: NO (default typical output)"),
        highlight=False,
    )
    checked = (
        "the angle the model was checked at"
        if result.anode_angle_deg == ANODE_ANGLE_CHECKED_DEG
        else f"the model was checked at {ANODE_ANGLE_CHECKED_DEG:g}°"
    )
    console.print(
        f"tube: {result.anode} anode, {result.anode_angle_deg:g}° ({checked}), ripple "
        f"{result.ripple_percent:g} %",
        highlight=False,
    )
    if everything:
        console.print(
            f"air path {result.air_path_mm:g} mm, output scale {result.output_scale:.3g}",
            highlight=False,
        )
        console.print(f"anode angle: {ANODE_ANGLE_CHECK}", highlight=False)
    for note in result.assumptions:
        console.print(f"- {note}", highlight=False)
    if not everything:
        console.print(
            "(--all: second HVL, HVL in Cu, homogeneity, effective energy, anode-angle check)",
            highlight=False,
        )
    console.print(CAUTION, highlight=False, soft_wrap=True)


def _plot(result: BeamResult, path: Path) -> None:
    import plotly.graph_objects as go

    fig = go.Figure(
        go.Scatter(
            x=list(result.energies_kev),
            y=list(result.fluence_per_mas_1m),
            mode="lines",
            line={"shape": "hvh"},
            name="photon fluence",
        )
    )
    fig.update_layout(
        title=(
            f"Spectrum at {result.kv:g} kV, HVL {result.hvl1_mm_al:.2f} mm Al"
            f"{'' if result.calibrated else ' (uncalibrated)'}"
        ),
        xaxis_title="photon energy (keV)",
        yaxis_title="photons per mm² per bin at 1 m per mAs",
        template="simple_white",
    )
    try:
        fig.write_html(str(path), include_plotlyjs=True, full_html=True)
    except OSError as exc:
        fail(f"cannot write {path}: {exc.strerror or exc}")


def beam_command(
    kv: Annotated[float, typer.Option("--kv", help="Peak tube voltage, kV.")],
    filters: Annotated[
        list[str] | None,
        typer.Option(
            "--filter",
            help="One layer of the total filtration, THICKNESS_MM:MATERIAL (repeatable).",
        ),
    ] = None,
    anode: Annotated[str, typer.Option("--anode", help="Anode material.")] = "W",
    anode_angle: Annotated[
        float,
        typer.Option(
            "--anode-angle",
            help="Anode angle, degrees: 6-22 accepted; the model was checked at 12 (IEC 61267 RQR "
            "qualities) and elsewhere only for the direction of the heel effect.",
        ),
    ] = 12.0,
    ripple: Annotated[
        float, typer.Option("--ripple", help="Voltage ripple, percent (0 = constant potential).")
    ] = 0.0,
    everything: Annotated[
        bool, typer.Option("--all", help="Every figure, not only what a dose audit uses.")
    ] = False,
    as_json: Annotated[
        bool, typer.Option("--json", help="Print one JSON object (every figure).")
    ] = False,
    plot: Annotated[
        Path | None,
        typer.Option("--plot", help="Write the spectrum as a plotly HTML file.", dir_okay=False),
    ] = None,
) -> None:
    """Output per mAs at 1 m, first HVL and mean energy of one beam (model estimate); --all for
    the rest."""
    from beamaudit.model import BeamSpec, ModelError, compute_beam, parse_filter

    try:
        layers = tuple(parse_filter(text) for text in filters) if filters else None
        result = compute_beam(
            BeamSpec(
                kv=kv,
                filters=layers,
                anode=anode,
                anode_angle_deg=anode_angle,
                ripple_percent=ripple,
            )
        )
    except ModelError as exc:
        fail(str(exc))
    if plot is not None:
        _plot(result, plot)
    if as_json:
        typer.echo(json.dumps(result.as_dict()))
    else:
        _table(result, everything=everything)
        if plot is not None:
            console.print(f"spectrum written to {plot}", highlight=False)


def register(app: typer.Typer) -> None:
    """Add the ``beam`` command to ``app``."""
    app.command("beam")(beam_command)
