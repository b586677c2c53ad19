"""``beamaudit ct-calibration add | list``: a CT scanner's localizer calibration to water.

IEC 62985:2019's localizer method needs, per scanner, tube voltage and view, the relation of a
localizer's pixel values to water-equivalent path length, which a physicist measures with water
phantoms on the table. ``add`` stores one from a CSV file of two columns, ``pixel_value`` and
``water_mm`` (one header row, values increasing), for the device named by its station name
(audited); from then on the scanner's localizers give CT patient sizes.
"""

from __future__ import annotations

import csv
import json
from datetime import date
from pathlib import Path
from typing import Annotated

import typer

from beamaudit.api.cli._common import console, fail

__all__ = ["register"]

app = typer.Typer(help="CT localizer calibrations to water (per scanner, kV and view).")


def _points(path: Path) -> tuple[list[float], list[float]]:
    try:
        with path.open(encoding="utf-8-sig", newline="") as handle:
            rows = list(csv.DictReader(handle))
    except OSError as exc:
        fail(f"{path}: {exc.strerror or exc}")
    try:
        return (
            [float(r["pixel_value"]) for r in rows],
            [float(r["water_mm"]) for r in rows],
        )
    except (KeyError, TypeError, ValueError):
        fail(f"{path}: needs the columns pixel_value and water_mm, numbers on every line")


@app.command("add")
def add_command(
    ctx: typer.Context,
    station: Annotated[str, typer.Argument(help="The scanner's station name, as stored.")],
    points: Annotated[
        Path, typer.Argument(help="CSV file: pixel_value,water_mm (mm of water), one per line.")
    ],
    kv: Annotated[float, typer.Option("--kv", help="Tube voltage of the localizer, kV.")],
    view: Annotated[str, typer.Option(help="frontal (AP/PA) or lateral.")] = "frontal",
    measured_on: Annotated[
        str, typer.Option(help="Day of the measurement, YYYY-MM-DD (default: today).")
    ] = "",
    source: Annotated[
        str, typer.Option(help="How it was measured (phantoms, who).")
    ] = "water phantoms on the table",
) -> None:
    """Store a scanner's localizer calibration (audited)."""
    from sqlalchemy import select

    from beamaudit.api.cli._store import open_store
    from beamaudit.api.errors import ApiError
    from beamaudit.api.store import models as m
    from beamaudit.api.store.ct_calibrations import add_localizer_calibration

    try:
        day = date.fromisoformat(measured_on) if measured_on else date.today()
    except ValueError:
        fail(f"--measured-on must be YYYY-MM-DD, not {measured_on!r}")
    values, water = _points(points)
    store = open_store(ctx)
    with store.sessions.begin() as session:
        devices = session.scalars(select(m.Device).where(m.Device.station_name == station)).all()
        if len(devices) != 1:
            fail(
                f"no device with station name {station!r} in the store"
                if not devices
                else f"{len(devices)} devices have station name {station!r}"
            )
        try:
            row = add_localizer_calibration(
                session, device_id=devices[0].id, kvp_kv=kv, view=view,  # type: ignore[arg-type]
                pixel_values=values, water_thickness_mm=water, source=source,
                measured_on=day, actor="cli",
            )  # fmt: skip
        except ApiError as exc:
            fail(str(exc))
        console.print(
            f"stored calibration {row.id}: {station}, {kv:g} kV, {view}, {len(values)} points",
            highlight=False,
        )


@app.command("list")
def list_command(
    ctx: typer.Context,
    as_json: Annotated[bool, typer.Option("--json", help="Print JSON.")] = False,
) -> None:
    """List the stored localizer calibrations."""
    from sqlalchemy import select

    from beamaudit.api.cli._store import open_store
    from beamaudit.api.store import models as m

    store = open_store(ctx, migrate=False)
    with store.sessions() as session:
        rows = session.execute(
            select(m.CtLocalizerCalibrationRow, m.Device.station_name)
            .join(m.Device, m.Device.id == m.CtLocalizerCalibrationRow.device_id)
            .order_by(m.CtLocalizerCalibrationRow.id)
        ).all()
        data = [
            {
                "id": r.id, "station_name": station, "kvp_kv": r.kvp_kv, "view": r.view,
                "filter_type": r.filter_type, "points": len(r.pixel_values),
                "measured_on": r.measured_on.isoformat(), "source": r.source,
            }
            for r, station in rows
        ]  # fmt: skip
    if as_json:
        typer.echo(json.dumps(data, indent=2))
        return
    if not data:
        console.print("no localizer calibration stored")
    for d in data:
        console.print(
            f"{d['id']}: {d['station_name']} {d['kvp_kv']:g} kV {d['view']}, {d['points']} "
            f"points, measured {d['measured_on']} ({d['source']})",
            markup=False, highlight=False,
        )  # fmt: skip


def register(root: typer.Typer) -> None:
    """Add ``ct-calibration`` to ``root``."""
    root.add_typer(app, name="ct-calibration")
