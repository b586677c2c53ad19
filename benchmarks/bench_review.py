"""Benchmark: one month of 1,000,000 stored events reviewed on SQLite and on PostgreSQL.

Target (issue #6, "Reviews against diagnostic reference levels"): a month of 1,000,000 stored
events reviewed in **under 5 s** on each backend; that absolute figure is the acceptance
criterion and is printed as met or missed. Beside it, each figure is given as a ratio to a
baseline measured in the same run on the same store: reading the same month's rows with a bare
``SELECT`` of six columns into a DataFrame (``pandas.read_sql_query``), the least a review that
reads its events must do. On a shared machine the ratio is the steadier figure; each figure is
the best of ``--rounds`` rounds.

The review runs with the default parameters, as ``beamaudit review --month`` does. The store holds
the one month only: the change-point history (the monthly medians of the 24 months before) is
looked for and is empty, so what is measured is the month itself; a store with months of history
before it adds the reading of those months to a review.

Usage: ``python benchmarks/bench_review.py [--events N] [--rounds R] [--rebuild]``. PostgreSQL is
measured too when ``BEAMAUDIT_TEST_POSTGRES_URL`` is set (with ``CI=true`` it must be). The stores
are built once per size and kept: SQLite in the temp folder, PostgreSQL in a database of the
benchmark's own (``beamaudit_bench``, schema ``review_<N>``) on the same server, so that neither
collides with test runs. Events are invented (``review_data.py``).
"""

from __future__ import annotations

import argparse
import os
import sys
import tempfile
import time
from datetime import UTC, datetime
from pathlib import Path

import pandas as pd
from sqlalchemy import make_url, text
from sqlalchemy.engine import Engine

sys.path.insert(0, str(Path(__file__).parent))
from review_data import fill

from beamaudit.api.review import Period, ReviewParameters
from beamaudit.api.runs.reviews import execute_review
from beamaudit.api.store import make_engine, make_session_factory, upgrade

TARGET_S = 5.0
MONTH = datetime(2026, 10, 1, tzinfo=UTC)
BENCH_DATABASE = "beamaudit_bench"
BASELINE_SQL = (
    "SELECT id, room_id, exam_type, patient_weight_kg, dap_gy_cm2, event_datetime "
    "FROM exposure_events"
)


def measure(engine: Engine, label: str, rounds: int) -> bool:
    sessions = make_session_factory(engine)
    # the parameters `beamaudit review --month 2026-10` runs with (a 24-month change-point
    # lookback included: the store holds only the month, so the history queries find nothing)
    params = ReviewParameters(period=Period.month(2026, 10))
    with sessions() as s:  # warm the caches the same way for both measurements
        s.execute(text("SELECT count(*) FROM exposure_events")).scalar()
    baseline = elapsed = cpu = float("inf")
    n_rows = n_events = n_flags = 0
    for _ in range(rounds):
        t0 = time.perf_counter()
        with engine.connect() as conn:
            n_rows = len(pd.read_sql_query(text(BASELINE_SQL), conn))
        baseline = min(baseline, time.perf_counter() - t0)
        t0, c0 = time.perf_counter(), time.process_time()
        with sessions.begin() as s:
            result, _ = execute_review(s, params)
        elapsed = min(elapsed, time.perf_counter() - t0)
        cpu = min(cpu, time.process_time() - c0)
        n_events, n_flags = result.n_events, len(result.flags)
    ok = elapsed < TARGET_S
    print(
        f"{label}: {n_events:,} events reviewed in {elapsed:.2f} s (this process's CPU "
        f"{cpu:.2f} s), {n_flags} flags; TARGET < {TARGET_S:.0f} s: {'MET' if ok else 'MISSED'}\n"
        f"  baseline, bare SELECT of {n_rows:,} rows x 6 columns into a DataFrame: "
        f"{baseline:.2f} s; ratio review / baseline {elapsed / baseline:.2f} "
        f"(best of {rounds} rounds)"
    )
    return ok


def sqlite_store(n: int, rebuild: bool) -> Engine:
    path = Path(tempfile.gettempdir()) / f"beamaudit-bench-review-{n}.db"
    if rebuild and path.exists():
        path.unlink()
    if not path.exists():
        engine = make_engine(f"sqlite:///{path}.tmp")
        upgrade(engine)
        t0 = time.perf_counter()
        fill(engine, n, month_start=MONTH)
        engine.dispose()
        os.replace(f"{path}.tmp", path)
        print(f"built {path} in {time.perf_counter() - t0:.0f} s")
    return make_engine(f"sqlite:///{path}")


def postgres_store(url: str, n: int, rebuild: bool) -> Engine:
    """The benchmark's schema in its own database (created when missing, filled once per size)."""
    admin = make_engine(url, isolation_level="AUTOCOMMIT")
    with admin.connect() as conn:
        if not conn.execute(
            text("SELECT 1 FROM pg_database WHERE datname = :d"), {"d": BENCH_DATABASE}
        ).scalar():
            conn.execute(text(f'CREATE DATABASE "{BENCH_DATABASE}"'))
    admin.dispose()
    bench_url = make_url(url).set(database=BENCH_DATABASE).render_as_string(hide_password=False)
    schema = f"review_{n}"
    owner = make_engine(bench_url)
    with owner.begin() as conn:
        exists = conn.execute(
            text("SELECT 1 FROM information_schema.tables WHERE table_schema = :s "
                 "AND table_name = 'exposure_events'"),
            {"s": schema},
        ).scalar()  # fmt: skip
        count = (
            conn.execute(text(f'SELECT count(*) FROM "{schema}".exposure_events')).scalar()
            if exists
            else None
        )
        fresh = rebuild or count != n
        if fresh:
            conn.execute(text(f'DROP SCHEMA IF EXISTS "{schema}" CASCADE'))
            conn.execute(text(f'CREATE SCHEMA "{schema}"'))
    owner.dispose()
    engine = make_engine(bench_url, connect_args={"options": f"-csearch_path={schema}"})
    if fresh:
        t0 = time.perf_counter()
        upgrade(engine)
        fill(engine, n, month_start=MONTH)
        with engine.begin() as conn:
            conn.execute(text("ANALYZE"))
        print(f"built {BENCH_DATABASE}.{schema} in {time.perf_counter() - t0:.0f} s")
    return engine


def main() -> int:
    ap = argparse.ArgumentParser()
    ap.add_argument("--events", type=int, default=1_000_000)
    ap.add_argument("--rounds", type=int, default=3)
    ap.add_argument("--rebuild", action="store_true", help="build the stores afresh")
    args = ap.parse_args()
    print(f"review benchmark (issue #6): one month of {args.events:,} stored events")
    ok = True
    engine = sqlite_store(args.events, args.rebuild)
    ok &= measure(engine, "SQLite", args.rounds)
    engine.dispose()
    pg = os.environ.get("BEAMAUDIT_TEST_POSTGRES_URL")
    if pg:
        engine = postgres_store(pg, args.events, args.rebuild)
        try:
            ok &= measure(engine, "PostgreSQL", args.rounds)
        finally:
            engine.dispose()
    elif os.environ.get("CI") == "true":
        print("PostgreSQL: BEAMAUDIT_TEST_POSTGRES_URL is not set, but CI=true requires it")
        ok = False
    else:
        print("PostgreSQL: not measured (set BEAMAUDIT_TEST_POSTGRES_URL to measure it)")
    print("result:", "PASS" if ok else "FAIL (on a loaded machine compare the ratios)")
    return 0 if ok else 1


if __name__ == "__main__":
    raise SystemExit(main())
