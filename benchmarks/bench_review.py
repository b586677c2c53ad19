"""Benchmark: one month of 1,000,000 stored events reviewed on SQLite (and PostgreSQL).

Target (issue "Reviews against diagnostic reference levels"): under 5 s per
backend. Reported as a ratio to a baseline measured in the same run: reading
the same month's rows with a bare ``SELECT`` into a DataFrame.

Usage: ``python benchmarks/bench_review.py [--events N]``; PostgreSQL is
measured too when ``BEAMAUDIT_TEST_POSTGRES_URL`` is set. The store is built
once per size and kept in the temp folder.
"""

from __future__ import annotations

import argparse
import os
import sys
import tempfile
import time
import uuid
from datetime import UTC, datetime
from pathlib import Path

import pandas as pd
from sqlalchemy import text

sys.path.insert(0, str(Path(__file__).parent))
from review_data import fill

from beamaudit.api.review import Period, ReviewParameters
from beamaudit.api.reviews import execute_review
from beamaudit.api.store import make_engine, make_session_factory, upgrade

TARGET_S = 5.0
MONTH = datetime(2026, 10, 1, tzinfo=UTC)


def measure(engine, label: str) -> bool:
    sessions = make_session_factory(engine)
    params = ReviewParameters(period=Period.month(2026, 10), changepoint_lookback_months=0)
    with sessions() as s:  # warm the caches the same way for both measurements
        s.execute(text("SELECT count(*) FROM exposure_events")).scalar()
    t0 = time.perf_counter()
    with engine.connect() as conn:
        base = pd.read_sql_query(
            text("SELECT id, room_id, exam_type, patient_weight_kg, dap_gy_cm2, event_datetime "
                 "FROM exposure_events"),
            conn,
        )  # fmt: skip
    baseline = time.perf_counter() - t0
    t0 = time.perf_counter()
    with sessions.begin() as s:
        result, _ = execute_review(s, params)
    elapsed = time.perf_counter() - t0
    ok = elapsed < TARGET_S
    print(
        f"{label}: {result.n_events:,} events reviewed in {elapsed:.2f} s "
        f"(target {TARGET_S:.0f} s: {'met' if ok else 'MISSED'}); bare SELECT of "
        f"{len(base):,} rows {baseline:.2f} s; ratio review/SELECT {elapsed / baseline:.2f}"
    )
    return ok


def main() -> int:
    ap = argparse.ArgumentParser()
    ap.add_argument("--events", type=int, default=1_000_000)
    args = ap.parse_args()
    ok = True
    path = Path(tempfile.gettempdir()) / f"beamaudit-bench-review-{args.events}.db"
    if not path.exists():
        engine = make_engine(f"sqlite:///{path}.tmp")
        upgrade(engine)
        t0 = time.perf_counter()
        fill(engine, args.events, month_start=MONTH)
        engine.dispose()
        os.replace(f"{path}.tmp", path)
        print(f"built {path} in {time.perf_counter() - t0:.0f} s")
    engine = make_engine(f"sqlite:///{path}")
    ok &= measure(engine, "SQLite")
    engine.dispose()
    pg = os.environ.get("BEAMAUDIT_TEST_POSTGRES_URL")
    if pg:
        schema = f"bench_{uuid.uuid4().hex[:8]}"
        admin = make_engine(pg)
        with admin.begin() as conn:
            conn.execute(text(f'CREATE SCHEMA "{schema}"'))
        engine = make_engine(pg, connect_args={"options": f"-csearch_path={schema}"})
        try:
            upgrade(engine)
            fill(engine, args.events, month_start=MONTH)
            with engine.begin() as conn:
                conn.execute(text("ANALYZE"))
            ok &= measure(engine, "PostgreSQL")
        finally:
            engine.dispose()
            with admin.begin() as conn:
                conn.execute(text(f'DROP SCHEMA "{schema}" CASCADE'))
            admin.dispose()
    return 0 if ok else 1


if __name__ == "__main__":
    raise SystemExit(main())
