"""``beamaudit explain``: one stored exposure's figures, reported beside reconstructed, and why."""

from __future__ import annotations

import json
from typing import Annotated, Any

import typer

from beamaudit import CAUTION
from beamaudit.api.cli._common import console, fail

__all__ = ["event_explanation", "register"]


def event_explanation(event: Any, trail: dict[str, Any] | None = None) -> dict[str, Any]:
    """A JSON-ready explanation of one stored event (an ``ExposureEventRow``).

    ``trail`` is the why trail of its figures
    (:func:`beamaudit.api.intake.reconstruct.trail_for_event`); the stored one when not given.
    """
    reported = {
        name: getattr(event, name)
        for name in (
            "dap_gy_cm2",
            "entrance_dose_mgy",
            "reference_point_air_kerma_mgy",
            "ctdivol_mgy",
            "dlp_mgy_cm",
            "hvl_mm_al",
            "exposure_index",
            "deviation_index",
        )
    }
    reconstructed = {
        name.removeprefix("recon_"): getattr(event, name)
        for name in (
            "recon_dap_gy_cm2",
            "recon_dap_u_gy_cm2",
            "recon_incident_air_kerma_mgy",
            "recon_esak_mgy",
            "recon_esak_u_mgy",
            "recon_entrance_dose_mgy",
            "recon_backscatter_factor",
            "recon_hvl1_mm_al",
            "recon_output_ugy_per_mas_1m",
            "recon_fsd_mm",
            "recon_calibrated",
        )
    }
    return {
        "event_id": event.id,
        "event_key": event.event_key,
        "source_kind": event.source_kind,
        "modality": event.modality,
        "event_datetime": event.event_datetime.isoformat() if event.event_datetime else None,
        "station_name": event.station_name,
        "protocol_name": event.protocol_name,
        "exam_type": event.exam_type,
        "superseded_by_dose_report": event.superseded,
        "technique": {
            "kvp_kv": event.kvp_kv,
            "exposure_mas": event.exposure_mas,
            "tube_current_ma": event.tube_current_ma,
            "exposure_time_ms": event.exposure_time_ms,
            "filters": event.filters or [],
            "sid_mm": event.sid_mm,
            "body_part_thickness_mm": event.body_part_thickness_mm,
        },
        "reported": reported,
        "reconstructed": reconstructed,
        "recon_status": event.recon_status,
        "dap_ratio_reported_to_recon": event.dap_ratio_reported_to_recon,
        "mammography": _mammography(event),
        "provenance": event.provenance or {},
        "notes": event.notes or [],
        "why": trail if trail is not None else event.recon_trail,
        "caution": CAUTION,
    }


def _mammography(event: Any) -> dict[str, Any] | None:
    """A mammography event's breast, compression and D_G beside the device's AGD (as the API's
    ``mammography`` block), else None."""
    from beamaudit.api.intake.mammography import is_mammography
    from beamaudit.api.web.routes.events import event_mammography

    return event_mammography(event).model_dump() if is_mammography(event) else None


def explain_command(
    ctx: typer.Context,
    event_id: Annotated[int, typer.Argument(metavar="EVENT_ID", help="The stored event's id.")],
    as_json: Annotated[bool, typer.Option("--json", help="Print one JSON object.")] = False,
) -> None:
    """Show one stored exposure: reported beside reconstructed, and how each figure was made."""
    from beamaudit.api.cli._store import open_store
    from beamaudit.api.intake.reconstruct import trail_for_event
    from beamaudit.api.store import models as m

    store = open_store(ctx)
    with store.sessions() as session:
        event = session.get(m.ExposureEventRow, event_id)
        if event is None:
            fail(f"no exposure event with id {event_id}")
        data = event_explanation(event, trail_for_event(session, event))
    if as_json:
        typer.echo(json.dumps(data, indent=2, default=str))
        return
    _print(data)


def _fmt(value: Any) -> str:
    if value is None:
        return "-"
    if isinstance(value, float):
        return f"{value:.4g}"
    return str(value)


def _print(data: dict[str, Any]) -> None:
    from rich.table import Table

    t = data["technique"]
    console.print(
        f"event {data['event_id']} ({data['source_kind']}, {data['modality']}) "
        f"{data['station_name'] or ''} {data['event_datetime'] or ''}\n"
        f"protocol {data['protocol_name'] or '-'}; exam type {data['exam_type'] or 'unmapped'}; "
        f"{_fmt(t['kvp_kv'])} kV, {_fmt(t['exposure_mas'])} mAs, SID {_fmt(t['sid_mm'])} mm",
        highlight=False,
    )
    if data["superseded_by_dose_report"]:
        console.print("superseded: the study's dose report carries this exposure")
    table = Table("quantity", "reported", "reconstructed", "ratio", "unit")
    rec = data["reconstructed"]
    rows: tuple[tuple[str, Any, Any, str], ...] = (
        ("DAP", data["reported"]["dap_gy_cm2"], rec["dap_gy_cm2"], "Gy·cm²"),
        (
            "incident air kerma",
            data["reported"]["entrance_dose_mgy"],
            rec["incident_air_kerma_mgy"],
            "mGy",
        ),
        ("entrance surface air kerma", None, rec["esak_mgy"], "mGy"),
        ("entrance surface dose", None, rec["entrance_dose_mgy"], "mGy"),
        ("HVL", data["reported"]["hvl_mm_al"], rec["hvl1_mm_al"], "mm Al"),
        ("tube output at 1 m", None, rec["output_ugy_per_mas_1m"], "µGy/mAs"),
    )
    mammo = data.get("mammography")
    if mammo is not None:
        rows += (("mean glandular dose (MGD)", mammo["reported_mgd_mgy"], mammo["mgd_mgy"], "mGy"),)
    for name, reported, recon, unit in rows:
        ratio = reported / recon if reported and recon else None
        table.add_row(name, _fmt(reported), _fmt(recon), _fmt(ratio), unit)
    console.print(table)
    console.print(
        f"reconstruction: {data['recon_status'] or 'not run'}"
        + ("" if rec["calibrated"] else " (uncalibrated room)"),
        highlight=False,
    )
    if mammo is not None and mammo["mgd_mgy"] is not None:
        console.print(
            f"{mammo['view_position'] or '?'} {mammo['image_laterality'] or '?'}, "
            f"{mammo['target_filter']}, {_fmt(mammo['compressed_thickness_mm'])} mm, "
            f"glandularity {_fmt(mammo['glandularity_percent'])} %"
            + (" (typical, assumed)" if mammo["glandularity_assumed"] else "")
            + f"; g {_fmt(mammo['g'])}, c {_fmt(mammo['c'])}, s {_fmt(mammo['s'])}"
            + (f", T {_fmt(mammo['t'])}" if mammo["t"] is not None else "")
            + f"; {mammo['method']}; coefficients: {mammo['coefficients']}",
            highlight=False,
            markup=False,
        )
    why = data["why"] or {}
    if why.get("backscatter_factor") is not None:
        console.print(
            f"backscatter factor B = {why['backscatter_factor']:.3f} ± "
            f"{why.get('backscatter_factor_standard_uncertainty') or 0:.3f} (one standard "
            f"uncertainty): {why.get('backscatter_factor_source') or 'source not recorded'}",
            highlight=False,
            markup=False,
        )
    if why.get("table_transmission") is not None:
        console.print(
            f"table top and mattress in the beam: transmission {why['table_transmission']:.3f}",
            highlight=False,
        )
    for line in why.get("assumptions", []):
        console.print(f"  assumed: {line}", highlight=False, markup=False)
    for note in data["notes"]:
        console.print(f"  note: {note}", highlight=False, markup=False)
    console.print(f"[dim]{data['caution']}[/dim]")


def register(app: typer.Typer) -> None:
    """Add ``explain`` to ``app``."""
    app.command("explain")(explain_command)
