"""``beamaudit mgd``: mean glandular dose of one mammography exposure by the Dance method.

D_G = K g c s (x T for tomosynthesis), with K the incident air kerma at the upper breast
surface from the beam model and the mAs (or given with ``--kerma-mgy``), and g, c, s (and T)
from beamaudit's own Monte Carlo, or from an official table (``--coefficients FILE``, layout in
``beamaudit.model.dance_coefficients``) where it covers the exposure. Impossible input ends in
one line on stderr and exit code 2.
"""

from __future__ import annotations

import json
from pathlib import Path
from typing import TYPE_CHECKING, Annotated

import typer

from beamaudit import CAUTION
from beamaudit.api.cli._common import console, fail

if TYPE_CHECKING:
    from beamaudit.model.glandular_dose import GlandularDose

__all__ = ["register"]


def _table(result: GlandularDose) -> None:
    from rich.table import Table

    t = result.beam.technique
    kind = "tomosynthesis" if result.tomo_factor is not None else "standard projection"
    table = Table(
        title=f"Mean glandular dose, {t.target_filter} at {t.kv:g} kV, {t.thickness_mm:g} mm "
        f"breast ({kind})",
        show_header=True,
        header_style="bold",
    )
    table.add_column("quantity")
    table.add_column("value", justify="right")
    table.add_column("std. uncertainty", justify="right")
    table.add_row(
        "mean glandular dose D_G (mGy)",
        f"{result.mgd_mgy:.3f}",
        f"{result.mgd_uncertainty_mgy:.3f}",
    )
    table.add_row(
        "incident air kerma K (mGy)",
        f"{result.incident_air_kerma_mgy:.3f}",
        f"{result.incident_air_kerma_uncertainty_mgy:.3f}"
        if result.incident_air_kerma_uncertainty_mgy
        else "",
    )
    table.add_row("first HVL with paddle (mm Al)", f"{result.hvl1_mm_al:.3f}", "")
    table.add_row("g (50 % glandular)", f"{result.g:.4f}", "")
    table.add_row(f"c ({100 * result.glandularity:.1f} % glandular)", f"{result.c:.4f}", "")
    table.add_row("s (spectrum)", f"{result.s:.4f}", "")
    if result.tomo_factor is not None:
        table.add_row("T (tomosynthesis)", f"{result.tomo_factor:.4f}", "")
    console.print(table)
    console.print(f"coefficients: {result.coefficients}", highlight=False)
    console.print(
        "calibrated: yes" if result.beam.beam.calibrated else "calibrated: NO (default output)",
        highlight=False,
    )
    for note in result.assumptions:
        console.print(f"- {note}", highlight=False)
    console.print(CAUTION, highlight=False, soft_wrap=True)


def mgd_command(
    kv: Annotated[float, typer.Option("--kv", help="Tube voltage, kV (20-40).")],
    anode: Annotated[str, typer.Option("--anode", help="Target: Mo, Rh, W or Ag.")],
    filters: Annotated[
        list[str],
        typer.Option(
            "--filter",
            help="Added filter THICKNESS_MM:MATERIAL, e.g. 0.05:Rh (repeatable; window and "
            "paddle apart).",
        ),
    ],
    thickness_mm: Annotated[
        float, typer.Option("--thickness-mm", help="Compressed breast thickness, mm.")
    ],
    mas: Annotated[
        float | None, typer.Option("--mas", help="Tube loading, mAs (whole acquisition).")
    ] = None,
    kerma_mgy: Annotated[
        float | None,
        typer.Option("--kerma-mgy", help="Incident air kerma K, mGy, instead of --mas."),
    ] = None,
    glandularity: Annotated[
        float | None,
        typer.Option("--glandularity", help="Glandular mass fraction, e.g. 0.3 for 30 %."),
    ] = None,
    age: Annotated[
        float | None,
        typer.Option("--age", help="Age in years, for a typical glandularity (Dance 2000)."),
    ] = None,
    paddle: Annotated[
        str | None,
        typer.Option("--paddle", help="Compression paddle THICKNESS_MM:MATERIAL (default 3:pmma)."),
    ] = None,
    window: Annotated[
        str | None,
        typer.Option("--window", help="Tube window THICKNESS_MM:MATERIAL (default 1:Be)."),
    ] = None,
    focus_to_support_mm: Annotated[
        float | None,
        typer.Option("--focus-to-support-mm", help="Focus to breast support, mm (default 630)."),
    ] = None,
    tomo_arc: Annotated[
        float | None,
        typer.Option("--tomo-arc", help="Tomosynthesis: the tube's total arc, degrees."),
    ] = None,
    tomo_projections: Annotated[
        int | None,
        typer.Option("--tomo-projections", help="Tomosynthesis: number of projections."),
    ] = None,
    coefficients: Annotated[
        Path | None,
        typer.Option(
            "--coefficients",
            help="Official g/c/s/T table (CSV) to use where it covers.",
            dir_okay=False,
        ),
    ] = None,
    as_json: Annotated[bool, typer.Option("--json", help="Print one JSON object.")] = False,
) -> None:
    """Mean glandular dose of one mammography exposure (Dance method, model estimate)."""
    from beamaudit.model import ModelError, parse_filter
    from beamaudit.model.dance_coefficients import load_official_coefficients
    from beamaudit.model.glandular_dose import TomosynthesisAcquisition, mean_glandular_dose
    from beamaudit.model.mammography import MammographyTechnique

    if glandularity is not None and age is not None:
        fail("give --glandularity or --age, not both")
    if (mas is None) == (kerma_mgy is None):
        fail("give exactly one of --mas and --kerma-mgy")
    if (tomo_arc is None) != (tomo_projections is None):
        fail("tomosynthesis needs both --tomo-arc and --tomo-projections")
    try:
        technique = MammographyTechnique(
            kv=kv,
            anode=anode,
            filters=tuple(parse_filter(text) for text in filters),
            thickness_mm=thickness_mm,
            window=parse_filter(window) if window else None,
            paddle=parse_filter(paddle) if paddle else None,
            focus_to_support_mm=focus_to_support_mm,
        )
        tomo = (
            TomosynthesisAcquisition.uniform(tomo_arc, tomo_projections)
            if tomo_arc is not None and tomo_projections is not None
            else None
        )
        official = load_official_coefficients(coefficients) if coefficients else None
        result = mean_glandular_dose(
            technique,
            exposure_mas=mas,
            incident_air_kerma_mgy=kerma_mgy,
            glandularity=glandularity,
            age_years=age,
            tomosynthesis=tomo,
            official=official,
        )
    except ModelError as exc:
        fail(str(exc))
    if as_json:
        typer.echo(json.dumps(result.as_dict()))
    else:
        _table(result)


def register(app: typer.Typer) -> None:
    """Add the ``mgd`` command to ``app``."""
    app.command("mgd")(mgd_command)
