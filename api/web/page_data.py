"""Plain tables for the dashboard pages, read from the store.

The dashboards stage never queries the store; this module does, and hands it
tables in the shapes :mod:`beamaudit.dashboards.tables` documents.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from datetime import date
from functools import lru_cache
from typing import Any

import numpy as np
import pandas as pd
from sqlalchemy import select
from sqlalchemy.orm import Session

from beamaudit.api.intake.mammography import is_mammography
from beamaudit.api.intake.reconstruct import trail_for_event
from beamaudit.api.review import ReviewParameters
from beamaudit.api.review.quantities import QUANTITIES
from beamaudit.api.review.ratio_baseline import ratio_baselines
from beamaudit.api.review.run import MGD_RATIO_MIN_BASELINE_MONTHS
from beamaudit.api.runs.record import record_periods, record_run, record_run_ids, scope_text
from beamaudit.api.store import models as m
from beamaudit.api.web.mammography_record import mammography_exposure

__all__ = [
    "changes_text",
    "exam_record",
    "flags_table",
    "groups_table",
    "latest_run",
    "period_runs",
    "periods",
    "room_history",
]

GROUP_KEYS = ("room", "exam_type", "quantity", "n", "n_standard", "median", "q1", "q3", "mean",
              "ci_low", "ci_high", "reference_level", "level_kind", "level_set", "ratio_to_level",
              "status")  # fmt: skip

STATUS_REASON = {
    "above_level": "the whole confidence interval of the median lies above the level",
    "possibly_above": "the median is above the level, but its confidence interval reaches below",
    "below_level": "the median is below the level",
    "insufficient_sample": "fewer standard-size patients than ICRP 135's minimum for a verdict",
    "no_level": "no reference level applies to this exam type and quantity",
}


def periods(session: Session) -> list[str]:
    """Periods with a record (a finished whole-site monthly review), newest first."""
    return record_periods(session)


def latest_run(session: Session, period: str | None) -> m.ReviewRun | None:
    """The record of ``period`` (default: of the newest period): its newest finished,
    whole-site monthly run that is not superseded (:func:`beamaudit.api.runs.record.record_run`)."""
    return record_run(session, period)


def period_runs(session: Session, period: str) -> list[dict[str, Any]]:
    """Every run that reviewed some of the calendar month ``period``, newest first: the record,
    and beside it the runs of a room or exam type, date ranges, superseded and failed runs."""
    from beamaudit.api.review import Period

    month = Period.parse(period)
    R = m.ReviewRun
    runs = session.scalars(
        select(R)
        .where(R.period_start < month.end, R.period_end > month.start)
        .order_by(R.id.desc())
    ).all()
    record = record_run(session, period)
    out = []
    for run in runs:
        if run.superseded_at is not None:
            state = f"superseded: {run.supersede_reason or ''}".rstrip(": ")
        elif record is not None and run.id == record.id:
            state = "the record of the month"
        elif run.status == "done" and run.whole_site and run.period == period:
            state = "done; a later review of the month is the record"
        elif run.status == "failed":
            state = f"failed: {run.error or ''}".rstrip(": ")
        else:
            state = run.status
        out.append(
            {
                "id": run.id,
                "kind": run.kind,
                "scope": scope_text(run),
                "state": state,
                "started_at": run.started_at,
                "record": record is not None and run.id == record.id,
            }
        )
    return out


def groups_table(run: m.ReviewRun) -> pd.DataFrame:
    """The overview's GROUPS table from a stored run."""
    rows = []
    for g in (run.result or {}).get("groups", []):
        if g.get("reference_level") is None:  # the overview sets medians against levels
            continue
        row = {k: g.get(k) for k in GROUP_KEYS}
        row["status_reason"] = STATUS_REASON.get(g.get("status"), "")
        row["patient_group_label"] = _group_label(g.get("patient_group"))
        rows.append(row)
    frame = pd.DataFrame(rows, columns=[*GROUP_KEYS, "status_reason", "patient_group_label"])
    return frame


FLAG_COLUMNS = ("flag_id", "kind", "severity", "reason", "room", "exam_type", "event_id",
                "study_uid", "period", "status", "raised_at", "note", "changed", "run_id",
                "quantity", "numbers", "patient_group", "patient_group_label")  # fmt: skip


def flags_table(session: Session, run_ids: list[int] | None = None) -> pd.DataFrame:
    """The FLAGS table of the given runs (default: the record of every period), with each
    flag's finding's triage and what changed since the finding's previous flag."""
    wanted = run_ids if run_ids is not None else list(record_run_ids(session).values())
    period_of: dict[int, str | None] = {
        run_id: period
        for run_id, period in session.execute(
            select(m.ReviewRun.id, m.ReviewRun.period).where(m.ReviewRun.id.in_(wanted))
        )
    }
    rows = session.scalars(
        select(m.FlagRow).where(m.FlagRow.review_run_id.in_(wanted)).order_by(m.FlagRow.id)
    ).all()
    return pd.DataFrame([_flag_row(r, period_of.get(r.review_run_id)) for r in rows],
                        columns=list(FLAG_COLUMNS))  # fmt: skip


def _flag_row(flag: m.FlagRow, period: str | None) -> dict[str, Any]:
    from beamaudit.api.web.routes.reviews import for_viewer

    finding = flag.finding
    group = (finding.subject or {}).get("patient_group")
    note = None
    if finding.note:
        note = f"{finding.note} ({finding.status_by or 'unknown'}"
        note += f", {finding.status_at:%Y-%m-%d})" if finding.status_at else ")"
    return {
        "flag_id": str(flag.id),
        "kind": flag.kind,
        "severity": flag.severity,
        "reason": flag.reason,
        "room": flag.room,
        "exam_type": flag.exam_type,
        "event_id": None if flag.event_id is None else str(flag.event_id),
        "study_uid": flag.study_instance_uid,
        "period": period if _is_month(period) else None,
        "status": finding.status,
        "raised_at": flag.created_at,
        "note": note,
        "changed": changes_text(flag.changes),
        "run_id": str(flag.review_run_id),
        "quantity": (finding.subject or {}).get("quantity"),
        "patient_group": group,
        "patient_group_label": _group_label(group),
        # the figures its reason quotes (never an event or study identifier: pages are for viewers)
        "numbers": for_viewer(dict(flag.numbers or {})),
    }


@lru_cache(maxsize=1)
def _patient_groups() -> Any:
    from beamaudit.api.review.bands import load_default_patient_groups

    return load_default_patient_groups()


def _group_label(group: Any) -> str | None:
    """A patient group in words (None for the main group)."""
    return _patient_groups().label(str(group)) if group else None


def changes_text(changes: dict[str, Any] | None) -> str | None:
    """What changed since the finding's previous flag, in words (None: nothing, or new)."""
    if not changes:
        return None
    parts = []
    for name, change in changes.items():
        before, after = change.get("before"), change.get("after")
        parts.append(f"{name.replace('_', ' ')} {_value(before)} → {_value(after)}")
    return "changed since the last review: " + "; ".join(parts)


def _value(value: Any) -> str:
    if value is None:
        return "–"
    if isinstance(value, float):
        return f"{value:.3g}"
    return str(value)


def _is_month(text: str | None) -> bool:
    return text is not None and len(text) == 7 and text[4] == "-"


def room_history(session: Session, room: str, *, until: str | None = None) -> pd.DataFrame:
    """ROOM_HISTORY for ``room``: the monthly medians of the stored runs' periods.

    Each period's medians come from its record's ``monthly`` table; the DAP
    ratio (reported / reconstructed) and its tolerance band from the same run;
    the MGD ratio (the unit's AGD / reconstructed D_G) with the room's usual
    ratio ± tolerance as the review judges it (:func:`_mgd_ratio_band`);
    change points from the runs' ``changepoint`` flags.
    """
    records = record_run_ids(session)
    runs = {
        r.period: r
        for r in session.scalars(
            select(m.ReviewRun).where(m.ReviewRun.id.in_(list(records.values())))
        )
    }
    rows: list[dict[str, Any]] = []
    change: set[tuple[str, str | None, str | None]] = set()
    kept = [(p, r) for p, r in sorted(runs.items()) if not (until and p and p > until)]
    mgd = _mgd_ratio_band(kept, room)
    for _period, run in kept:
        result = run.result or {}
        tol = float((result.get("parameters") or {}).get("dap_ratio_tolerance") or 0.25)
        monthly = [x for x in result.get("monthly", []) if x.get("room") == room]
        ratio = {x["month"]: x["median"] for x in monthly if x.get("quantity") == "dap_ratio"}
        for flag in result.get("flags", []):
            where = flag.get("concerns") or {}
            if flag.get("kind") == "changepoint" and where.get("room") == room:
                month = str(where.get("date") or "")[:7]
                change.add((month, where.get("exam_type"), where.get("quantity")))
        for x in monthly:
            if x.get("quantity") in ("dap_ratio", "mgd_ratio") or not x.get("exam_type"):
                continue
            rows.append({
                "month": x["month"], "exam_type": x["exam_type"], "quantity": x["quantity"],
                "median": x["median"], "n": x["n"],
                "dap_ratio_median": ratio.get(x["month"], np.nan),
                "tolerance_low": 1.0 - tol, "tolerance_high": 1.0 + tol,
                **mgd.get(x["month"], {}),
            })  # fmt: skip
    # a month with an AGD ratio and no monthly median of the room (e.g. its views all outside
    # the groups that have medians) gets a row of its own, with no median to draw
    shown = {r["month"] for r in rows}
    rows += [
        {"month": month, "exam_type": None, "quantity": "mgd_mgy", "median": np.nan, "n": 0,
         "dap_ratio_median": np.nan, **values}
        for month, values in mgd.items()
        if month not in shown
    ]  # fmt: skip
    frame = pd.DataFrame(
        rows,
        columns=["month", "exam_type", "quantity", "median", "n", "dap_ratio_median",
                 "tolerance_low", "tolerance_high", *_MGD_COLUMNS],
    )  # fmt: skip
    frame["change_point"] = [
        (mo, ex, q) in change
        for mo, ex, q in zip(frame["month"], frame["exam_type"], frame["quantity"], strict=True)
    ]
    return frame.sort_values(["exam_type", "quantity", "month"]).reset_index(drop=True)


_MGD_COLUMNS = ("mgd_ratio_median", "mgd_band_low", "mgd_band_high")


def _mgd_ratio_band(runs: Sequence[tuple[Any, Any]], room: str) -> dict[str, dict[str, float]]:
    """Month -> the room's median AGD ratio and the band the review judged it by: the room's
    usual ratio (:func:`~beamaudit.api.review.ratio_baseline.ratio_baselines` over the judged
    months, as the review's ``mgd_ratio_off_baseline`` flag) ± ``mgd_ratio_tolerance``, each
    month with its own run's parameters; no band where the room has too little history."""
    defaults = ReviewParameters.for_month(2000, 1)  # any month: only the defaults are read
    points, months = [], defaults.mgd_ratio_baseline_months
    for _period, run in runs:
        params = (run.result or {}).get("parameters") or {}
        months = int(params.get("mgd_ratio_baseline_months") or months)
        least = int(params.get("mgd_ratio_min_events") or defaults.mgd_ratio_min_events)
        tol = float(params.get("mgd_ratio_tolerance") or defaults.mgd_ratio_tolerance)
        points += [
            {"room": room, "month": x["month"], "median": x["median"], "n": x["n"], "least": least,
             "tol": tol}
            for x in (run.result or {}).get("monthly", [])
            if x.get("room") == room and x.get("quantity") == "mgd_ratio"
        ]  # fmt: skip
    if not points:
        return {}
    table = pd.DataFrame(points).drop_duplicates("month", keep="last")
    judged = ratio_baselines(
        table.loc[table["n"] >= table["least"]],
        keys=["room"],
        months=months,
        min_months=MGD_RATIO_MIN_BASELINE_MONTHS,
    ).set_index("month")
    out = {}
    for x in table.itertuples():
        base = judged["baseline"].get(x.month, np.nan)
        out[str(x.month)] = {
            "mgd_ratio_median": float(x.median),
            "mgd_band_low": base * (1.0 - x.tol),
            "mgd_band_high": base * (1.0 + x.tol),
        }
    return out


#: The tolerance a standard sets on a displayed dose figure (relative half-width) and the
#: standard: IEC 60601-2-43 ± 35 % on K_a,r (as model/skin_dose.py takes it), IEC 60601-2-44 ±
#: 20 % on CTDIvol and DLP (from memory, medium confidence).
_DISPLAY_TOLERANCE = {
    "reference_point_air_kerma_mgy": (0.35, "IEC 60601-2-43"),
    "ctdivol_mgy": (0.20, "IEC 60601-2-44"),
    "dlp_mgy_cm": (0.20, "IEC 60601-2-44"),
}

_DOSE_FIGURES = (
    ("dap_gy_cm2", "dap_gy_cm2"),
    ("incident_air_kerma_mgy", "incident_air_kerma_mgy"),
    ("esak_mgy", "esak_mgy"),
    ("entrance_dose_mgy", "entrance_dose_mgy"),
)


def _why(trail: dict[str, Any] | None) -> list[dict[str, Any]]:
    if not trail:
        return []
    figures = trail.get("figures") or {}
    chosen = figures.get("esak_mgy") or figures.get("dap_gy_cm2") or {}
    return why_steps(chosen.get("trail", []))


def why_steps(trail_steps: list[dict[str, Any]]) -> list[dict[str, Any]]:
    """The model's trail steps as the exam record's ``why`` steps."""
    steps = []
    for step in trail_steps:
        value = step.get("value")
        steps.append(
            {
                "quantity": step.get("quantity") or "",
                "value": (
                    float(value)
                    if isinstance(value, int | float) and not isinstance(value, bool)
                    else None
                ),
                "unit": step.get("unit") or "",
                "equation": step.get("equation") or "",
                "source": step.get("source") or "",
                "inputs": {k: str(v) for k, v in (step.get("inputs") or {}).items()},
                "assumed": (
                    [step["note"]]
                    if step.get("assumed") and step.get("note")
                    else bool(step.get("assumed"))
                ),
            }
        )
    return steps


def _trail_uncertainty(e: m.ExposureEventRow, quantity: str) -> dict[str, float]:
    """``{"uncertainty": u}`` from the size trail's step ``quantity`` (empty when the event
    was sized before uncertainties were estimated)."""
    for step in (e.size_trail or {}).get("steps", []):
        if step.get("quantity") == quantity and isinstance(step.get("value"), int | float):
            return {"uncertainty": float(step["value"])}
    return {}


def _size_figures(e: m.ExposureEventRow) -> dict[str, Any]:
    """A CT event's patient size from the images and SSDE from it, beside the scanner's."""
    out: dict[str, Any] = {}
    if e.size_dw_mean_cm is not None:
        how = (
            f"AAPM Report 220 / IEC 62985, "
            f"{(e.size_method or 'axial_images').replace('_', ' ')}: {e.size_images_used} used"
            + (
                f", {e.size_truncated_share:.0%} truncated (Dw too small there)"
                if e.size_truncated_share
                else ""
            )
        )
        dw: dict[str, Any] = {"value": float(e.size_dw_mean_cm), "unit": "cm", "source": how}
        dw |= _trail_uncertainty(e, "water_equivalent_diameter_mean_standard_uncertainty_cm")
        if e.water_equivalent_diameter_mm:
            dw["reported"] = e.water_equivalent_diameter_mm / 10.0
            dw["ratio"] = dw["reported"] / dw["value"]
        out["water_equivalent_diameter_cm"] = dw
        if e.size_dw_centre_cm is not None:
            centre = {"value": float(e.size_dw_centre_cm), "unit": "cm", "source": how}
            centre |= _trail_uncertainty(
                e, "water_equivalent_diameter_centre_standard_uncertainty_cm"
            )
            out["water_equivalent_diameter_centre_cm"] = centre
    if e.size_ssde_mgy is not None:
        ssde: dict[str, Any] = {
            "value": float(e.size_ssde_mgy),
            "source": f"{e.size_ssde_report}, from the scan-range average Dw",
        }
        ssde |= _trail_uncertainty(e, "ssde_standard_uncertainty_mgy")
        if e.ssde_mgy is not None and e.size_ssde_mgy > 0:
            ssde["reported"] = float(e.ssde_mgy)
            ssde["ratio"] = float(e.ssde_mgy) / float(e.size_ssde_mgy)
        out["ssde_mgy"] = ssde
    elif e.ssde_mgy is not None:
        out["ssde_mgy"] = {"value": float(e.ssde_mgy), "reported": float(e.ssde_mgy), "ratio": 1.0}
    return out


def _spectrum(event: m.ExposureEventRow) -> dict[str, Any] | None:
    """The beam of the event's stored recipe (never the room's current calibration)."""
    from beamaudit.api.intake.reconstruct import beam_for_event

    beam = beam_for_event(event)
    if beam is None:
        return None
    energies = np.asarray(beam.energies_kev, dtype=float)
    width = float(energies[1] - energies[0]) if len(energies) > 1 else 1.0
    return {
        "energies_kev": energies.tolist(),
        "fluence_per_mas_1m": (np.asarray(beam.fluence_per_mas_1m, dtype=float) / width).tolist(),
        "hvl1_mm_al": float(beam.hvl1_mm_al),
        "output_ugy_per_mas_1m": float(beam.output_ugy_per_mas_1m),
    }


def _room_name(session: Session, events: Sequence[m.ExposureEventRow]) -> str:
    """The room of a study's first event, or ``(no room)``."""
    room_name = "(no room)"
    if events and events[0].room_id:
        room = session.get(m.Room, events[0].room_id)
        room_name = room.name if room else room_name
    return room_name


def _reconstructed_figures(trail: dict[str, Any]) -> dict[str, Any]:
    """The reconstruction's dose figures of one event, with uncertainty and reported value."""
    comparisons = {c["quantity"]: c for c in trail.get("comparisons", [])}
    dose: dict[str, Any] = {}
    for name, key in _DOSE_FIGURES:
        value = trail.get(key)
        if value is None:
            continue
        fig: dict[str, Any] = {"value": float(value)}
        u = trail.get(
            key.replace("_mgy", "_standard_uncertainty_mgy").replace(
                "_gy_cm2", "_standard_uncertainty_gy_cm2"
            )
        )
        if u is not None:
            fig["uncertainty"] = float(u)
        if name in comparisons:
            fig["reported"] = float(comparisons[name]["reported"])
            fig["ratio"] = float(comparisons[name]["ratio"])
        dose[name] = fig
    if trail.get("backscatter_factor") is not None:
        dose["backscatter_factor"] = {
            "value": float(trail["backscatter_factor"]),
            "unit": "1",
            "uncertainty": float(trail.get("backscatter_factor_standard_uncertainty") or 0),
            "source": trail.get("backscatter_factor_source") or "",
        }
    return dose


def _reported_figures(e: m.ExposureEventRow) -> dict[str, Any]:
    """CTDIvol, DLP and reference-point air kerma as the modality reported them."""
    dose: dict[str, Any] = {}
    for name in ("ctdivol_mgy", "dlp_mgy_cm", "reference_point_air_kerma_mgy"):
        value = getattr(e, QUANTITIES[name].column)
        if value is not None:
            tolerance, standard = _DISPLAY_TOLERANCE[name]
            dose[name] = {
                "value": float(value),
                "reported": float(value),
                "ratio": 1.0,
                # the displayed value's tolerance as a rectangular distribution (GUM 4.3.7)
                "uncertainty": float(value) * tolerance / math.sqrt(3.0),
                "source": f"as the modality reported it; {standard} allows ± "
                f"{tolerance:.0%} on the displayed value (taken as rectangular, k = 1)",
            }
    return dose


def _exposure(session: Session, e: m.ExposureEventRow) -> dict[str, Any]:
    """One exposure of the drill-down record: technique, dose figures, why-trail, spectrum."""
    trail = trail_for_event(session, e) or {}
    if is_mammography(e) and e.recon_status == "ok":
        why = why_steps(trail.get("trail", []))
        return mammography_exposure(e, trail) | {"why": why, "spectrum": _spectrum(e)}
    dose = _reconstructed_figures(trail)
    dose.update(_reported_figures(e))
    dose.update(_size_figures(e))
    if not dose and e.dap_gy_cm2 is not None:
        dose["dap_gy_cm2"] = {
            "value": float(e.dap_gy_cm2),
            "reported": float(e.dap_gy_cm2),
            "ratio": 1.0,
        }
    technique = {
        k: getattr(e, k)
        for k in ("kvp_kv", "exposure_mas", "tube_current_ma", "exposure_time_ms", "sid_mm",
                  "body_part_thickness_mm", "deviation_index")
        if getattr(e, k) is not None
    }  # fmt: skip
    return {
        "event_id": str(e.id),
        "event_datetime": e.event_datetime or e.study_datetime,
        "technique": technique,
        "dose": dose,
        # a CT event's patient size and SSDE have a trail of their own (api/intake/ct_sizing.py)
        "why": _why(trail) + why_steps((e.size_trail or {}).get("steps", [])),
        "spectrum": _spectrum(e) if e.recon_status == "ok" else None,
    }


def _study_flags(session: Session, study_uid: str) -> pd.DataFrame:
    """The study's flags from the record runs of calendar months, with each run's period."""
    records = list(record_run_ids(session).values())
    flag_rows = session.execute(
        select(m.FlagRow, m.ReviewRun.period)
        .join(m.ReviewRun, m.ReviewRun.id == m.FlagRow.review_run_id)
        .where(m.FlagRow.study_instance_uid == study_uid, m.ReviewRun.id.in_(records))
        .order_by(m.FlagRow.id)
    ).all()
    flags = [f for f, period in flag_rows if _is_month(period)]
    periods_of = {f.id: period for f, period in flag_rows}
    return pd.DataFrame(
        [
            {
                "kind": f.kind,
                "severity": f.severity,
                "reason": f.reason,
                "room": f.room,
                "exam_type": f.exam_type,
                "event_id": None if f.event_id is None else str(f.event_id),
                "study_uid": f.study_instance_uid,
                "period": periods_of[f.id],
                "status": f.status,
            }
            for f in flags
        ],
        columns=[
            "kind",
            "severity",
            "reason",
            "room",
            "exam_type",
            "event_id",
            "study_uid",
            "period",
            "status",
        ],
    )


def exam_record(
    session: Session, study_uid: str, *, standard_window_kg: tuple[float, float] = (50.0, 90.0)
) -> dict[str, Any] | None:
    """The drill-down record of one study (contract in :mod:`beamaudit.dashboards.records`)."""
    study = session.scalar(select(m.Study).where(m.Study.study_instance_uid == study_uid))
    if study is None:
        return None
    events = session.scalars(
        select(m.ExposureEventRow)
        .where(m.ExposureEventRow.study_id == study.id)
        .order_by(m.ExposureEventRow.id)
    ).all()
    room_name = _room_name(session, events)
    exposures = [_exposure(session, e) for e in events]
    weight = study.patient_weight_kg
    flags = _study_flags(session, study_uid)
    return {
        "study_uid": study_uid,
        "room": room_name,
        "exam_type": (events[0].exam_type if events else None) or "(unmapped)",
        "study_datetime": study.study_datetime,
        "patient_weight_kg": weight,
        "standard_patient": None
        if weight is None
        else standard_window_kg[0] <= weight <= standard_window_kg[1],
        "info": {"description": study.study_description or "", "events": len(events)},
        "flags": flags,
        "exposures": exposures,
    }


def distribution_events(
    session: Session, *, start: date, end: date, window: tuple[float, float]
) -> pd.DataFrame:
    """The EVENTS table for the distributions page."""
    from beamaudit.api.runs.reviews import events_frame

    frame = events_frame(session, start=start, end=end)
    frame = frame.loc[frame["exam_type"].notna()]
    frame = frame.assign(
        event_id=frame["event_id"].astype(str),
        standard_patient=frame["patient_weight_kg"].between(window[0], window[1]),
        kvp_kv=np.nan,
        exposure_mas=np.nan,
    )
    return frame
