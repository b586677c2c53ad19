"""The skin-dose map of a procedure, or a patient's cumulative map, as a PNG (issue #21): what the
picture says about the stored row, for ``beamaudit skin --png`` and the REST routes.

The picture names the patient only by the pseudonymised id the store keeps and the exam by its
id in the store and its exam type; no name, birth date or date of a procedure.
"""

from __future__ import annotations

from typing import Any

from beamaudit.api.errors import ApiError
from beamaudit.api.store import models as m
from beamaudit.api.store.skin_doses import CumulativeEntry

__all__ = ["METHOD_WORDS", "SkinImageError", "exam_skin_png", "patient_skin_png"]

#: How a cumulative figure was made, in words (``CumulativeEntry.method``).
METHOD_WORDS = {
    "maps_added": "the procedures' maps added cell by cell on one patient-surface grid "
    "(the same patient model)",
    "maps_added_assumed_alignment": "the procedures' maps added cell by cell on one "
    "patient-surface grid (the same patient model); where a map lies along the body was "
    "assumed",
    "peaks_added": "the maps describe different patient models and cannot be added: the sum "
    "of the procedures' peaks, an upper bound",
    "none": "no procedure with a skin-dose map in the window",
}


class SkinImageError(ApiError):
    """No map to draw (the reason in one line)."""


def _gy(mgy: float | None) -> str:
    return "-" if mgy is None else f"{mgy / 1000.0:.2f} Gy"


def _areas(areas: dict[str, Any]) -> str:
    parts = [f"{float(k) / 1000.0:g} Gy: {float(v):.0f} cm²" for k, v in areas.items()]
    return "skin at or above " + ", ".join(parts) if parts else ""


def exam_skin_png(skin: m.SkinDoseRow, study: m.Study) -> bytes:
    """The PNG of one procedure's stored map.

    Raises
    ------
    SkinImageError
        The row holds no map (its computation failed: the reason).
    """
    from beamaudit.dashboards.skin_image import render_skin_dose_png

    record = skin.record or {}
    if skin.status != "ok" or not record.get("map"):
        raise SkinImageError(
            f"exam {study.id} has no skin-dose map: {skin.reason or 'not computed'}"
        )
    who = f", patient {study.patient_pseudo_id}" if study.patient_pseudo_id else ""
    u = skin.uncertainty_pct
    lines = [
        f"Examination: {study.exam_type or 'not mapped to an exam type'}. "
        f"Peak skin dose {_gy(skin.peak_skin_dose_mgy)}"
        + (f" (expanded uncertainty ±{u:.0f} %, k = 2)" if u is not None else "")
        + f", from {skin.events_used} irradiation events.",
        _areas(dict(record.get("area_above_cm2") or {})),
    ]
    crossed = [c["text"] for c in skin.level_checks or [] if c.get("crossed")]
    lines.append(
        "NCRP 168 substantial radiation dose levels reached: " + "; ".join(crossed)
        if crossed
        else "No NCRP 168 substantial radiation dose level reached."
    )
    return render_skin_dose_png(
        record, heading=f"Skin-dose map of exam {study.id}{who}", lines=lines
    ).png


def patient_skin_png(entry: CumulativeEntry, *, window_days: float) -> bytes:
    """The PNG of a patient's cumulative map over the window.

    Raises
    ------
    SkinImageError
        The maps could not be added (different patient models) or none was usable.
    """
    from beamaudit.dashboards.skin_image import render_skin_dose_png

    record = entry.map_record
    if record is None:
        raise SkinImageError(
            f"no cumulative map of patient {entry.patient_pseudo_id}: "
            f"{METHOD_WORDS.get(entry.method, entry.method)} "
            f"({entry.peak_skin_dose_mgy:.0f} mGy)"
        )
    n = len(entry.study_uids)
    lines = [
        f"{n} procedure{'s' if n != 1 else ''} within {window_days:g} days "
        f"(exams {', '.join(str(i) for i in entry.exam_ids)}). Cumulative peak skin dose "
        f"{_gy(entry.peak_skin_dose_mgy)}; highest single procedure {_gy(entry.lower_bound_mgy)}; "
        f"sum of the procedures' peaks {_gy(entry.upper_bound_mgy)}.",
        "Made from " + METHOD_WORDS.get(entry.method, entry.method) + ".",
        _areas(dict(record.get("area_above_cm2") or {})),
        *entry.notes,
        "The uncertainty of the cumulative peak is not combined here: each procedure's map "
        "states its own.",
    ]
    return render_skin_dose_png(
        record,
        heading=f"Cumulative skin-dose map of patient {entry.patient_pseudo_id}",
        lines=lines,
    ).png
