"""An examination's drill-down as the page shows it: readable names, numbers rounded with units.

Package-internal, used by :func:`beamaudit.dashboards.pages.render_exam`.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from datetime import datetime
from typing import Any
from urllib.parse import quote

import pandas as pd

from beamaudit.dashboards import _web, figures
from beamaudit.dashboards.records import DoseFigure, ExamDetail, Exposure, WhyStep
from beamaudit.dashboards.rounding import (
    EMPTY,
    format_estimate,
    format_number,
    format_quantity,
    is_number,
)
from beamaudit.dashboards.wording import quantity_label, user_text

__all__ = ["exposure_views", "info_lines", "spectra_view", "standard_words"]

#: info keys that repeat what the page states itself (the number of exposures)
_REPEATED_INFO = frozenset({"events", "exposures", "number of events", "number of exposures"})
#: trail inputs that qualify the step's own value rather than name another quantity
_UNCERTAINTY = "standard_uncertainty"
_RELATIVE = "model_relative_uncertainty"
_EXPANDED = "expanded_uncertainty_k2"
_METHOD = "uncertainty_method"


def _unit(unit: str) -> str:
    return "" if unit in ("1", "") else unit


def info_lines(detail: ExamDetail) -> list[tuple[str, str]]:
    """The header's extra lines, without one that repeats the number of exposures."""
    out = []
    for label, value in detail.info:
        if label.strip().lower() in _REPEATED_INFO:
            continue
        words = label.replace("_", " ").strip()
        out.append((words[:1].upper() + words[1:], value or EMPTY))
    return out


def _in_time_order(exposures: tuple[Exposure, ...]) -> list[Exposure]:
    def key(item: tuple[int, Exposure]) -> tuple[int, Any, int]:
        i, e = item
        return (e.event_datetime is None, e.event_datetime or pd.Timestamp(0, tz="UTC"), i)

    return [e for _, e in sorted(enumerate(exposures), key=key)]


def _technique(technique: tuple[tuple[str, Any], ...]) -> list[tuple[str, str]]:
    rows = []
    for name, value in technique:
        if isinstance(value, bool) or value is None:
            shown = {True: "yes", False: "no", None: EMPTY}[value]
        elif is_number(value):
            shown = format_quantity(value, name)
        else:
            shown = str(value)
        rows.append((quantity_label(name, with_unit=False), shown))
    return rows


def _dose(d: DoseFigure) -> dict[str, str]:
    unit = _unit(d.unit)
    return {
        "label": quantity_label(d.name, with_unit=False),
        "value": format_estimate(d.value, d.uncertainty, d.unit),
        "unit": unit,
        "uncertain": "" if d.uncertainty and d.uncertainty > 0 else "not estimated",
        "reported": format_number(d.reported, d.unit) if d.reported is not None else EMPTY,
        "ratio": format_number(d.ratio) if d.ratio is not None else EMPTY,
        "source": user_text(d.source),
    }


def _number_of(text: str) -> float | None:
    try:
        value = float(text)
    except ValueError:
        return None
    return value if math.isfinite(value) else None


def _input(name: str, text: str) -> str:
    label = quantity_label(name, with_unit=False)
    value = _number_of(text) if text else None
    if name == _RELATIVE and value is not None:
        return f"{label} {format_number(value * 100, digits=2)} %"
    if value is not None:
        return f"{label} {format_quantity(value, name)}"
    return f"{label}: {text}" if text else label


def _step(s: WhyStep) -> dict[str, Any]:
    inputs = dict(s.inputs)
    u_text = inputs.pop(_UNCERTAINTY, None)
    u = _number_of(u_text) if u_text else None
    expanded_text = inputs.pop(_EXPANDED, None)
    expanded = _number_of(expanded_text) if expanded_text else None
    method = inputs.pop(_METHOD, "")
    unit = _unit(s.unit)
    if s.value is None:
        value = ""
    elif expanded is not None and expanded > 0:
        value = format_estimate(s.value, expanded, s.unit) + (f" {unit}" if unit else "")
        value += " (expanded uncertainty, k = 2)"
    else:
        value = format_estimate(s.value, u, s.unit) + (f" {unit}" if unit else "")
    return {
        "label": quantity_label(s.quantity, with_unit=False),
        "value": value,
        "method": user_text(method) if method else "",
        "no_uncertainty": u is not None and u <= 0,
        "equation": s.equation,
        "source": user_text(s.source),
        "inputs": [_input(k, v) for k, v in inputs.items()],
        "assumed": s.assumed,
        "assumptions": [user_text(a) for a in s.assumptions],
    }


#: Up to this many exposures each draws its own spectrum; a study with more (fluoroscopy) gets one
#: chart of its distinct beams instead: a chart per exposure made its page slow to make and read.
SPECTRUM_PER_EXPOSURE_MAX = 3
#: The most beams one study's chart draws (the most used first).
SPECTRA_MAX_BEAMS = 6


def _beam_key(exposure: Exposure) -> tuple[Any, ...] | None:
    s = exposure.spectrum
    if s is None:
        return None
    peak = max(s.energies_kev) if s.energies_kev else 0.0
    return (
        round(peak, 1),
        None if s.hvl1_mm_al is None else round(s.hvl1_mm_al, 4),
        None if s.output_ugy_per_mas_1m is None else round(s.output_ugy_per_mas_1m, 4),
    )


def _numbers_text(numbers: list[int]) -> str:
    """Exposure numbers as runs: [1, 2, 3, 5] -> '1-3, 5'."""
    runs: list[str] = []
    start = prev = numbers[0]
    for n in [*numbers[1:], None]:
        if n is not None and n == prev + 1:
            prev = n
            continue
        runs.append(str(start) if start == prev else f"{start}–{prev}")
        if n is not None:
            start = prev = n
    return ", ".join(runs)


def spectra_view(detail: ExamDetail) -> dict[str, Any] | None:
    """One chart of the study's distinct beams, for a study of many exposures (else None).

    Returns the figure block, the beams drawn (label and exposure numbers) and how many distinct
    beams were left out; each exposure's view names its beam (:func:`exposure_views`)."""
    ordered = _in_time_order(detail.exposures)
    if len(ordered) <= SPECTRUM_PER_EXPOSURE_MAX:
        return None
    by_beam: dict[tuple[Any, ...], list[int]] = {}
    first: dict[tuple[Any, ...], Exposure] = {}
    for number, exposure in enumerate(ordered, start=1):
        key = _beam_key(exposure)
        if key is None:
            continue
        by_beam.setdefault(key, []).append(number)
        first.setdefault(key, exposure)
    if not by_beam:
        return None
    chosen = sorted(by_beam, key=lambda k: (-len(by_beam[k]), by_beam[k][0]))[:SPECTRA_MAX_BEAMS]
    chosen.sort(key=lambda k: by_beam[k][0])
    beams = []
    kvps = [
        float(v)
        for e in ordered
        if is_number(v := dict(e.technique).get("kvp_kv")) and isinstance(v, int | float)
    ]
    for key in chosen:
        spec = first[key].spectrum
        assert spec is not None
        technique = dict(first[key].technique)
        kvp = technique.get("kvp_kv")
        parts = [format_quantity(kvp, "kvp_kv") if is_number(kvp) else ""]
        if spec.hvl1_mm_al is not None:
            parts.append(f"HVL₁ {format_quantity(spec.hvl1_mm_al, 'mm Al')}")
        numbers = by_beam[key]
        noun = "exposure" if len(numbers) == 1 else "exposures"
        label = ", ".join(p for p in parts if p) + f" ({noun} {_numbers_text(numbers)})"
        beams.append((label, spec))
    figure = _web.figure_block(
        figures.build_spectra(
            beams,
            kvp_kv=max(kvps) if kvps else None,
            title="Reconstructed spectra of the study's beams",
        ),
        "spectra-chart",
    )
    return {
        "figure": figure,
        "n_beams": len(by_beam),
        "n_drawn": len(chosen),
        "drawn": {k: i + 1 for i, k in enumerate(chosen)},
    }


def exposure_views(
    detail: ExamDetail, spectra: dict[str, Any] | None = None
) -> list[dict[str, Any]]:
    """The exposures in time order, each as the template shows it.

    With ``spectra`` (:func:`spectra_view`), an exposure names its beam on the study's chart
    instead of drawing its own."""
    views = []
    drawn: dict[tuple[Any, ...], int] = (spectra or {}).get("drawn", {})
    for number, exposure in enumerate(_in_time_order(detail.exposures), start=1):
        technique = dict(exposure.technique)
        spectrum_block = None
        beam_note = ""
        if exposure.spectrum is not None and spectra is not None:
            key = _beam_key(exposure)
            beam_note = (
                f"Its spectrum is beam {drawn[key]} of the study's chart above."
                if key in drawn
                else "Its beam is not among those drawn on the study's chart above "
                f"(the {len(drawn)} most used)."
            )
        elif exposure.spectrum is not None:
            kvp = technique.get("kvp_kv")
            spectrum_block = _web.figure_block(
                figures.build_spectrum(
                    exposure.spectrum,
                    kvp_kv=float(kvp) if isinstance(kvp, int | float) and is_number(kvp) else None,
                    title=f"Reconstructed spectrum, exposure {number}",
                ),
                f"spectrum-{number}",
            )
        views.append(
            {
                "number": number,
                "event_id": exposure.event_id,
                "when": "–"
                if exposure.event_datetime is None
                else exposure.event_datetime.strftime("%Y-%m-%d %H:%M:%S UTC"),
                "technique": _technique(exposure.technique),
                "dose": [_dose(d) for d in exposure.dose],
                "why": [_step(s) for s in exposure.why],
                "spectrum": spectrum_block,
                "beam_note": beam_note,
            }
        )
    return views


def standard_words(value: bool | None) -> str:
    return {True: "yes", False: "no", None: "not known"}[value]


#: Follow-up states in words (API values: open, patient_informed, follow_up_booked, closed).
FOLLOWUP_WORDS = {
    "open": "to follow up",
    "patient_informed": "patient informed",
    "follow_up_booked": "follow-up booked",
    "closed": "closed",
}


def _followup_words(skin: Mapping[str, Any]) -> str:
    """The follow-up state in words; an open one that no follow-up level asks for is "not
    needed" (no level of ``level_checks`` crossed)."""
    status = str(skin.get("followup_status"))
    crossed = any(c.get("crossed") for c in skin.get("level_checks") or [])
    if status == "open" and not crossed:
        return "not needed (no follow-up level reached)"
    return FOLLOWUP_WORDS.get(status, "–")


def skin_view(skin: Mapping[str, Any]) -> dict[str, Any]:
    """The exam page's skin-dose section: figures in words and the map (or why there is none)."""

    def mgy(value: Any) -> str:
        return "–" if value is None else f"{float(value):,.0f} mGy"

    def cm2(value: Any) -> str:
        return "–" if value is None else f"{float(value):,.0f} cm²"

    record = skin.get("record")
    figure = None
    if skin.get("status") == "ok" and record:
        figure = _web.figure_block(figures.build_skin_dose_map(record), "skin-map", static=True)
    u = skin.get("uncertainty_pct")
    return {
        "ok": skin.get("status") == "ok",
        "reason": skin.get("reason"),
        "facts": [
            (
                "Peak skin dose",
                mgy(skin.get("peak_skin_dose_mgy"))
                + ("" if u is None else f" (± {float(u):.0f} %, k = 2)"),
            ),
            ("Skin at or above 2 Gy", cm2(skin.get("area_above_2gy_cm2"))),
            ("Skin at or above 3 Gy", cm2(skin.get("area_above_3gy_cm2"))),
            ("Skin at or above 5 Gy", cm2(skin.get("area_above_5gy_cm2"))),
            ("Events in the map", str(skin.get("events_used") or "–")),
            ("Follow-up", _followup_words(skin)),
        ],
        "crossed": [c["text"] for c in skin.get("level_checks") or [] if c.get("crossed")],
        "assumptions": list((record or {}).get("assumptions") or []),
        "figure": figure,
        "png_href": (
            _web.SKIN_MAP_PNG_PATH.format(exam_id=int(skin["exam_id"]))
            if figure is not None and skin.get("exam_id") is not None
            else None
        ),
    }


def followup_view(followup: Mapping[str, Any]) -> dict[str, Any]:
    """The flags page's follow-up section: one row per procedure, one per patient's total."""

    items = [
        {**_followup_item(item), "note": item.get("followup_note") or ""}
        for item in followup.get("items") or []
    ]
    cumulative = [
        {
            "patient": c["patient_pseudo_id"],
            "procedures": c["procedures"],
            "psd": _mgy(c["peak_skin_dose_mgy"]),
            "upper": _mgy(c["upper_bound_mgy"]),
            "added": "maps added" if str(c["method"]).startswith("maps_added") else "peaks added",
            "map_href": (
                _web.PATIENT_SKIN_MAP_PNG_PATH.format(
                    patient=quote(str(c["patient_pseudo_id"]), safe="")
                )
                if str(c["method"]).startswith("maps_added")
                else None
            ),
        }
        for c in followup.get("cumulative") or []
    ]
    return {
        "procedures": items,
        "cumulative": cumulative,
        "window_days": followup.get("window_days"),
    }


def followup_report_view(
    items: Sequence[Mapping[str, Any]], names: Mapping[str, str] | None = None
) -> list[dict[str, Any]]:
    """The committee report's follow-up rows: procedure, room, examination, PSD, levels reached,
    follow-up state and when it was last set; no pseudonym and no note (a note is free text)."""
    rows = []
    for item in items:
        exam = item.get("exam_type")
        u = item.get("uncertainty_pct")
        rows.append(
            {
                **_followup_item(item),
                "room": item.get("room") or "–",
                "exam_name": ((names or {}).get(exam) or exam) if exam else "–",
                "psd_u": "" if u is None or item.get("peak_skin_dose_mgy") is None
                else f"± {float(u):.0f} %",
                "status_since": _day(item.get("followup_at"), ""),
            }
        )  # fmt: skip
    return rows


def _day(value: Any, missing: str) -> str:
    return value.strftime("%Y-%m-%d") if isinstance(value, datetime) else missing


def _mgy(value: Any) -> str:
    return "–" if value is None else f"{float(value):,.0f} mGy"


def _followup_item(item: Mapping[str, Any]) -> dict[str, Any]:
    """One procedure of a follow-up list in words (the flags page's and the report's rows)."""
    return {
        "study_uid": item["study_instance_uid"],
        "when": _day(item.get("study_datetime"), "–"),
        "psd": _mgy(item.get("peak_skin_dose_mgy")),
        "levels": [c["text"] for c in item.get("level_checks") or [] if c.get("crossed")],
        "status": FOLLOWUP_WORDS.get(str(item.get("followup_status")), "–"),
    }
