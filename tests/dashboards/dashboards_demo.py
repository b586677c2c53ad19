"""Demo-like data for the dashboards' tests: an invented hospital, invented doses.

Kestrel Bay Hospital does not exist. Its rooms, patients, doses and reference
levels are made up here to look like a month of work in a small imaging
department; none of these numbers is a published value or may be used as one.
The statuses are set by a crude rule of this file, not by the review core.
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np

FACILITY = "Kestrel Bay Hospital (fictional)"
PERIOD = "2026-03"
PERIODS = ("2026-03", "2026-02", "2026-01")
LOCAL_SET = "Kestrel Bay local levels 2026 (invented)"
NATIONAL_SET = "National levels (invented for the demo)"

# (room, exam_type): (typical DAP Gy·cm², spread, patients, kVp, mAs)
_RADIOGRAPHY: dict[tuple[str, str], tuple[float, float, int, float, float]] = {
    ("West DR 1", "Chest PA"): (0.085, 0.35, 60, 110, 2.0),
    ("West DR 1", "Lumbar spine AP"): (1.10, 0.40, 34, 81, 18.0),
    ("West DR 1", "Pelvis AP"): (1.40, 0.40, 28, 77, 20.0),
    ("West DR 2", "Chest PA"): (0.070, 0.30, 55, 115, 1.6),
    ("West DR 2", "Lumbar spine AP"): (1.45, 0.45, 30, 83, 24.0),
    ("Ortho DR", "Pelvis AP"): (2.30, 0.35, 40, 75, 32.0),
    ("Ortho DR", "Chest PA"): (0.090, 0.30, 9, 110, 2.2),
}
# (room, exam_type): (typical CTDIvol mGy, scan length cm, patients)
_CT: dict[tuple[str, str], tuple[float, float, int]] = {
    ("CT 1", "CT head"): (52.0, 16.0, 45),
}
# invented levels: (exam_type, quantity) -> {kind: value}
_LEVELS: dict[tuple[str, str], dict[str, float]] = {
    ("Chest PA", "dap_gy_cm2"): {"local": 0.10, "national": 0.12},
    ("Lumbar spine AP", "dap_gy_cm2"): {"local": 1.40, "national": 1.60},
    ("Pelvis AP", "dap_gy_cm2"): {"local": 1.80, "national": 2.20},
    ("CT head", "ctdivol_mgy"): {"national": 60.0},
    ("CT head", "dlp_mgy_cm"): {"national": 950.0},
}
_MIN_STANDARD = 20  # crude demo rule, not the review core's


def _uid(i: int) -> str:
    return f"2.25.7311{i:06d}"


def make_events() -> list[dict[str, Any]]:
    """One row per irradiation event in March 2026, a fixed seed."""
    rng = np.random.default_rng(20260301)
    rows: list[dict[str, Any]] = []
    i = 0
    base = np.datetime64("2026-03-01T08:00")
    for (room, exam), (dap, spread, count, kvp, mas) in _RADIOGRAPHY.items():
        for _ in range(count):
            i += 1
            weight = float(np.clip(rng.normal(76, 15), 38, 140))
            value = float(dap * math.exp(rng.normal(0, spread)) * (weight / 75) ** 0.8)
            when = base + np.timedelta64(int(rng.integers(0, 30 * 24 * 60)), "m")
            rows.append(
                {
                    "event_id": f"ev-{i:05d}",
                    "study_uid": _uid(i),
                    "event_datetime": str(when) + "Z",
                    "room": room,
                    "exam_type": exam,
                    "patient_weight_kg": round(weight, 1),
                    "standard_patient": bool(50 <= weight <= 90),  # ICRP 135: 70 ± 10 kg
                    "kvp_kv": kvp,
                    "exposure_mas": round(mas * value / dap, 2),
                    "dap_gy_cm2": round(value, 4),
                    "recon_dap_gy_cm2": round(value / rng.normal(1.04, 0.04), 4),
                    "esak_mgy": round(value * 2.1, 3),
                    "ctdivol_mgy": None,
                    "dlp_mgy_cm": None,
                    "ref_point_air_kerma_mgy": None,
                }
            )
    for (room, exam), (ctdi, length, count) in _CT.items():
        for _ in range(count):
            i += 1
            weight = float(np.clip(rng.normal(78, 14), 40, 130))
            value = float(ctdi * math.exp(rng.normal(0, 0.12)))
            when = base + np.timedelta64(int(rng.integers(0, 30 * 24 * 60)), "m")
            rows.append(
                {
                    "event_id": f"ev-{i:05d}",
                    "study_uid": _uid(i),
                    "event_datetime": str(when) + "Z",
                    "room": room,
                    "exam_type": exam,
                    "patient_weight_kg": round(weight, 1),
                    "standard_patient": bool(50 <= weight <= 90),
                    "kvp_kv": 120.0,
                    "exposure_mas": None,
                    "dap_gy_cm2": None,
                    "recon_dap_gy_cm2": None,
                    "esak_mgy": None,
                    "ctdivol_mgy": round(value, 2),
                    "dlp_mgy_cm": round(value * length * float(rng.normal(1, 0.05)), 1),
                    "ref_point_air_kerma_mgy": None,
                }
            )
    return rows


def make_groups(events: list[dict[str, Any]]) -> list[dict[str, Any]]:
    """Group rows from the events, with a crude demo status rule."""
    out: list[dict[str, Any]] = []
    keys = sorted({(e["room"], e["exam_type"]) for e in events})
    for room, exam in keys:
        mine = [e for e in events if e["room"] == room and e["exam_type"] == exam]
        ct = exam.startswith("CT")
        quantities = ("ctdivol_mgy", "dlp_mgy_cm") if ct else ("dap_gy_cm2", "esak_mgy")
        for q in quantities:
            std = np.array([e[q] for e in mine if e["standard_patient"]], dtype=float)
            n_std = len(std)
            median = float(np.median(std))
            q1, q3 = (float(v) for v in np.percentile(std, [25, 75]))
            half = 1.58 * (q3 - q1) / math.sqrt(max(n_std, 1))  # notch-style half width
            levels = _LEVELS.get((exam, q), {})
            common = {
                "room": room,
                "exam_type": exam,
                "quantity": q,
                "n": len(mine),
                "n_standard": n_std,
                "median": median,
                "q1": q1,
                "q3": q3,
                "mean": float(std.mean()),
                "ci_low": median - half,
                "ci_high": median + half,
            }
            if not levels:
                out.append(
                    common
                    | {
                        "reference_level": None,
                        "level_kind": None,
                        "level_set": None,
                        "ratio_to_level": None,
                        "status": "no_level",
                        "status_reason": "No reference level is set for this quantity.",
                    }
                )
                continue
            for kind, level in levels.items():
                if n_std < _MIN_STANDARD:
                    status = "insufficient_sample"
                    reason = f"{n_std} standard-size patients; at least {_MIN_STANDARD} are needed."
                elif median > level:
                    status, reason = "above_level", "The median is over the level."
                elif median + half > level:
                    status = "possibly_above"
                    reason = "The median is under the level; its 95 % interval reaches it."
                else:
                    status, reason = "below_level", "Median and interval under the level."
                out.append(
                    common
                    | {
                        "reference_level": level,
                        "level_kind": kind,
                        "level_set": LOCAL_SET if kind == "local" else NATIONAL_SET,
                        "ratio_to_level": median / level,
                        "status": status,
                        "status_reason": reason,
                    }
                )
    return out


def make_flags() -> list[dict[str, Any]]:
    """Flags of the last three periods."""
    return [
        {
            "flag_id": "f-101",
            "kind": "median over level",
            "severity": "action",
            "reason": "Pelvis AP median DAP is 1.3 times the local level.",
            "room": "Ortho DR",
            "exam_type": "Pelvis AP",
            "event_id": None,
            "study_uid": None,
            "period": "2026-03",
            "status": "open",
        },
        {
            "flag_id": "f-102",
            "kind": "single exposure high",
            "severity": "review",
            "reason": "DAP 5.9 Gy·cm² is over 3 times the room's median for Pelvis AP.",
            "room": "Ortho DR",
            "exam_type": "Pelvis AP",
            "event_id": "ev-00180",
            "study_uid": _uid(180),
            "period": "2026-03",
            "status": "open",
        },
        {
            "flag_id": "f-103",
            "kind": "DAP mismatch",
            "severity": "review",
            "reason": "Reported DAP is 1.19 times the reconstruction (band 0.85-1.15).",
            "room": "West DR 1",
            "exam_type": None,
            "event_id": None,
            "study_uid": None,
            "period": "2026-03",
            "status": "acknowledged",
        },
        {
            "flag_id": "f-104",
            "kind": "repeat exposure",
            "severity": "note",
            "reason": "Two Chest PA exposures 40 s apart in one study.",
            "room": "West DR 1",
            "exam_type": "Chest PA",
            "event_id": "ev-00001",
            "study_uid": _uid(1),
            "period": "2026-03",
            "status": "open",
        },
        {
            "flag_id": "f-090",
            "kind": "median over level",
            "severity": "action",
            "reason": "Lumbar spine AP median DAP over the local level.",
            "room": "West DR 2",
            "exam_type": "Lumbar spine AP",
            "event_id": None,
            "study_uid": None,
            "period": "2026-02",
            "status": "closed",
        },
    ]


def make_history() -> list[dict[str, Any]]:
    """Twelve months of West DR 1, with a step in Lumbar spine AP and a DAP ratio drift."""
    months = [f"{2025 + (m + 3) // 12}-{(m + 3) % 12 + 1:02d}" for m in range(12)]
    rows = []
    for k, month in enumerate(months):
        ratio = 1.03 + (0.16 if k >= 9 else 0.0) + 0.01 * math.sin(k)
        for exam, q, base, step_at in (
            ("Chest PA", "dap_gy_cm2", 0.085, None),
            ("Lumbar spine AP", "dap_gy_cm2", 0.95, 7),
            ("Pelvis AP", "dap_gy_cm2", 1.35, None),
            ("Chest PA", "esak_mgy", 0.18, None),
        ):
            stepped = step_at is not None and k >= step_at
            rows.append(
                {
                    "month": month,
                    "exam_type": exam,
                    "quantity": q,
                    "median": base * (1.25 if stepped else 1.0) * (1 + 0.03 * math.cos(3 * k)),
                    "n": 25 + (7 * k) % 13,
                    "change_point": step_at is not None and k == step_at,
                    "dap_ratio_median": ratio,
                    "tolerance_low": 0.85,
                    "tolerance_high": 1.15,
                }
            )
    return rows


def _demo_spectrum(kvp_kv: float) -> dict[str, Any]:
    """A smooth invented spectrum shape with two bumps; not a physics model."""
    energies = np.arange(10.0, kvp_kv + 0.5, 0.5)
    shape = (kvp_kv - energies).clip(0) * (1 - np.exp(-(((energies - 8) / 14) ** 3)))
    for line_kev, height in ((59.3, 40.0), (67.2, 14.0)):
        if line_kev < kvp_kv:
            shape = shape + height * np.exp(-0.5 * ((energies - line_kev) / 0.6) ** 2)
    return {
        "energies_kev": energies.tolist(),
        "fluence_per_mas_1m": (shape * 1.2e3).tolist(),
        "hvl1_mm_al": 3.4 if kvp_kv < 100 else 4.6,
        "output_ugy_per_mas_1m": 52.0 if kvp_kv < 100 else 78.0,
    }


def make_exam() -> dict[str, Any]:
    """The drill-down of one invented Lumbar spine AP examination with two exposures."""
    why = [
        {
            "quantity": "output_ugy_per_mas_1m",
            "value": 52.0,
            "unit": "µGy/mAs at 1 m",
            "equation": "Y = K_air(1 m) / P_It, from the reconstructed spectrum",
            "source": "room calibration of 2026-01-14 (invented)",
            "inputs": {"kvp_kv": 81, "total_filtration_mm_al": 3.0},
            "assumed": False,
        },
        {
            "quantity": "incident_air_kerma_mgy",
            "value": 1.09,
            "unit": "mGy",
            "equation": "K_a,i = Y · P_It · (1 m / d_FSD)²",
            "source": "inverse-square law",
            "inputs": {"exposure_mas": 18.0, "ssd_mm": 950},
            "assumed": ["patient thickness 22 cm (no measured value)"],
        },
        {
            "quantity": "esak_mgy",
            "value": 1.47,
            "unit": "mGy",
            "equation": "K_a,e = K_a,i · B",
            "source": "backscatter factor for HVL 3.4 mm Al, field 30 cm × 40 cm",
            "inputs": {"backscatter_factor": 1.35},
            "assumed": True,
        },
    ]
    exposure = {
        "event_id": "ev-00070",
        "event_datetime": "2026-03-11T09:41:12Z",
        "technique": {
            "kvp_kv": 81.0,
            "exposure_mas": 18.0,
            "sid_mm": 1150,
            "total_filtration_mm_al": 3.0,
            "field_area_cm2": 1200.0,
            "grid": True,
        },
        "dose": {
            "dap_gy_cm2": {
                "value": 1.18,
                "uncertainty": 0.09,
                "reported": 1.23,
                "ratio": 1.23 / 1.18,
            },
            "incident_air_kerma_mgy": {"value": 1.09, "uncertainty": 0.08},
            "esak_mgy": {"value": 1.47, "uncertainty": 0.15},
        },
        "why": why,
        "spectrum": _demo_spectrum(81.0),
    }
    second = exposure | {
        "event_id": "ev-00071",
        "event_datetime": "2026-03-11T09:42:05Z",
        "technique": {"kvp_kv": 85.0, "exposure_mas": 20.0, "sid_mm": 1150},
        "dose": {
            "dap_gy_cm2": {"value": 1.49, "uncertainty": 0.11, "reported": 1.55, "ratio": 1.04},
            "esak_mgy": {"value": 1.83, "uncertainty": 0.19},
        },
        "why": why[:1],
        "spectrum": _demo_spectrum(85.0),
    }
    return {
        "study_uid": _uid(70),
        "room": "West DR 1",
        "exam_type": "Lumbar spine AP",
        "study_datetime": "2026-03-11T09:40:00Z",
        "patient_weight_kg": 81.5,
        "standard_patient": True,
        "info": {"Accession (pseudonymised)": "KB-7F3A-22", "Station": "WDR1-CONSOLE"},
        "exposures": [exposure, second],
        "flags": [
            {
                "kind": "repeat exposure",
                "severity": "note",
                "reason": "Two exposures 53 s apart with the same projection.",
                "room": "West DR 1",
                "exam_type": "Lumbar spine AP",
                "event_id": "ev-00071",
                "study_uid": _uid(70),
                "period": "2026-03",
                "status": "open",
            }
        ],
    }


METHOD = (
    "For each room, examination and quantity, the median over standard-size patients "
    "(50 to 90 kg) of the period is compared with each reference level that applies, "
    "following the facility-median approach of ICRP Publication 135.\n\n"
    "A group needs at least 20 standard-size patients. A median under the level whose "
    "confidence interval reaches the level is reported as possibly over it. "
    "(Demo wording written for the tests.)"
)
