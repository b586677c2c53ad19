"""Compute the Dance method's monoenergetic coefficients with beamaudit's breast Monte Carlo.

Runs :func:`beamaudit.model.breast_montecarlo.simulate_glandular_dose` and writes two
self-describing tables into ``model/data/``:

* ``breast_dgn_mc.csv``: DgN(E) = D_G / K for the standard projection, photon energies 8-50 keV
  (1 keV steps), compressed thicknesses 20-110 mm (10 mm steps), glandularities 0.1, 10, 25,
  40, 50, 60, 75, 90 and 100 % (glandular mass fraction of the central region);
* ``breast_tomo_t_mc.csv``: the tomosynthesis t-factor t(E, T, theta) = DgN_theta / DgN_0 of
  one projection at tube angle theta (5-30 degrees, 5 degree steps) at 50 % glandularity,
  energies 10-50 keV (5 keV steps); t(-theta) = t(theta) by the model's symmetry.

It also runs the standard projection of a 50 mm, 50 % breast without the breast support and
records how much the support's backscatter adds, and the largest difference between the
track-length and the collision estimators in units of their combined uncertainty.

Run (two worker processes, low priority; the defaults reproduce the shipped files)::

    nice -n 10 .venv/bin/python benchmarks/breast_dgn_mc.py
    nice -n 10 .venv/bin/python benchmarks/breast_dgn_mc.py --photons 3000 --workers 1 \
        --output-dir /tmp/mc   # a quick look (minutes)

Not a ``bench_*`` script: ``make bench`` does not run it. Every figure is an estimate for
quality assurance and optimisation.
"""

from __future__ import annotations

import os

# one thread per process: keep numpy's BLAS single-threaded (set before numpy is imported)
for _var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_var, "1")

import argparse  # noqa: E402
import datetime  # noqa: E402
import multiprocessing  # noqa: E402
import platform  # noqa: E402
import sys  # noqa: E402
import time  # noqa: E402
from dataclasses import dataclass  # noqa: E402
from pathlib import Path  # noqa: E402

import numpy as np  # noqa: E402
import xraylib  # noqa: E402

import beamaudit  # noqa: E402
from beamaudit.model.breast_montecarlo import (  # noqa: E402
    BREAST_RADIUS_MM,
    ENERGY_CUTOFF_KEV,
    FOCUS_TO_SUPPORT_MM,
    ROULETTE_WEIGHT,
    SHELL_MM,
    SUPPORT_MM,
    BreastModel,
    GlandularDoseRun,
    simulate_glandular_dose,
)
from beamaudit.model.mammography import REFERENCE_POINT_FROM_CHEST_WALL_MM  # noqa: E402

ROOT = Path(__file__).resolve().parents[1]
DEFAULT_OUTPUT_DIR = ROOT / "model" / "data"
DGN_FILE = "breast_dgn_mc.csv"
TOMO_FILE = "breast_tomo_t_mc.csv"
DEFAULT_PHOTONS = 60_000
DEFAULT_TOMO_PHOTONS = 100_000
DEFAULT_SEED = 20261222

ENERGIES_KEV = tuple(float(e) for e in range(8, 51))
THICKNESSES_MM = tuple(float(t) for t in range(20, 111, 10))
GLANDULARITIES_PERCENT = (0.1, 10.0, 25.0, 40.0, 50.0, 60.0, 75.0, 90.0, 100.0)
TOMO_ENERGIES_KEV = tuple(float(e) for e in range(10, 51, 5))
TOMO_ANGLES_DEG = (5.0, 10.0, 15.0, 20.0, 25.0, 30.0)
TOMO_GLANDULARITY_PERCENT = 50.0


@dataclass(frozen=True)
class Task:
    """One Monte Carlo run: every energy of one breast at one tube angle."""

    kind: str  # "dgn", "tomo" or "no_support"
    thickness_mm: float
    glandularity_percent: float
    tube_angle_deg: float
    energies_kev: tuple[float, ...]
    photons: int
    seed: int


def tasks(photons: int, tomo_photons: int, seed: int) -> list[Task]:
    """Every run, each with its own seed (``seed`` + its position)."""
    out: list[Task] = []
    for t in THICKNESSES_MM:
        for g in GLANDULARITIES_PERCENT:
            out.append(Task("dgn", t, g, 0.0, ENERGIES_KEV, photons, 0))
    for t in THICKNESSES_MM:
        for a in TOMO_ANGLES_DEG:
            out.append(
                Task("tomo", t, TOMO_GLANDULARITY_PERCENT, a, TOMO_ENERGIES_KEV, tomo_photons, 0)
            )
    out.append(Task("no_support", 50.0, 50.0, 0.0, ENERGIES_KEV, photons, 0))
    return [
        Task(x.kind, x.thickness_mm, x.glandularity_percent, x.tube_angle_deg, x.energies_kev,
             x.photons, seed + i)
        for i, x in enumerate(out)
    ]  # fmt: skip


def run(task: Task) -> tuple[Task, GlandularDoseRun, float]:
    """Run one task (in a worker process); also its CPU seconds."""
    cpu = time.process_time()
    model = BreastModel(
        task.thickness_mm,
        task.glandularity_percent / 100.0,
        support_mm=0.0 if task.kind == "no_support" else SUPPORT_MM,
    )
    result = simulate_glandular_dose(
        task.energies_kev,
        model,
        photons_per_energy=task.photons,
        seed=task.seed,
        tube_angle_deg=task.tube_angle_deg,
    )
    return task, result, time.process_time() - cpu


def _header(lines: dict[str, str]) -> str:
    return "".join(f"# {k}: {v}\n" for k, v in lines.items())


def _common_header(args: argparse.Namespace, runtime: str) -> dict[str, str]:
    return {
        "breast_model": (
            f"Dance (1990) model: half cylinder of radius {BREAST_RADIUS_MM:g} mm (semicircular "
            f"cross-section), compressed thickness T; central region of glandular and adipose "
            f"tissue mixed by mass inside an adipose shell {SHELL_MM:g} mm thick above, below and "
            f"around the curved side (none at the chest wall); on a {SUPPORT_MM:g} mm carbon-"
            "fibre support (pure carbon, 1.6 g/cm3); receptor below not followed; paddle, air and "
            "body not modelled"
        ),
        "materials": (
            "Hammerstein et al., Radiology 130:485 (1979): adipose H 11.2, C 61.9, N 1.7, O 25.1 "
            "% (0.93 g/cm3), glandular H 10.2, C 18.4, N 3.2, O 67.7 % (1.04 g/cm3), remainder "
            "P, S, K, Ca equally (beamaudit model/data/materials.json); mixture density from "
            "additive volumes"
        ),
        "source": (
            f"point focus {FOCUS_TO_SUPPORT_MM:g} mm above the support over the middle of the "
            "chest-wall edge, photons uniform in the solid angle of the breast"
        ),
        "normalisation": (
            "K = incident air kerma free in air without backscatter at the reference point, in "
            f"the plane of the upper breast surface on the midline "
            f"{REFERENCE_POINT_FROM_CHEST_WALL_MM:g} mm from the chest wall, standard projection"
        ),
        "physics": (
            "xraylib cross-sections: photoabsorption (implicit capture, Russian roulette below "
            f"weight {ROULETTE_WEIGHT:g}), incoherent (Klein-Nishina x incoherent scattering "
            "function, no Doppler broadening), coherent (Thomson x form factor squared, "
            "independent atoms); tissue fluorescence absorbed locally; photons below "
            f"{ENERGY_CUTOFF_KEV:g} keV absorbed; kerma approximation; glandular dose from the "
            "track-length estimator of the fluence in the central region times E (mu_en/rho) of "
            "glandular tissue"
        ),
        "statistical_uncertainty": (
            "standard uncertainty (k = 1) of the mean from the spread of the per-history scores"
        ),
        "date": datetime.date.today().isoformat(),
        "software": (
            f"beamaudit {beamaudit.__version__}; python {platform.python_version()}; numpy "
            f"{np.__version__}; xraylib {xraylib.__version__}"
        ),
        "runtime": runtime,
        "rerun": "nice -n 10 .venv/bin/python benchmarks/breast_dgn_mc.py",
        "estimate": "every figure is an estimate for quality assurance and optimisation",
    }


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--photons", type=int, default=DEFAULT_PHOTONS)
    parser.add_argument("--tomo-photons", type=int, default=DEFAULT_TOMO_PHOTONS)
    parser.add_argument("--seed", type=int, default=DEFAULT_SEED)
    parser.add_argument("--workers", type=int, default=2)
    parser.add_argument("--output-dir", type=Path, default=DEFAULT_OUTPUT_DIR)
    args = parser.parse_args(argv)
    work = tasks(args.photons, args.tomo_photons, args.seed)
    started = time.perf_counter()
    results: dict[Task, GlandularDoseRun] = {}
    cpu_seconds = 0.0
    # the longest (thickest) runs first, so that the two workers finish together
    order = sorted(work, key=lambda x: -x.thickness_mm * len(x.energies_kev) * x.photons)
    with multiprocessing.get_context("spawn").Pool(args.workers) as pool:
        for done, (task, result, cpu) in enumerate(pool.imap_unordered(run, order), start=1):
            results[task] = result
            cpu_seconds += cpu
            print(
                f"[{done}/{len(work)}] {task.kind} T {task.thickness_mm:g} mm, "
                f"g {task.glandularity_percent:g} %, angle {task.tube_angle_deg:g}: "
                f"{result.seconds:.1f} s ({cpu:.1f} s CPU)",
                flush=True,
            )
    runtime = (
        f"{time.perf_counter() - started:.0f} s wall-clock with {args.workers} worker processes "
        f"at nice 10 on a shared machine; {cpu_seconds:.0f} CPU seconds in the workers"
    )
    args.output_dir.mkdir(parents=True, exist_ok=True)
    _write_dgn(args, results, runtime)
    _write_tomo(args, results, runtime)
    print(f"done: {runtime}; tables in {args.output_dir}")
    return 0


def _estimator_check(results: dict[Task, GlandularDoseRun]) -> str:
    worst = 0.0
    for task, r in results.items():
        if task.kind != "dgn":
            continue
        spread = np.hypot(r.dgn_uncertainty, r.dgn_collision_uncertainty)
        worst = max(worst, float(np.max(np.abs(r.dgn_collision - r.dgn) / spread)))
    cells = sum(len(t.energies_kev) for t in results if t.kind == "dgn")
    return (
        f"over the {cells} cells the collision estimator of the energy imparted differs from the "
        f"track-length estimator by at most {worst:.2f} combined standard uncertainties (about "
        "4 is expected of that many normal deviates)"
    )


def _support_check(results: dict[Task, GlandularDoseRun]) -> str:
    without = next(r for t, r in results.items() if t.kind == "no_support")
    with_support = next(
        r
        for t, r in results.items()
        if t.kind == "dgn" and t.thickness_mm == 50.0 and t.glandularity_percent == 50.0
    )
    ratio = with_support.dgn / without.dgn
    sel = np.isin(with_support.energies_kev, (15.0, 20.0, 30.0, 40.0, 50.0))
    shown = ", ".join(
        f"{e:g} keV {100 * (q - 1):+.1f} %"
        for e, q in zip(with_support.energies_kev[sel], ratio[sel], strict=True)
    )
    return f"50 mm, 50 % glandular breast: DgN with the support / without it - 1: {shown}"


def _write_dgn(
    args: argparse.Namespace, results: dict[Task, GlandularDoseRun], runtime: str
) -> None:
    header = {
        "title": (
            "Monoenergetic normalised glandular dose DgN(E) = D_G / K of the Dance breast model, "
            "standard projection, by beamaudit's Monte Carlo"
        ),
        "quantity": "dgn: mean glandular dose per incident air kerma, mGy/mGy; u_dgn its "
        "standard uncertainty",
        "columns": "energy_kev (photon energy, keV), thickness_mm (compressed breast, mm), "
        "glandularity_percent (glandular mass fraction of the central region, %), dgn, u_dgn",
        "validity": "photon energies 8-50 keV, thicknesses 20-110 mm, glandularities 0.1-100 %; "
        "interpolate within, never extrapolate",
        "method": "beamaudit.model.breast_montecarlo.simulate_glandular_dose",
        **_common_header(args, runtime),
        "photons_per_energy": str(args.photons),
        "seeds": f"{args.seed} + run index (numpy PCG64), one run per thickness and glandularity",
        "check_estimators": _estimator_check(results),
        "check_support": _support_check(results),
    }
    rows = []
    for (t, g), r in sorted(
        ((x.thickness_mm, x.glandularity_percent), r) for x, r in results.items() if x.kind == "dgn"
    ):
        for e, v, u in zip(r.energies_kev, r.dgn, r.dgn_uncertainty, strict=True):
            rows.append(f"{e:g},{t:g},{g:g},{v:.6g},{u:.3g}\n")
    path = args.output_dir / DGN_FILE
    path.write_text(
        _header(header) + "energy_kev,thickness_mm,glandularity_percent,dgn,u_dgn\n" + "".join(rows)
    )


def _write_tomo(
    args: argparse.Namespace, results: dict[Task, GlandularDoseRun], runtime: str
) -> None:
    standard = {
        x.thickness_mm: r
        for x, r in results.items()
        if x.kind == "dgn" and x.glandularity_percent == TOMO_GLANDULARITY_PERCENT
    }
    header = {
        "title": (
            "Tomosynthesis t-factor t(E, T, theta) = DgN_theta / DgN_0 of one projection at tube "
            "angle theta, Dance breast model, by beamaudit's Monte Carlo"
        ),
        "quantity": "t: glandular dose of a projection at tube angle theta over that of the "
        "standard projection with the same tube output (Dance et al., Phys Med Biol 56:453, 2011, "
        "t-factor); K of both is the standard projection's; u_t its standard uncertainty",
        "columns": "energy_kev, thickness_mm, tube_angle_deg, t, u_t",
        "validity": f"glandularity {TOMO_GLANDULARITY_PERCENT:g} %; energies 10-50 keV, "
        "thicknesses 20-110 mm, tube angles 0-30 degrees (t(-theta) = t(theta); t(0) = 1)",
        "geometry": "the focus turns about a pivot on the support surface under the middle of the "
        "chest-wall edge, in the chest-wall plane, at its standard-projection distance; photons "
        "uniform in a cone holding the whole breast",
        "method": "beamaudit.model.breast_montecarlo.simulate_glandular_dose(tube_angle_deg=...); "
        "DgN_0 from the 50 % glandular runs of breast_dgn_mc.csv",
        **_common_header(args, runtime),
        "photons_per_energy": f"{args.tomo_photons} per angle (DgN_0: {args.photons})",
        "seeds": f"{args.seed} + run index (numpy PCG64), one run per thickness and angle",
    }
    rows = []
    for (t, a), r in sorted(
        ((x.thickness_mm, x.tube_angle_deg), r) for x, r in results.items() if x.kind == "tomo"
    ):
        zero = standard[t]
        for e, v, u in zip(r.energies_kev, r.dgn, r.dgn_uncertainty, strict=True):
            i = int(np.flatnonzero(zero.energies_kev == e)[0])
            ratio = v / zero.dgn[i]
            u_ratio = ratio * float(np.hypot(u / v, zero.dgn_uncertainty[i] / zero.dgn[i]))
            rows.append(f"{e:g},{t:g},{a:g},{ratio:.5f},{u_ratio:.2g}\n")
    path = args.output_dir / TOMO_FILE
    path.write_text(
        _header(header) + "energy_kev,thickness_mm,tube_angle_deg,t,u_t\n" + "".join(rows)
    )


if __name__ == "__main__":
    sys.exit(main())
