"""Benchmark: the bulk dose chain (dose_from_beams) against a dose_from_beam loop.

Target: 20,000 varied exposures through :func:`beamaudit.model.dose_from_beams` at least 10
times faster than :func:`beamaudit.model.dose_from_beam` called once per exposure on the same
inputs, both timed in this run, with the same figures (relative difference below 1e-12) and the
same error messages (checked on the first N_CHECKED exposures). Every exposure here has its own
geometry (no two alike), the worst case for the bulk chain, which resolves equal geometries
once; a second run whose exposures share N_PROTOCOLS geometries (as a room's protocols repeat
them, beams and mAs still all different) is reported beside it, for information.
Plain script: ``python benchmarks/bench_dose_bulk.py``; exits 1 below target.
``--exposures 1000000`` runs the bulk chain on that many exposures (the loop and the check stay
on the first 20,000 and 5,000), for the per-exposure figure at scale.
"""

from __future__ import annotations

import argparse
import contextlib
import math
import time
from collections.abc import Callable

import numpy as np

from beamaudit.model import (
    BeamInputs,
    BeamSpec,
    BulkDose,
    FilterSpec,
    GeometryInputs,
    ModelError,
    compute_beam,
    dose_from_beam,
    dose_from_beams,
)
from beamaudit.model.patient_support import default_patient_support

N_EXPOSURES = 20_000
N_CHECKED = 5_000
N_PROTOCOLS = 500
N_MODEL_BEAMS = 200
TARGET_RATIO = 10.0
TARGET_AGREEMENT = 1e-12
SEED = 20240611
FIGURES = (
    ("dap", "dap_gy_cm2", "dap_standard_uncertainty_gy_cm2"),
    ("incident_air_kerma", "incident_air_kerma_mgy", "incident_air_kerma_standard_uncertainty_mgy"),
    ("backscatter_factor", "backscatter_factor", "backscatter_factor_standard_uncertainty"),
    ("esak", "esak_mgy", "esak_standard_uncertainty_mgy"),
    ("entrance_dose", "entrance_dose_mgy", "entrance_dose_standard_uncertainty_mgy"),
    (
        "reference_point_air_kerma",
        "reference_point_air_kerma_mgy",
        "reference_point_air_kerma_standard_uncertainty_mgy",
    ),
    ("fsd", "fsd_mm", "fsd_standard_uncertainty_mm"),
)


def model_beams(count: int, rng: np.random.Generator) -> list[BeamInputs]:
    """Beams of the beam model (spectrum, backscatter curve; a third under a table), as a
    reconstruction shares them between the exposures of a room."""
    out = []
    for k in range(count):
        filters = (FilterSpec("Al", float(rng.uniform(2.5, 4.0))),)
        if k % 2:
            filters = (*filters, FilterSpec("Cu", float(rng.choice([0.1, 0.2, 0.3]))))
        result = compute_beam(BeamSpec(kv=float(rng.uniform(50.0, 125.0)), filters=filters))
        support = default_patient_support() if k % 3 == 0 else None
        out.append(BeamInputs.from_beam_result(result, patient_support=support))
    return out


def _geometry(rng: np.random.Generator, mm: Callable[[float, float], float]) -> GeometryInputs:
    """One exposure's geometry: DX/CR, a dose report, fluoroscopy, little recorded, impossible."""
    kind = rng.random()
    ref = mm(600.0, 800.0) if rng.random() < 0.3 else None
    if kind < 0.45:  # DX/CR: SID, thickness, collimated field
        g = GeometryInputs(
            sid_mm=float(rng.choice([1000.0, 1150.0, 1800.0])),
            body_part_thickness_mm=mm(80.0, 320.0) if rng.random() < 0.7 else None,
            field_width_mm=mm(80.0, 430.0),
            field_height_mm=mm(80.0, 430.0),
            exam=str(rng.choice(["chest_pa", "abdomen_ap", "generic_adult"])),
            source_to_reference_point_mm=ref,
        )
    elif kind < 0.65:  # a dose report: entrance distance and field area
        g = GeometryInputs(
            source_to_entrance_mm=mm(500.0, 900.0),
            field_area_cm2=mm(50.0, 1500.0),
            field_area_plane_mm=mm(900.0, 1200.0),
            source_to_reference_point_mm=ref,
        )
    elif kind < 0.8:  # fluoroscopy: isocentre, reference point
        g = GeometryInputs(
            source_to_isocenter_mm=mm(700.0, 800.0),
            sid_mm=mm(900.0, 1200.0),
            body_part_thickness_mm=mm(150.0, 300.0),
            field_width_mm=mm(100.0, 300.0),
            field_height_mm=mm(100.0, 300.0),
            source_to_reference_point_mm=mm(600.0, 700.0),
        )
    elif kind < 0.97:  # little recorded: exam defaults, detector or collimator edges
        g = GeometryInputs(
            sid_mm=mm(1000.0, 1800.0) if rng.random() < 0.5 else None,
            detector_dimensions_mm=(430.0, 430.0) if rng.random() < 0.3 else None,
            collimator_edges_px=(0.0, mm(800.0, 2800.0), 0.0, mm(800.0, 2800.0)),
            imager_pixel_spacing_mm=(0.148, 0.148),
            exam=str(rng.choice(["chest_pa", "abdomen_ap", "generic_adult"])),
        )
    else:  # impossible: thicker than the distance to the receptor
        g = GeometryInputs(sid_mm=mm(1000.0, 1100.0), body_part_thickness_mm=mm(1200.0, 1500.0))
    return g


def make_exposures(
    n: int, rng: np.random.Generator
) -> tuple[list[BeamInputs], list[float], list[GeometryInputs]]:
    """Varied beams, mAs and geometries of radiography, fluoroscopy and a few bad records.

    Half the beams are the beam model's (N_MODEL_BEAMS of them, shared, with their spectra's
    backscatter curves); the other half are given as bare numbers (B by HVL), every one its own.
    """
    beams: list[BeamInputs] = []
    geometries: list[GeometryInputs] = []
    pool = model_beams(N_MODEL_BEAMS, rng)

    def mm(low: float, high: float) -> float:
        return float(rng.uniform(low, high))

    for _ in range(n):
        if rng.random() < 0.5:
            beams.append(pool[int(rng.integers(0, N_MODEL_BEAMS))])
            geometries.append(_geometry(rng, mm))
            continue
        kv = float(rng.uniform(50.0, 125.0))
        output = float(rng.uniform(20.0, 120.0))
        hvl = float(
            rng.choice([rng.uniform(1.5, 8.0), rng.uniform(8.0, 11.0), 0.6], p=[0.9, 0.07, 0.03])
        )
        beams.append(
            BeamInputs(
                kvp_kv=kv,
                output_ugy_per_mas_1m=output,
                output_standard_uncertainty_ugy_per_mas_1m=output * float(rng.uniform(0.05, 0.15)),
                hvl1_mm_al=hvl,
                hvl1_standard_uncertainty_mm_al=float(rng.uniform(0.0, 0.4)),
                tissue_to_air_ratio=float(rng.uniform(1.04, 1.08)),
                calibrated=bool(rng.random() < 0.3),
            )
        )
        geometries.append(_geometry(rng, mm))
    mas = [float(x) for x in rng.uniform(0.5, 100.0, n)]
    for i in rng.choice(n, size=n // 200, replace=False):
        mas[int(i)] = 0.0  # a few records without exposure
    return beams, mas, geometries


def worst_disagreement(
    beams: list[BeamInputs],
    mas: list[float],
    geometries: list[GeometryInputs],
    bulk: BulkDose,
) -> tuple[float, int, int]:
    """(worst relative difference, error messages that differ, errors) over every exposure."""
    worst, wrong_errors, n_errors = 0.0, 0, 0
    for i, (b, m, g) in enumerate(zip(beams, mas, geometries, strict=True)):
        try:
            one = dose_from_beam(b, exposure_mas=m, geometry=g)
        except ModelError as exc:
            n_errors += 1
            wrong_errors += bulk.errors[i] != str(exc)
            continue
        wrong_errors += bulk.errors[i] is not None
        for attr, value_name, u_name in FIGURES:
            figure = getattr(one, attr)
            for name, want in (
                (value_name, None if figure is None else figure.value),
                (u_name, None if figure is None else figure.standard_uncertainty),
            ):
                got = float(getattr(bulk, name)[i])
                if want is None:
                    worst = worst if math.isnan(got) else math.inf
                elif want != got:
                    worst = max(worst, abs(got - want) / abs(want) if want else math.inf)
    return worst, wrong_errors, n_errors


def run_loop(beams: list[BeamInputs], mas: list[float], geometries: list[GeometryInputs]) -> None:
    for b, m, g in zip(beams, mas, geometries, strict=True):
        with contextlib.suppress(ModelError):
            dose_from_beam(b, exposure_mas=m, geometry=g)


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=(__doc__ or "").splitlines()[0])
    parser.add_argument("--exposures", type=int, default=N_EXPOSURES, help="bulk run size")
    n = max(parser.parse_args(argv).exposures, N_EXPOSURES)
    rng = np.random.default_rng(SEED)
    beams, mas, geometries = make_exposures(n, rng)
    # warm the defaults and table caches (read once per process), for both ways alike
    dose_from_beams(beams[:50], exposure_mas=mas[:50], geometries=geometries[:50])
    run_loop(beams[:50], mas[:50], geometries[:50])

    start = time.perf_counter()
    bulk = dose_from_beams(beams, exposure_mas=mas, geometries=geometries)
    bulk_s = time.perf_counter() - start
    start = time.perf_counter()
    run_loop(beams[:N_EXPOSURES], mas[:N_EXPOSURES], geometries[:N_EXPOSURES])
    loop_s = (time.perf_counter() - start) * n / N_EXPOSURES  # per exposure, as if for all n
    worst, wrong_errors, n_errors = worst_disagreement(
        beams[:N_CHECKED], mas[:N_CHECKED], geometries[:N_CHECKED], bulk
    )

    pool = make_exposures(N_PROTOCOLS, np.random.default_rng(SEED + 1))[2]
    shared = [pool[int(k)] for k in rng.integers(0, N_PROTOCOLS, n)]
    start = time.perf_counter()
    dose_from_beams(beams, exposure_mas=mas, geometries=shared)
    shared_s = time.perf_counter() - start

    ratio = loop_s / bulk_s
    print("bulk dose chain benchmark")
    print(f"  {n:,} exposures, every geometry different")
    print(
        f"  dose_from_beam loop: {loop_s / n * 1e6:.0f} us per exposure (timed on the first "
        f"{N_EXPOSURES:,})"
    )
    print(f"  dose_from_beams:     {bulk_s:.3f} s, {bulk_s / n * 1e6:.1f} us per exposure")
    print(f"  speed ratio bulk / loop: 1 : {ratio:.1f} (target at least 1 : {TARGET_RATIO:g})")
    print(
        f"  first {N_CHECKED:,} checked against dose_from_beam ({n_errors} refused: impossible "
        f"geometry, no mAs): worst relative difference {worst:.1e} (target < "
        f"{TARGET_AGREEMENT:g}), error messages that differ: {wrong_errors}"
    )
    print(
        f"  for information, the same exposures sharing {N_PROTOCOLS} geometries: "
        f"{shared_s / n * 1e6:.1f} us per exposure, 1 : {loop_s / shared_s:.1f} "
        "against the loop above"
    )
    ok = ratio >= TARGET_RATIO and worst < TARGET_AGREEMENT and wrong_errors == 0
    print("  result:", "PASS" if ok else "FAIL")
    return 0 if ok else 1


if __name__ == "__main__":
    raise SystemExit(main())
