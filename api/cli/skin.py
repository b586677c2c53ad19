"""``beamaudit skin STUDY``: a procedure's peak skin dose, skin areas above the follow-up levels,
the NCRP 168 substantial radiation dose levels it reached, and the caution.

STUDY is a Study Instance UID as stored (pseudonymised where the store pseudonymises) or the
study's numeric id. The map is the one computed after ingest; a study stored before that is
computed now (and stored).
"""

from __future__ import annotations

import json
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


def skin_command(
    ctx: typer.Context,
    study: Annotated[
        str, typer.Argument(metavar="STUDY", help="Study Instance UID as stored, or study id.")
    ],
    as_json: Annotated[bool, typer.Option("--json", help="Print one JSON object.")] = False,
) -> None:
    """Show a procedure's peak skin dose and the NCRP 168 levels it reached."""
    from sqlalchemy import select

    from beamaudit.api.cli._store import open_store
    from beamaudit.api.intake.skin import compute_study_skin_dose
    from beamaudit.api.store import models as m

    store = open_store(ctx)
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
    if as_json:
        typer.echo(json.dumps(data, indent=2, default=str))
        return
    _print(data)


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
    out.append(data["caution"])
    console.print("\n".join(out), highlight=False, soft_wrap=True)


def register(app: typer.Typer) -> None:
    app.command("skin")(skin_command)
