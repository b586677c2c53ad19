"""``beamaudit dose``: every dose figure of one radiographic exposure, with how it was made.

Example::

    beamaudit dose --kv 81 --mas 10 --sid-mm 1800 --field-cm 35x43 --thickness-mm 220

prints the DAP, incident air kerma, backscatter factor, entrance surface air kerma and entrance
surface dose with their standard uncertainties and the assumptions they rest on; ``--json``
prints one JSON object instead (every figure with its why trail).
"""

from __future__ import annotations

import json
import math
import re
from dataclasses import dataclass
from typing import TYPE_CHECKING, Annotated, Any

import typer

from beamaudit.api.cli._common import fail

if TYPE_CHECKING:
    from beamaudit.model.calibration import RoomCalibration
    from beamaudit.model.exposure import ExposureDose

__all__ = ["dose_command", "parse_field_cm", "register"]

_FIELD_RE = re.compile(r"^\s*([0-9]*\.?[0-9]+)\s*[xX×*]\s*([0-9]*\.?[0-9]+)\s*$")
_MM_PER_CM = 10.0


def parse_field_cm(text: str) -> tuple[float, float]:
    """``"35x43"`` -> (35.0, 43.0), cm; raises ValueError with a one-line reason."""
    match = _FIELD_RE.match(text)
    if not match:
        raise ValueError(f"--field-cm {text!r} is not WIDTHxHEIGHT in cm (e.g. 35x43)")
    width, height = float(match.group(1)), float(match.group(2))
    if width <= 0 or height <= 0:
        raise ValueError(f"impossible geometry: the field {text} has zero area")
    return width, height


def _check_geometry(sid_mm: float, thickness_mm: float, fsd_mm: float | None) -> None:
    for name, value in (("--sid-mm", sid_mm), ("--thickness-mm", thickness_mm)):
        if not (math.isfinite(value) and value > 0):
            fail(f"{name} must be a positive number of mm, not {value:g}")
    if thickness_mm >= sid_mm:
        fail(
            f"impossible geometry: the patient thickness {thickness_mm:g} mm is not smaller than "
            f"the SID {sid_mm:g} mm"
        )
    if fsd_mm is not None:
        if not (math.isfinite(fsd_mm) and fsd_mm > 0):
            fail(f"--fsd-mm must be a positive number of mm, not {fsd_mm:g}")
        if fsd_mm + thickness_mm > sid_mm:
            fail(
                f"impossible geometry: focus-to-skin distance {fsd_mm:g} mm plus thickness "
                f"{thickness_mm:g} mm is beyond the SID {sid_mm:g} mm"
            )


@dataclass(frozen=True)
class _RoomBeam:
    """What ``--room`` takes from a stored room: its tube, filtration, table and calibration."""

    name: str
    anode: str
    anode_angle_deg: float
    ripple_percent: float
    filters: tuple[Any, ...] | None
    support: Any
    calibration: RoomCalibration | None

    def model_arguments(self) -> dict[str, Any]:
        """The tube, table and calibration as :func:`compute_exposure_dose` takes them."""
        return {
            "anode": self.anode,
            "anode_angle_deg": self.anode_angle_deg,
            "ripple_percent": self.ripple_percent,
            "calibration": self.calibration,
            "patient_support": self.support,
        }


#: where each geometry value of ``dose`` comes from, for the trail
_PROVENANCE = {
    "sid_mm": "--sid-mm",
    "body_part_thickness_mm": "--thickness-mm",
    "field_width_mm": "--field-cm",
    "field_height_mm": "--field-cm",
    "source_to_entrance_mm": "--fsd-mm",
    "field_plane_mm": "--sid-mm (the field is given at the image receptor)",
}


def _room_beam(room: str) -> _RoomBeam:
    """The stored room's beam configuration and active calibration from QA measurements."""
    import click
    from sqlalchemy import select

    from beamaudit.api.cli._common import err_console
    from beamaudit.api.cli._store import open_store
    from beamaudit.api.intake.reconstruct import (
        anode_symbol,
        calibration_for_room,
        room_patient_support,
    )
    from beamaudit.api.store import models as m
    from beamaudit.model import FilterSpec

    store = open_store(click.get_current_context(silent=True))  # type: ignore[arg-type]
    with store.sessions() as session:
        rows = session.scalars(select(m.Room).where(m.Room.name == room)).all()
        if not rows:
            fail(f"--room {room}: no room of that name in the store (beamaudit's rooms are named "
                 "after the devices' station names)")  # fmt: skip
        if len(rows) > 1:
            fail(f"--room {room}: {len(rows)} rooms of that name at different sites")
        row = rows[0]
        calibration = calibration_for_room(session, row)
        filters = (
            tuple(FilterSpec(f["material"], float(f["thickness_mm"])) for f in row.filtration)
            if row.filtration
            else None
        )
        beam = _RoomBeam(
            name=room,
            anode=anode_symbol(row.anode_material),
            anode_angle_deg=row.anode_angle_deg,
            ripple_percent=row.ripple_percent,
            filters=filters,
            support=room_patient_support(row, row.tube_side or "above"),
            calibration=calibration,
        )
    if calibration is None:
        err_console.print(f"note: room {room} has no calibration from QA measurements yet; "
                          "the estimate is uncalibrated", highlight=False)  # fmt: skip
    return beam


def _value_pm(value: float, uncertainty: float) -> str:
    """``value ± u`` with u to two significant digits and the value to the same decimals."""
    if not (uncertainty > 0 and math.isfinite(uncertainty)):
        return f"{value:.3g}"
    decimals = max(0, 1 - math.floor(math.log10(uncertainty)))
    return f"{value:.{decimals}f} ± {uncertainty:.{decimals}f}"


def _text_report(result: ExposureDose, filtration: str) -> str:
    def fig(label: str, f: Any, unit: str) -> str:
        if f is None:
            return f"  {label:<30} not available"
        return f"  {label:<30} {_value_pm(f.value, f.standard_uncertainty)} {unit}".rstrip()

    state = "calibrated" if result.calibrated else "uncalibrated"
    lines = [
        f"{result.kvp_kv:g} kV, {result.exposure_mas:g} mAs, filtration {filtration}, "
        f"HVL {result.hvl1_mm_al:.2f} mm Al, output {result.output_ugy_per_mas_1m:.1f} µGy/mAs "
        f"at 1 m ({state})",
        "figures (value ± one standard uncertainty):",
        fig("DAP", result.dap, "Gy·cm²"),
        fig("incident air kerma", result.incident_air_kerma, "mGy"),
        fig("backscatter factor", result.backscatter_factor, ""),
        fig("entrance surface air kerma", result.esak, "mGy"),
        fig("entrance surface dose", result.entrance_dose, "mGy"),
        fig("focus-to-skin distance", result.fsd, "mm"),
    ]
    if result.assumptions:
        lines.append("assumptions:")
        lines.extend(f"  - {a}" for a in result.assumptions)
    from beamaudit.model.exposure import ESTIMATE_NOTICE

    lines.append(f"note: {ESTIMATE_NOTICE}")
    return "\n".join(lines)


def dose_command(
    kv: Annotated[float, typer.Option("--kv", help="Tube voltage, kV.")],
    mas: Annotated[float, typer.Option("--mas", help="Tube current-exposure time product, mAs.")],
    sid_mm: Annotated[float, typer.Option("--sid-mm", help="Focus to image receptor, mm.")],
    field_cm: Annotated[
        str,
        typer.Option("--field-cm", help="Field at the image receptor (at the SID), WxH cm."),
    ],
    thickness_mm: Annotated[
        float, typer.Option("--thickness-mm", help="Patient thickness along the beam, mm.")
    ],
    fsd_mm: Annotated[
        float | None,
        typer.Option("--fsd-mm", help="Focus to skin, mm (overrides SID - gap - thickness)."),
    ] = None,
    filters: Annotated[
        list[str] | None,
        typer.Option(
            "--filter",
            help="One layer of total filtration, THICKNESS_MM:MATERIAL (e.g. 2.5:Al); repeat for "
            "more layers; none: the default 2.5 mm Al, assumed.",
        ),
    ] = None,
    room: Annotated[
        str | None,
        typer.Option(
            "--room",
            help="Use this stored room's tube, filtration (unless --filter), table and "
            "calibration.",
        ),
    ] = None,
    as_json: Annotated[bool, typer.Option("--json", help="Print one JSON object.")] = False,
) -> None:
    """Dose figures of one radiograph: DAP, incident and entrance surface air kerma, entrance dose.

    Every figure is an estimate for quality assurance and optimisation.
    """
    from beamaudit.model.errors import ModelError
    from beamaudit.model.exposure import compute_exposure_dose
    from beamaudit.model.filtration import describe_filters, parse_filter
    from beamaudit.model.geometry import GeometryInputs

    try:
        width_cm, height_cm = parse_field_cm(field_cm)
    except ValueError as exc:
        fail(str(exc))
    _check_geometry(sid_mm, thickness_mm, fsd_mm)
    room_beam = _room_beam(room) if room is not None else None
    try:
        layers = None if not filters else tuple(parse_filter(text) for text in filters)
        if layers is None and room_beam is not None:
            layers = room_beam.filters  # the room's total filtration, when it has one
        geometry = GeometryInputs(
            sid_mm=sid_mm,
            body_part_thickness_mm=thickness_mm,
            source_to_entrance_mm=fsd_mm,
            field_width_mm=width_cm * _MM_PER_CM,
            field_height_mm=height_cm * _MM_PER_CM,
            field_plane_mm=sid_mm,
            provenance=_PROVENANCE,
        )
        result = compute_exposure_dose(
            kvp_kv=kv,
            exposure_mas=mas,
            filters=layers,
            geometry=geometry,
            **(room_beam.model_arguments() if room_beam is not None else {}),
        )
    except ModelError as exc:
        fail(str(exc))
    # the filtration the beam model used: given, the room's, a calibration's fitted inherent
    # filtration, or the default (then marked assumed)
    filtration = describe_filters(result.filters) + (
        " (assumed)" if result.filtration_assumed else ""
    )
    if as_json:
        payload = result.as_dict()
        payload["filters"] = [layer.as_dict() for layer in result.filters]
        payload["filtration_assumed"] = result.filtration_assumed
        typer.echo(json.dumps(payload, ensure_ascii=False, allow_nan=False))
    else:
        typer.echo(_text_report(result, filtration))


def register(app: typer.Typer) -> None:
    """Add ``dose`` to the command line."""
    app.command("dose")(dose_command)
