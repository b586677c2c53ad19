"""Demo-like data for the dashboards' tests: an invented hospital, invented doses.

Kestrel Bay Hospital does not exist. Its rooms, patients, doses and reference
levels are made up here to look like a month of work in a small imaging
department; none of these numbers is a published value or may be used as one.
The statuses are set by a crude rule of this file, not by the review core.

The month carries the kind of findings a review raises, each planted here:

* a DAP meter in West DR 1 reading 1.35 times the reconstruction (a drift);
* Abdomen AP in West DR 2 whose DAP and ESAK doubled from February (a change point);
* one Barium enema of 187 Gy·cm² in Fluoro 1, 8.5 times its level (a single exam);
* Pelvis AP in Ortho DR above both its levels (a group above a level);
* six Mobile 1 examinations without any dose value, 54 events of unmapped protocols,
  three rejected files, one exposure with a deviation index of +13.9.
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
INTERNATIONAL_SET = "International guidance (invented for the demo)"
ENEMA_STUDY = "2.25.7319000001"
ENEMA_DAP_GY_CM2 = 187.0

#: the catalogue as the pages read it: code, name, what one value is, and how a study adds up
EXAM_TYPES: list[dict[str, Any]] = [
    {"exam_type": "chest_pa", "name": "Chest PA", "level_applies_per": "projection"},
    {"exam_type": "chest_ap", "name": "Chest AP", "level_applies_per": "projection"},
    {"exam_type": "abdomen_ap", "name": "Abdomen AP", "level_applies_per": "projection"},
    {"exam_type": "lumbar_spine_ap", "name": "Lumbar spine AP", "level_applies_per": "projection"},
    {"exam_type": "pelvis_ap", "name": "Pelvis AP", "level_applies_per": "projection"},
    {
        "exam_type": "ct_head",
        "name": "CT head",
        "level_applies_per": "examination",
        "aggregation": "ctdivol_mgy=max dlp_mgy_cm=sum",
    },
    {
        "exam_type": "fluoro_barium_enema",
        "name": "Barium enema",
        "level_applies_per": "examination",
        "aggregation": "dap_gy_cm2=sum reference_point_air_kerma_mgy=sum",
    },
]
EXAM_TYPES += [
    {"exam_type": code, "name": name, "level_applies_per": "projection"}
    for code, name in (
        ("chest_lat", "Chest lateral"), ("hip_ap", "Hip AP"), ("hip_lat", "Hip lateral"),
        ("lumbar_spine_lat", "Lumbar spine lateral"), ("thoracic_spine_ap", "Thoracic spine AP"),
        ("thoracic_spine_lat", "Thoracic spine lateral"),
        ("cervical_spine_ap", "Cervical spine AP"),
        ("cervical_spine_lat", "Cervical spine lateral"),
        ("skull_ap_pa", "Skull AP/PA"), ("skull_lat", "Skull lateral"), ("knee_ap", "Knee AP"),
        ("knee_lat", "Knee lateral"), ("shoulder_ap", "Shoulder AP"), ("foot_dp", "Foot DP"),
        ("hand_pa", "Hand PA"),
    )
]  # fmt: skip
NAMES = {e["exam_type"]: e["name"] for e in EXAM_TYPES}

# (room, exam_type): (typical DAP Gy·cm², spread, patients, kVp, mAs)
_RADIOGRAPHY: dict[tuple[str, str], tuple[float, float, int, float, float]] = {
    ("West DR 1", "chest_pa"): (0.085, 0.35, 60, 110, 2.0),
    ("West DR 1", "lumbar_spine_ap"): (1.10, 0.40, 34, 81, 18.0),
    ("West DR 1", "pelvis_ap"): (1.40, 0.40, 28, 77, 20.0),
    ("West DR 2", "chest_pa"): (0.070, 0.30, 55, 115, 1.6),
    ("West DR 2", "lumbar_spine_ap"): (1.45, 0.45, 30, 83, 24.0),
    ("West DR 2", "abdomen_ap"): (1.34, 0.35, 31, 80, 22.0),
    ("Ortho DR", "pelvis_ap"): (2.30, 0.35, 40, 75, 32.0),
    ("Ortho DR", "chest_pa"): (0.090, 0.30, 9, 110, 2.2),
    ("Mobile 1", "chest_ap"): (0.11, 0.30, 14, 90, 2.5),
}
# (room, exam_type): (typical CTDIvol mGy, scan length cm, patients)
_CT: dict[tuple[str, str], tuple[float, float, int]] = {
    ("CT 1", "ct_head"): (52.0, 16.0, 45),
}
# fluoroscopy studies: (room, exam_type): (typical study DAP Gy·cm², studies)
_FLUORO: dict[tuple[str, str], tuple[float, int]] = {
    ("Fluoro 1", "fluoro_barium_enema"): (14.0, 24),
}
# invented levels: (exam_type, quantity) -> {kind: value}
_LEVELS: dict[tuple[str, str], dict[str, float]] = {
    ("chest_pa", "dap_gy_cm2"): {"local": 0.10, "national": 0.12},
    ("chest_pa", "esak_mgy"): {"international": 0.4},
    ("chest_ap", "dap_gy_cm2"): {"national": 0.15},
    ("lumbar_spine_ap", "dap_gy_cm2"): {"local": 1.40, "national": 1.60},
    ("abdomen_ap", "dap_gy_cm2"): {"local": 2.2, "national": 2.5},
    ("pelvis_ap", "dap_gy_cm2"): {"local": 1.80, "national": 2.20},
    ("ct_head", "ctdivol_mgy"): {"national": 60.0},
    ("ct_head", "dlp_mgy_cm"): {"national": 950.0},
    ("fluoro_barium_enema", "dap_gy_cm2"): {"local": 22.0, "national": 24.0},
}
_SETS = {"local": LOCAL_SET, "national": NATIONAL_SET, "international": INTERNATIONAL_SET}
_MIN_STANDARD = 20  # crude demo rule, not the review core's


def _uid(i: int) -> str:
    return f"2.25.7311{i:06d}"


def _event(i: int, when: Any, room: str, exam: str, weight: float, **doses: Any) -> dict[str, Any]:
    row = {
        "event_id": f"ev-{i:05d}",
        "study_uid": _uid(i),
        "event_datetime": str(when) + "Z",
        "room": room,
        "exam_type": exam,
        "patient_weight_kg": round(weight, 1),
        "standard_patient": bool(50 <= weight <= 90),  # ICRP 135: 70 ± 10 kg, common practice
        "kvp_kv": None,
        "exposure_mas": None,
        "dap_gy_cm2": None,
        "recon_dap_gy_cm2": None,
        "esak_mgy": None,
        "ctdivol_mgy": None,
        "dlp_mgy_cm": None,
        "reference_point_air_kerma_mgy": None,
    }
    row.update(doses)
    return row


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
            drift = 1.35 if room == "West DR 1" else 1.0  # the DAP meter reads high
            rows.append(
                _event(
                    i,
                    when,
                    room,
                    exam,
                    weight,
                    kvp_kv=kvp,
                    exposure_mas=round(mas * value / dap, 2),
                    dap_gy_cm2=round(value * drift, 4),
                    recon_dap_gy_cm2=round(value / rng.normal(1.04, 0.04), 4),
                    esak_mgy=round(value * 2.1, 3),
                )
            )
    for (room, exam), (ctdi, length, count) in _CT.items():
        for _ in range(count):
            i += 1
            weight = float(np.clip(rng.normal(78, 14), 40, 130))
            value = float(ctdi * math.exp(rng.normal(0, 0.12)))
            when = base + np.timedelta64(int(rng.integers(0, 30 * 24 * 60)), "m")
            dlp = round(value * length * float(rng.normal(1, 0.05)), 1)
            rows.append(
                _event(
                    i,
                    when,
                    room,
                    exam,
                    weight,
                    kvp_kv=120.0,
                    ctdivol_mgy=round(value, 2),
                    dlp_mgy_cm=dlp,
                )
            )
    rows += _fluoroscopy(rng, base, i)
    return rows


def _fluoroscopy(rng: np.random.Generator, base: np.datetime64, start: int) -> list[dict[str, Any]]:
    """Studies of many exposures each; the first is the planted 187 Gy·cm² enema."""
    rows: list[dict[str, Any]] = []
    i = start
    for (room, exam), (typical, studies) in _FLUORO.items():
        for s in range(studies):
            n_events = int(rng.integers(8, 30))
            total = ENEMA_DAP_GY_CM2 if s == 0 else float(typical * math.exp(rng.normal(0, 0.35)))
            shares = rng.dirichlet(np.ones(n_events))
            weight = 100.0 if s == 0 else float(np.clip(rng.normal(74, 12), 45, 120))
            start_at = base + np.timedelta64(int(rng.integers(0, 30 * 24 * 60)), "m")
            uid = ENEMA_STUDY if s == 0 else f"2.25.7319{s + 1:06d}"
            for k in range(n_events):
                i += 1
                dap = round(total * float(shares[k]), 4)
                row = _event(i, start_at + np.timedelta64(20 * k, "s"), room, exam, weight,
                             kvp_kv=85.0, dap_gy_cm2=dap,
                             reference_point_air_kerma_mgy=round(dap * 7.0, 2))  # fmt: skip
                row["study_uid"] = uid
                rows.append(row)
    return rows


def _study_values(events: list[dict[str, Any]], quantity: str) -> list[tuple[bool, float]]:
    studies: dict[str, list[dict[str, Any]]] = {}
    for e in events:
        if e[quantity] is not None:
            studies.setdefault(e["study_uid"], []).append(e)
    return [(s[0]["standard_patient"], sum(e[quantity] for e in s)) for s in studies.values()]


def make_groups(events: list[dict[str, Any]]) -> list[dict[str, Any]]:
    """Group rows from the events, with a crude demo status rule."""
    out: list[dict[str, Any]] = []
    keys = sorted({(e["room"], e["exam_type"]) for e in events})
    for room, exam in keys:
        mine = [e for e in events if e["room"] == room and e["exam_type"] == exam]
        if exam.startswith("ct_"):
            quantities: tuple[str, ...] = ("ctdivol_mgy", "dlp_mgy_cm")
        elif exam.startswith("fluoro_"):
            quantities = ("dap_gy_cm2",)
        else:
            quantities = ("dap_gy_cm2", "esak_mgy")
        for q in quantities:
            if exam.startswith("fluoro_"):
                values = _study_values(mine, q)
            else:
                values = [(e["standard_patient"], e[q]) for e in mine if e[q] is not None]
            if not values:
                continue
            std = np.array([v for s, v in values if s], dtype=float)
            out += _group_rows(room, exam, q, len(values), std)
    return out


def _group_rows(room: str, exam: str, q: str, n: int, std: np.ndarray) -> list[dict[str, Any]]:
    n_std = len(std)
    median = float(np.median(std))
    q1, q3 = (float(v) for v in np.percentile(std, [25, 75]))
    half = 1.58 * (q3 - q1) / math.sqrt(max(n_std, 1))  # notch-style half width
    levels = _LEVELS.get((exam, q), {})
    common = {
        "room": room, "exam_type": exam, "quantity": q, "n": n, "n_standard": n_std,
        "median": median, "q1": q1, "q3": q3, "mean": float(std.mean()),
        "ci_low": median - half, "ci_high": median + half,
    }  # fmt: skip
    if not levels:
        return [
            common
            | {
                "reference_level": None,
                "level_kind": None,
                "level_set": None,
                "ratio_to_level": None,
                "status": "no_level",
                "status_reason": "No reference level is set for this quantity.",
            }
        ]
    rows = []
    for kind, level in levels.items():
        if n_std < _MIN_STANDARD:
            status = "insufficient_sample"
            reason = f"{n_std} standard-size patients; at least {_MIN_STANDARD} are needed."
        elif median - half > level:
            status, reason = "above_level", "The median and its interval are above the level."
        elif median + half > level:
            status = "possibly_above"
            reason = "The 95 % interval of the median reaches the level."
        else:
            status, reason = "below_level", "Median and interval below the level."
        rows.append(
            common
            | {
                "reference_level": level,
                "level_kind": kind,
                "level_set": _SETS[kind],
                "ratio_to_level": median / level,
                "status": status,
                "status_reason": reason,
            }
        )
    return rows


def _flag(flag_id: str, kind: str, severity: str, reason: str, **more: Any) -> dict[str, Any]:
    row = {
        "flag_id": flag_id,
        "run_id": "41",
        "kind": kind,
        "severity": severity,
        "reason": reason,
        "room": None,
        "exam_type": None,
        "event_id": None,
        "study_uid": None,
        "period": PERIOD,
        "status": "open",
        "quantity": None,
        "numbers": None,
    }
    row.update(more)
    return row


def make_flags() -> list[dict[str, Any]]:
    """Flags of the last periods, as the review core words them (numbers and all)."""
    return [
        _flag("101", "group_above_level", "action",
              "Median DAP 2.31 Gy·cm² of Pelvis AP in room Ortho DR (26 standard-size patients) "
              "is 1.28 × the local level 1.8 Gy·cm²; the 95 % confidence interval lies above it.",
              room="Ortho DR", exam_type="pelvis_ap", quantity="dap_gy_cm2",
              numbers={"median": 2.31, "reference_level": 1.8, "ratio_to_level": 1.283,
                       "level_set": LOCAL_SET}),
        _flag("102", "group_above_level", "warning",
              "Median DAP 2.31 Gy·cm² of Pelvis AP in room Ortho DR is 1.05 × the national level "
              "2.2 Gy·cm²; the confidence interval includes the level.",
              room="Ortho DR", exam_type="pelvis_ap", quantity="dap_gy_cm2",
              numbers={"median": 2.31, "reference_level": 2.2, "ratio_to_level": 1.05,
                       "level_set": NATIONAL_SET}),
        _flag("103", "exam_above_investigation_level", "warning",
              "DAP 187 Gy·cm² of study 2.25.7319000001 (fluoro_barium_enema in room Fluoro 1; "
              "patient weight 100 kg) is 8.50 × the level 22 Gy·cm², above the investigation "
              "level of 2 ×.",
              room="Fluoro 1", exam_type="fluoro_barium_enema", quantity="dap_gy_cm2",
              study_uid=ENEMA_STUDY,
              numbers={"value": 186.9999999999, "reference_level": 22.0,
                       "investigation_multiple": 2.0, "patient_weight_kg": 100.0}),
        _flag("104", "dap_ratio_out_of_tolerance", "warning",
              "Median ratio of reported to reconstructed DAP in room West DR 1 in 2026-03 is 1.35 "
              "over 209 exposures, outside 1 ± 0.25: check the DAP meter's calibration.",
              room="West DR 1", quantity="dap_ratio",
              numbers={"median_ratio": 1.3518924707492417, "n": 209, "tolerance": 0.25}),
        _flag("105", "changepoint", "warning",
              "The monthly median DAP of abdomen_ap in room West DR 2 shifted up from about "
              "0.645 Gy·cm² to about 1.34 Gy·cm² starting 2026-02 (CUSUM alarm in 2026-02).",
              room="West DR 2", exam_type="abdomen_ap", quantity="dap_gy_cm2",
              numbers={"before": 0.64464, "after": 1.3445, "change_month": "2026-02"}),
        _flag("106", "changepoint", "warning",
              "The monthly median ESAK of abdomen_ap in room West DR 2 shifted up from about "
              "1.01 mGy to about 2.14 mGy starting 2026-02 (CUSUM alarm in 2026-02).",
              room="West DR 2", exam_type="abdomen_ap", quantity="esak_mgy",
              numbers={"before": 1.0087149212398587, "after": 2.143524995517331,
                       "change_month": "2026-02"}),
        *(
            _flag(f"11{k}", "no_dose_data", "warning",
                  f"Study 2.25.73180{k} (DX, chest_ap in room Mobile 1) has 1 event(s) and no "
                  "dose value at all: check that the device sends dose headers or a dose report.",
                  room="Mobile 1", exam_type="chest_ap", study_uid=f"2.25.73180{k}",
                  numbers={"n_events": 1})
            for k in range(6)
        ),
        _flag("120", "unmapped_events", "info",
              "54 event(s) in 2 distinct combination(s) of header values map to no exam type; "
              "they are listed for mapping and are not in any group.",
              numbers={"n_events": 54, "n_combinations": 2}),
        _flag("121", "deviation_index_out_of_range", "warning",
              "Exposure 154 (pelvis_ap in room West DR 1) has deviation index +13.9, outside -3 "
              "to +3: the detector received about 25 × its target exposure (overexposure).",
              room="West DR 1", exam_type="pelvis_ap", event_id="ev-00120",
              study_uid=_uid(120), numbers={"deviation_index": 13.9}),
        _flag("122", "exam_above_investigation_level", "warning",
              "DAP 5.9 Gy·cm² of exposure 180 (pelvis_ap in room Ortho DR) is 3.28 × the level "
              "1.8 Gy·cm², above the investigation level of 2 ×.",
              room="Ortho DR", exam_type="pelvis_ap", quantity="dap_gy_cm2",
              event_id="ev-00180", study_uid=_uid(180), status="acknowledged",
              note="Hip prosthesis: AEC under metal; radiographers briefed "
                   "(a.physicist, 2026-04-01)",
              numbers={"value": 5.9, "reference_level": 1.8}),
        _flag("123", "repeat_exposure", "info",
              "Two chest_pa exposures 40 s apart in one study.",
              room="West DR 1", exam_type="chest_pa", event_id="ev-00001", study_uid=_uid(1)),
        _flag("090", "group_above_level", "action",
              "Lumbar spine AP median DAP over the local level.",
              room="West DR 2", exam_type="lumbar_spine_ap", period="2026-02", status="closed",
              note="Protocol changed in February (a.physicist, 2026-03-02)"),
    ]  # fmt: skip


def make_ingest_errors() -> list[dict[str, Any]]:
    """Three files the intake refused."""
    return [
        {"occurred_at": "2026-03-14T10:02:11Z", "received_via": "scan",
         "source": "/srv/incoming/2026-03/kvp_180.dcm", "sop_instance_uid": "2.25.7399000001",
         "code": "out_of_range",
         "reason": "(0018,0060) KVP 180 kV is outside 20-150 kV"},
        {"occurred_at": "2026-03-14T10:02:12Z", "received_via": "scan",
         "source": "/srv/incoming/2026-03/not_dicom.dcm", "sop_instance_uid": None,
         "code": "not_dicom",
         "reason": "no 'DICM' marker at byte 128 and no DICOM element at the start"},
        {"occurred_at": "2026-03-20T16:45:00Z", "received_via": "cstore",
         "source": "WDR2_CONSOLE@10.20.30.41", "sop_instance_uid": None, "code": "truncated",
         "reason": "the object ends inside an element header (2 stray bytes)"},
    ]  # fmt: skip


def make_unmapped() -> list[dict[str, Any]]:
    """The header values of the knee series a reader sent under a new menu name."""
    common = {"modality": "CR", "room": "West DR 2", "body_part": None,
              "study_description": "XR KNEE", "series_description": "USER PROGRAM 14",
              "protocol_name": "USER PROGRAM 14", "n_events": 27, "n_studies": 27,
              "first_seen": "2026-03-02T09:29:37Z",
              "last_seen": "2026-03-30T13:23:08Z"}  # fmt: skip
    return [common | {"view_position": "AP"}, common | {"view_position": "LL"}]


#: the 19 examination types West DR 1 did over the year (its history has one line each)
_ROOM_EXAMS: tuple[tuple[str, float], ...] = (
    ("chest_pa", 0.085), ("chest_lat", 0.16), ("abdomen_ap", 1.1), ("pelvis_ap", 1.35),
    ("hip_ap", 0.6), ("hip_lat", 0.5), ("lumbar_spine_ap", 0.95), ("lumbar_spine_lat", 1.5),
    ("thoracic_spine_ap", 0.7), ("thoracic_spine_lat", 1.0), ("cervical_spine_ap", 0.12),
    ("cervical_spine_lat", 0.09), ("skull_ap_pa", 0.4), ("skull_lat", 0.3), ("knee_ap", 0.05),
    ("knee_lat", 0.045), ("shoulder_ap", 0.1), ("foot_dp", 0.02), ("hand_pa", 0.015),
)  # fmt: skip


def make_history() -> list[dict[str, Any]]:
    """Twelve months of West DR 1: 19 examinations, a step in Lumbar spine AP, a DAP drift."""
    months = [f"{2025 + (m + 3) // 12}-{(m + 3) % 12 + 1:02d}" for m in range(12)]
    rows = []
    for k, month in enumerate(months):
        ratio = 1.03 + (0.32 if k >= 9 else 0.0) + 0.01 * math.sin(k)
        series = [(exam, "dap_gy_cm2", base) for exam, base in _ROOM_EXAMS]
        series += [("chest_pa", "esak_mgy", 0.18), ("pelvis_ap", "esak_mgy", 2.8)]
        for j, (exam, q, base) in enumerate(series):
            stepped = exam == "lumbar_spine_ap" and k >= 7
            rows.append(
                {
                    "month": month,
                    "exam_type": exam,
                    "quantity": q,
                    "median": base * (1.25 if stepped else 1.0) * (1 + 0.03 * math.cos(3 * k + j)),
                    "n": 25 + (7 * k + j) % 13,
                    "change_point": exam == "lumbar_spine_ap" and q == "dap_gy_cm2" and k == 7,
                    "dap_ratio_median": ratio,
                    "tolerance_low": 0.75,
                    "tolerance_high": 1.25,
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
        "hvl1_mm_al": 3.4437997188749323 if kvp_kv < 100 else 4.6,
        "output_ugy_per_mas_1m": 52.03 if kvp_kv < 100 else 78.0,
    }


def _why() -> list[dict[str, Any]]:
    """A why trail shaped as the API writes it: field names, full floats, a step of choice."""
    return [
        {"quantity": "kvp_kv", "value": 81.0, "unit": "kV", "equation": "recorded",
         "source": "technique", "inputs": {}, "assumed": False},
        {"quantity": "beam_model", "value": None, "unit": "",
         "equation": "assumption of the beam model", "source": "beamaudit beam model",
         "inputs": {}, "assumed": ["inherent filtration 2.5 mm Al (invented for the demo)"]},
        {"quantity": "output_ugy_per_mas_1m", "value": 52.0311, "unit": "µGy/mAs at 1 m",
         "equation": "Y = K_air(1 m) / P_It, from the reconstructed spectrum",
         "source": "room calibration of 2026-01-14 (invented)",
         "inputs": {"kvp_kv": 81, "total_filtration_mm_al": 3.0,
                    "standard_uncertainty": "1.409555462972572"}, "assumed": False},
        {"quantity": "hvl1_mm_al", "value": 3.4437997188749323, "unit": "mm Al",
         "equation": "beam model with the room calibration", "source": "beamaudit beam model",
         "inputs": {"standard_uncertainty": "0.0"}, "assumed": False},
        {"quantity": "fsd_mm", "value": 950.0, "unit": "mm",
         "equation": "recorded focus-to-entrance distance",
         "source": "(0040,0306) DistanceSourceToEntrance", "inputs": {}, "assumed": False},
        {"quantity": "incident_air_kerma_mgy", "value": 1.0923311, "unit": "mGy",
         "equation": "K_a,i = Y · P_It · (1 m / d_FSD)²", "source": "inverse-square law",
         "inputs": {"exposure_mas": 18.0, "fsd_mm": "950.0",
                    "output_ugy_per_mas_1m": "52.031100000000002"},
         "assumed": ["patient thickness 22 cm (no measured value)"]},
        {"quantity": "backscatter_factor", "value": 1.3469590693323166, "unit": "1",
         "equation": "B from the table by HVL and field size",
         "source": "backscatter factor from the water-phantom table; cells written from memory, "
                   "to be confirmed against the original (trust to about 5 %)",
         "inputs": {"hvl1_mm_al": "3.4437997188749323", "model_relative_uncertainty": "0.02",
                    "standard_uncertainty": "0.02774882290953852"}, "assumed": True},
        {"quantity": "esak_mgy", "value": 1.4713, "unit": "mGy", "equation": "K_a,e = K_a,i · B",
         "source": "ICRU Report 74 (2005)",
         "inputs": {"backscatter_factor": "1.3469590693323166",
                    "incident_air_kerma_mgy": "1.0923311"}, "assumed": False},
    ]  # fmt: skip


def make_exam() -> dict[str, Any]:
    """The drill-down of one invented Lumbar spine AP examination with two exposures, handed
    over out of time order (the second exposure first), as a store may list them."""
    exposure = {
        "event_id": "ev-00070",
        "event_datetime": "2026-03-11T09:41:12Z",
        "technique": {
            "kvp_kv": 81.0,
            "exposure_mas": 18.04999999999,
            "sid_mm": 1150.0,
            "total_filtration_mm_al": 3.0,
            "field_area_cm2": 1200.0,
            "deviation_index": 0.4,
            "grid": True,
        },
        "dose": {
            "dap_gy_cm2": {
                "value": 1.1817833415946,
                "uncertainty": 0.0917,
                "reported": 1.23,
                "ratio": 1.23 / 1.1817833415946,
            },
            "incident_air_kerma_mgy": {"value": 1.0923311, "uncertainty": 0.0812},
            "esak_mgy": {"value": 1.4713, "uncertainty": 0.151},
            "backscatter_factor": {
                "value": 1.3469590693323166,
                "unit": "1",
                "uncertainty": 0.02774882290953852,
                "source": "water-phantom table; cells written from memory, to be confirmed "
                "against the original (trust to about 5 %)",
            },
        },
        "why": _why(),
        "spectrum": _demo_spectrum(81.0),
    }
    second = exposure | {
        "event_id": "ev-00071",
        "event_datetime": "2026-03-11T09:42:05Z",
        "technique": {"kvp_kv": 85.0, "exposure_mas": 20.0, "sid_mm": 1150.0},
        "dose": {
            "dap_gy_cm2": {"value": 1.49, "uncertainty": 0.11, "reported": 1.55, "ratio": 1.04},
            "esak_mgy": {"value": 1.83, "uncertainty": 0.19},
        },
        "why": _why()[:1],
        "spectrum": _demo_spectrum(85.0),
    }
    return {
        "study_uid": _uid(70),
        "room": "West DR 1",
        "exam_type": "lumbar_spine_ap",
        "study_datetime": "2026-03-11T09:40:00Z",
        "patient_weight_kg": 81.5,
        "standard_patient": True,
        "info": {"description": "XR LSPINE", "events": 2},
        "exposures": [second, exposure],
        "flags": [
            {
                "kind": "repeat_exposure",
                "severity": "info",
                "reason": "Two exposures 53 s apart with the same projection.",
                "room": "West DR 1",
                "exam_type": "lumbar_spine_ap",
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
    "A group needs at least 20 standard-size patients. A median whose confidence interval "
    "reaches the level is reported as possibly above it. "
    "(Demo wording written for the tests.)"
)
