"""Benchmark: a precomputed kV table against the direct spectral calculation (issue #3).

Target: 1,000,000 exposures (output and first HVL) in under 2 s on one core, agreeing with the
direct calculation within 0.5 %. Prints the timings, the speed ratio against the direct
calculation measured in the same run, and the worst disagreement. Plain script:
``python benchmarks/bench_beam.py``.
"""

from __future__ import annotations

import time

import numpy as np

from beamaudit.model import BeamConfig, BeamTable, FilterSpec, compute_beam

N_EXPOSURES = 1_000_000
N_DIRECT = 400  # direct calculations timed (and compared); extrapolated per exposure
TARGET_S = 2.0
TARGET_AGREEMENT = 0.005


def main() -> int:
    config = BeamConfig(filters=(FilterSpec("Al", 3.0), FilterSpec("Cu", 0.1)))
    rng = np.random.default_rng(20240601)
    compute_beam(config.at_kv(80.0))  # warm the interaction-data caches (once per process)

    start = time.perf_counter()
    table = BeamTable.build(config, kv_grid=np.arange(40.0, 150.01, 0.5))
    build_s = time.perf_counter() - start

    kvs = np.round(rng.uniform(40.0, 150.0, N_EXPOSURES), 1)
    start = time.perf_counter()
    output, hvl = table.evaluate(kvs)
    table_s = time.perf_counter() - start

    sample = kvs[:N_DIRECT]
    start = time.perf_counter()
    direct = [compute_beam(config.at_kv(float(kv))) for kv in sample]
    direct_s = time.perf_counter() - start
    direct_per_exposure_s = direct_s / N_DIRECT

    out_err = max(
        abs(o / d.output_ugy_per_mas_1m - 1.0)
        for o, d in zip(output[:N_DIRECT], direct, strict=True)
    )
    hvl_err = max(abs(h / d.hvl1_mm_al - 1.0) for h, d in zip(hvl[:N_DIRECT], direct, strict=True))
    direct_equivalent_s = direct_per_exposure_s * N_EXPOSURES
    print("beam table benchmark (issue #3)")
    print(f"  table build ({table.kv_grid.size} voltages): {build_s:.2f} s")
    print(f"  table evaluate, {N_EXPOSURES:,} exposures: {table_s:.3f} s (target < {TARGET_S} s)")
    print(
        f"  direct calculation: {direct_per_exposure_s * 1e3:.2f} ms per exposure "
        f"({N_DIRECT} timed), {direct_equivalent_s:.0f} s for {N_EXPOSURES:,}"
    )
    print(f"  speed ratio table / direct: 1 : {direct_equivalent_s / table_s:,.0f}")
    print(
        f"  worst disagreement over {N_DIRECT} exposures: output {out_err:.4%}, HVL {hvl_err:.4%} "
        f"(target < {TARGET_AGREEMENT:.1%})"
    )
    ok = table_s < TARGET_S and out_err < TARGET_AGREEMENT and hvl_err < TARGET_AGREEMENT
    print("  result:", "PASS" if ok else "FAIL")
    return 0 if ok else 1


if __name__ == "__main__":
    raise SystemExit(main())
