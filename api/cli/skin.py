"""``beamaudit skin STUDY``: a procedure's peak skin dose, skin areas above the follow-up levels,
the NCRP 168 substantial radiation dose levels it reached, and the caution.

STUDY is a Study Instance UID as stored (pseudonymised where the store pseudonymises) or the
study's numeric id. The map is the one computed after ingest; a study stored before that is
computed now (and stored). ``--patient PSEUDONYM`` gives a pseudonymised patient's cumulative
skin dose over the follow-up window instead, and how it was made; ``--png FILE`` writes the map
(the procedure's, or the patient's cumulative one) as an image.
"""

from __future__ import annotations

import json
from pathlib import Path
from typing import Annotated, Any

import typer

from beamaudit.api.cli._common import console, fail

__all__ = ["register", "skin_summary"]


def skin_summary(skin: Any, study: Any) -> dict[str, Any]:
    """A JSON-ready summary of one stored skin-dose row."""
    from beamaudit import CAUTION

    record = skin.record or {}
    return {
        "study_instance_uid": study.study_instance_uid,
        "status": skin.status,
        "reason": skin.reason,
        "peak_skin_dose_mgy": skin.peak_skin_dose_mgy,
        "area_above_2gy_cm2": skin.area_above_2gy_cm2,
        "area_above_3gy_cm2": skin.area_above_3gy_cm2,
        "area_above_5gy_cm2": skin.area_above_5gy_cm2,
        "uncertainty_pct": skin.uncertainty_pct,
        "events_used": skin.events_used,
        "events_at_peak": list(skin.events_at_peak or []),
        "levels_crossed": list(skin.levels_crossed or []),
        "level_checks": list(skin.level_checks or []),
        "assumptions": list(record.get("assumptions") or []),
        "followup_status": skin.followup_status,
        "caution": CAUTION,
    }


def _find(session: Any, study: str) -> Any:
    from sqlalchemy import select

    from beamaudit.api.store import models as m

    row = session.scalar(select(m.Study).where(m.Study.study_instance_uid == study))
    if row is None and study.isdigit():
        row = session.get(m.Study, int(study))
    return row


def _png_target(png: Path | None) -> Path | None:
    if png is None:
        return None
    if png.suffix.lower() != ".png":
        fail(f"--png {png}: the file name must end in .png")
    if not png.parent.is_dir():
        fail(f"--png {png}: no folder {png.parent}")
    return png


def _write_png(target: Path, data: bytes) -> None:
    try:
        target.write_bytes(data)
    except OSError as exc:
        fail(f"cannot write {target}: {exc.strerror or exc}")


def skin_command(
    ctx: typer.Context,
    study: Annotated[
        str | None,
        typer.Argument(metavar="STUDY", help="Study Instance UID as stored, or study id."),
    ] = None,
    as_json: Annotated[bool, typer.Option("--json", help="Print one JSON object.")] = False,
    png: Annotated[
        Path | None,
        typer.Option(
            "--png",
            metavar="FILE",
            help="Also write the skin-dose map as a PNG image (A4 upright, 150 dpi).",
        ),
    ] = None,
    patient: Annotated[
        str | None,
        typer.Option(
            "--patient",
            metavar="PSEUDONYM",
            help="Instead of STUDY: a pseudonymised patient's cumulative skin dose over the "
            "follow-up window.",
        ),
    ] = None,
    window_days: Annotated[
        float | None,
        typer.Option(
            "--window-days",
            metavar="DAYS",
            help="With --patient: the window, days (default: the skin_dose_window_days setting).",
        ),
    ] = None,
) -> None:
    """Show a procedure's peak skin dose and the NCRP 168 levels it reached, or a patient's
    cumulative skin dose (--patient); --png writes the map as an image."""
    from sqlalchemy import select

    from beamaudit.api.cli._store import open_store
    from beamaudit.api.intake.skin import compute_study_skin_dose
    from beamaudit.api.store import models as m
    from beamaudit.api.web.skin_image import SkinImageError, exam_skin_png

    if (study is None) == (patient is None):
        fail("give either STUDY or --patient PSEUDONYM")
    if window_days is not None and patient is None:
        fail("--window-days goes with --patient")
    if window_days is not None and not (0 < window_days <= 3650):
        fail(f"--window-days {window_days:g}: must be more than 0 and at most 3650")
    target = _png_target(png)
    store = open_store(ctx)
    if patient is not None:
        _patient(store, patient, window_days or store.settings.skin_dose_window_days, target,
                 as_json=as_json)  # fmt: skip
        return
    assert study is not None
    with store.sessions.begin() as session:
        row = _find(session, study)
        if row is None:
            fail(f"no study {study!r} in the store")
        skin = session.scalar(select(m.SkinDoseRow).where(m.SkinDoseRow.study_id == row.id))
        if skin is None:
            skin = compute_study_skin_dose(session, row.id)
        if skin is None:
            fail(
                f"study {study} has no fluoroscopy or interventional event with geometry "
                "(positioner angles): no skin-dose map"
            )
        data = skin_summary(skin, row)
        image = None
        if target is not None:
            try:
                image = exam_skin_png(skin, row)
            except SkinImageError as exc:
                fail(str(exc))
    if target is not None and image is not None:
        _write_png(target, image)
        data["png"] = str(target)
    if as_json:
        typer.echo(json.dumps(data, indent=2, default=str))
        return
    _print(data)


def _patient(
    store: Any, patient: str, window_days: float, target: Path | None, *, as_json: bool
) -> None:
    from beamaudit import CAUTION
    from beamaudit.api.store.skin_doses import patient_skin_dose
    from beamaudit.api.web.skin_image import METHOD_WORDS, SkinImageError, patient_skin_png

    with store.sessions() as session:
        entry = patient_skin_dose(session, patient, window_days=window_days)
    if entry is None:
        fail(f"patient {patient!r} has no procedure with a skin-dose estimate in the last "
             f"{window_days:g} days")  # fmt: skip
    data: dict[str, Any] = {**entry.summary(), "window_days": window_days}
    data["method_words"] = METHOD_WORDS.get(entry.method, entry.method)
    if target is not None:
        try:
            image = patient_skin_png(entry, window_days=window_days)
        except SkinImageError as exc:
            fail(str(exc))
        _write_png(target, image)
        data["png"] = str(target)
    data["caution"] = CAUTION
    if as_json:
        typer.echo(json.dumps(data, indent=2, default=str))
        return
    out = [
        f"patient {patient}: {len(entry.study_uids)} procedure(s) within {window_days:g} days",
        f"cumulative peak skin dose {_num(entry.peak_skin_dose_mgy, 'mGy')} "
        f"(highest single procedure {_num(entry.lower_bound_mgy, 'mGy')}, "
        f"sum of the peaks {_num(entry.upper_bound_mgy, 'mGy')})",
        f"made from {data['method_words']}",
        *entry.notes,
    ]
    if "png" in data:
        out.append(f"map written to {data['png']}")
    out.append(CAUTION)
    console.print("\n".join(out), highlight=False, soft_wrap=True)


def _num(value: Any, unit: str) -> str:
    return "-" if value is None else f"{value:.3g} {unit}"


def _print(data: dict[str, Any]) -> None:
    out = [f"study {data['study_instance_uid']}"]
    if data["status"] != "ok":
        out.append(data["reason"] or "skin-dose map not computed")
    else:
        out.append(
            f"peak skin dose {_num(data['peak_skin_dose_mgy'], 'mGy')} "
            f"(expanded uncertainty, k = 2: {data['uncertainty_pct']:.0f} %), "
            f"from {data['events_used']} events"
        )
        out.append(
            "skin area at or above 2 Gy "
            f"{_num(data['area_above_2gy_cm2'], 'cm²')}, "
            f"3 Gy {_num(data['area_above_3gy_cm2'], 'cm²')}, "
            f"5 Gy {_num(data['area_above_5gy_cm2'], 'cm²')}"
        )
    crossed = [c["text"] for c in data["level_checks"] if c.get("crossed")]
    if crossed:
        out.append("NCRP 168 substantial radiation dose levels reached (follow the patient up):")
        out.extend(f"  {text}" for text in crossed)
    else:
        out.append("no NCRP 168 substantial radiation dose level reached")
    out.append(f"follow-up: {data['followup_status']}")
    if data.get("png"):
        out.append(f"map written to {data['png']}")
    out.append(data["caution"])
    console.print("\n".join(out), highlight=False, soft_wrap=True)


def register(app: typer.Typer) -> None:
    app.command("skin")(skin_command)
