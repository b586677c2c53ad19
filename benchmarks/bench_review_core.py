"""Benchmark: the review core on a month of 1,000,000 events (issue #6).

The issue's target is 1,000,000 stored events reviewed for a month in under 5 s, with the group
statistics computed in the database where data is large; this measures the in-memory core alone
(the events table already in a DataFrame, as the store hands it over), so that the SQL side has a
budget to work with. It also maps the same events' raw header values with the shipped rules.

The baseline, measured in the same run on the same data, is one plain pandas
``groupby([site, room, exam_type]).median()`` of DAP: the least any review must do. The ratio says
how many such passes the whole review costs. Events are invented (a demo-sized synthetic month).
Plain script: ``python benchmarks/bench_review_core.py``.
"""

from __future__ import annotations

import time

import numpy as np
import pandas as pd

from beamaudit.api.review import (
    ReviewParameters,
    load_default_rules,
    load_demo_local_levels,
    load_national_levels,
    map_events,
    review,
)

N_EVENTS = 1_000_000
TARGET_S = 5.0
SEED = 20250301


def synthetic_month(n: int) -> pd.DataFrame:
    """Invented events: radiography views one per event, CT studies of three acquisitions."""
    rng = np.random.default_rng(SEED)
    exam = rng.choice(
        np.array(["chest_pa", "chest_lat", "abdomen_ap", "pelvis_ap", "ct_head", "ct_chest", None]),
        n,
        p=[0.3, 0.15, 0.1, 0.1, 0.15, 0.15, 0.05],
    )
    is_ct = np.isin(exam, ["ct_head", "ct_chest"])
    rooms = np.array([f"R{i}" for i in range(1, 13)])
    study = np.where(is_ct, np.arange(n) // 3, np.arange(n))
    frame = pd.DataFrame(
        {
            "event_id": np.arange(n, dtype=np.int64),
            "study_uid": np.char.add("1.2.826.0.1.", study.astype(str)),
            "event_datetime": pd.Timestamp("2025-03-01")
            + pd.to_timedelta(rng.integers(0, 31 * 86400, n), unit="s"),
            "site": "Demo",
            "room": rooms[rng.integers(0, len(rooms), n)],
            "device": "D1",
            "modality": np.where(is_ct, "CT", "DX"),
            "exam_type": exam,
            "patient_weight_kg": np.clip(rng.normal(74.0, 14.0, n), 35.0, 180.0),
            "study_description": None,
            "series_description": None,
            "protocol_name": None,
            "body_part": np.where(is_ct, "HEAD", "CHEST"),
            "view_position": rng.choice(np.array(["PA", "LL", "AP"]), n),
        }
    )
    dap = rng.lognormal(np.log(0.09), 0.45, n)
    frame["dap_gy_cm2"] = np.where(is_ct, np.nan, dap)
    frame["recon_dap_gy_cm2"] = frame["dap_gy_cm2"] * rng.normal(1.0, 0.08, n)
    frame["esak_mgy"] = np.where(is_ct, np.nan, dap * 1.3)
    frame["reference_point_air_kerma_mgy"] = np.nan
    frame["ctdivol_mgy"] = np.where(is_ct, rng.lognormal(np.log(30.0), 0.25, n), np.nan)
    frame["dlp_mgy_cm"] = np.where(is_ct, rng.lognormal(np.log(250.0), 0.3, n), np.nan)
    frame["mgd_mgy"] = np.nan
    frame["deviation_index"] = np.where(is_ct, np.nan, rng.normal(0.0, 1.0, n))
    frame["fluoro_time_s"] = np.nan
    return frame


def main() -> int:
    events = synthetic_month(N_EVENTS)
    levels = load_national_levels() + load_demo_local_levels()
    params = ReviewParameters.for_month(2025, 3)

    start = time.perf_counter()
    events.groupby(["site", "room", "exam_type"], dropna=False)["dap_gy_cm2"].median()
    baseline_s = time.perf_counter() - start

    start = time.perf_counter()
    result = review(events, levels=levels, params=params)
    review_s = time.perf_counter() - start

    start = time.perf_counter()
    mapped = map_events(events, load_default_rules())
    map_s = time.perf_counter() - start

    print("review core benchmark (issue #6)")
    print(f"  baseline pandas groupby median, {N_EVENTS:,} events: {baseline_s:.2f} s")
    print(
        f"  review of {result.n_events:,} events: {review_s:.2f} s (core target < {TARGET_S} s "
        f"including the store's query), {len(result.groups_df)} group rows, "
        f"{len(result.flags)} flags"
    )
    print(f"  ratio review / baseline: {review_s / baseline_s:.1f}")
    print(
        f"  mapping {N_EVENTS:,} events with the shipped rules: {map_s:.2f} s "
        f"({int(mapped.notna().sum()):,} mapped)"
    )
    ok = review_s < TARGET_S
    print("  result:", "PASS" if ok else "FAIL (on a loaded machine compare the ratio)")
    return 0 if ok else 1


if __name__ == "__main__":
    raise SystemExit(main())
