"""Make the Monte Carlo backscatter kernels of the dose chain (model/data/backscatter_kernels.csv).

For each phantom material (liquid water and ICRU-44 soft tissue) and each photon energy of
:data:`beamaudit.model.montecarlo_kernels.KERNEL_ENERGIES_KEV` (10-150 keV) this runs
:func:`beamaudit.model.montecarlo_kernels.simulate_kernel`: a 40 x 40 x 20 cm slab, a point
source at 100 cm, square fields of 2.5 x 2.5 to 40 x 40 cm at the entrance surface, every field
from one run (stratified rings). It writes one CSV row per (material, energy, field) with B, its
statistical standard uncertainty and the estimated bias of the point estimator, under a header
that says how the file was made. Then it derives, from the soft-tissue kernels and reference
tungsten spectra, B by first HVL and field side (``model/data/backscatter_soft_tissue_by_hvl.csv``),
which the dose chain uses only for beams given as bare numbers (no spectrum).

Run (two worker processes by default, low priority; 1,000,000 histories per ring and energy)::

    nice -n 10 .venv/bin/python benchmarks/backscatter_kernels.py
    nice -n 10 .venv/bin/python benchmarks/backscatter_kernels.py --histories 20000 \
        --output /tmp/k.csv --no-derive                                  # a quick look
    .venv/bin/python benchmarks/backscatter_kernels.py --derive-only   # HVL table from the kernels

Seeded: the task of index i (materials, then energies, in the order above) uses seed
``--seed + i``, whatever the number of workers, so a rerun gives the same file. Every figure is
an estimate for quality assurance and optimisation.
"""

from __future__ import annotations

import os

# one thread per worker process (set before numpy is imported)
for _var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_var, "1")

import argparse  # noqa: E402
import datetime  # noqa: E402
import multiprocessing  # noqa: E402
import platform  # noqa: E402
import sys  # noqa: E402
import time  # noqa: E402
from pathlib import Path  # noqa: E402

import numpy as np  # noqa: E402
import xraylib  # noqa: E402

import beamaudit  # noqa: E402
from beamaudit.model.montecarlo_backscatter import DEFAULT_EXCLUSION_RADIUS_CM  # noqa: E402
from beamaudit.model.montecarlo_kernels import (  # noqa: E402
    KERNEL_ENERGIES_KEV,
    KERNEL_FSD_CM,
    KERNEL_PHANTOM_CM,
    KernelSimulation,
    simulate_kernel,
)

ROOT = Path(__file__).resolve().parents[1]
DATA = ROOT / "model" / "data"
DEFAULT_OUTPUT = DATA / "backscatter_kernels.csv"
DEFAULT_HVL_OUTPUT = DATA / "backscatter_soft_tissue_by_hvl.csv"
DEFAULT_HISTORIES = 1_000_000
DEFAULT_SEED = 20261205
MATERIALS = ("water", "soft_tissue")
#: The relative standard uncertainty the kernels' header assigns to B beyond statistics (physics
#: simplifications, cross-section data, a slab for a patient); basis in MODEL_UNCERTAINTY_BASIS.
MODEL_RELATIVE_UNCERTAINTY = 0.02
MODEL_UNCERTAINTY_BASIS = (
    "assumed, from the checks in tests/model/test_backscatter_kernels.py: the water kernels "
    "weighted by tungsten spectra agree with AAPM TG-61 Table V(b) (Ma et al, Med Phys 28:868, "
    "2001) within 1.7 percent (mean +0.4 percent) for HVL 0.3-8 mm Al and fields of 5-20 cm "
    "diameter at 100 cm; a patient is not a 40 x 40 x 20 cm slab (B changes by about 1 percent "
    "between 15 and 20 cm depth and with the phantom's width at large fields); the point "
    "estimator's exclusion bias is below 0.4 percent (column exclusion_bias)"
)


def tasks() -> list[tuple[int, str, float]]:
    """(index, material, energy) of every run, in the fixed order that sets the seeds."""
    out = []
    for material in MATERIALS:
        for energy in KERNEL_ENERGIES_KEV:
            out.append((len(out), material, energy))
    return out


def _run(job: tuple[int, str, float, int, int]) -> KernelSimulation:
    index, material, energy, histories, seed = job
    return simulate_kernel(
        energy, histories_per_ring=histories, seed=seed + index, material=material
    )


def run_kernels(args: argparse.Namespace) -> float:
    """Run every task on ``args.workers`` processes, write the kernels file; return wall seconds."""
    jobs = [(i, m, e, args.histories, args.seed) for i, m, e in tasks()]
    started = time.perf_counter()
    results: list[KernelSimulation] = []
    with multiprocessing.get_context("spawn").Pool(args.workers) as pool:
        for result in pool.imap(_run, jobs):
            results.append(result)
            print(
                f"{result.material:12s} {result.energy_kev:6.1f} keV  "
                f"B(10 cm) {result.backscatter_factor[3]:.4f} +- "
                f"{result.standard_uncertainty[3]:.4f}  B(40 cm) "
                f"{result.backscatter_factor[-1]:.4f}  {result.seconds:6.1f} s cpu",
                flush=True,
            )
    wall = time.perf_counter() - started
    cpu = sum(r.seconds for r in results)
    write_kernels(args.output, results, args, wall_s=wall, cpu_s=cpu)
    return wall


def write_kernels(
    path: Path,
    results: list[KernelSimulation],
    args: argparse.Namespace,
    *,
    wall_s: float,
    cpu_s: float,
) -> None:
    """'# key: value' header lines, then one CSV row per (material, energy, field)."""
    width, length, depth = KERNEL_PHANTOM_CM
    meta = {
        "title": "Monoenergetic backscatter kernels B(E, field) for a water and an ICRU-44 "
        "soft-tissue slab, diagnostic radiology",
        "quantity": "backscatter_factor B = K_a,e / K_a,i (air kerma at the centre of the "
        "entrance surface with and without the phantom), unit 1",
        "definition": "ICRU Report 74 (2005); IAEA TRS 457 (2007)",
        "use": "B of a beam = sum over energy of this kernel weighted by the beam's spectrum of "
        "incident air kerma (beamaudit.model.backscatter_kernels.backscatter_curve); linear in "
        "field side between columns",
        "method": "beamaudit.model.montecarlo_kernels.simulate_kernel, photon transport of "
        "beamaudit.model.montecarlo_backscatter: xraylib 4.3 cross-sections (photoelectric by "
        "implicit capture with Russian roulette, incoherent Klein-Nishina x xraylib S(x), "
        "coherent Thomson x F(x)^2, independent atoms, no Doppler broadening, no fluorescence "
        "transport, no air); scatter air kerma by a next-event point estimator (1/R^2 "
        f"volume-averaged within R0 = {DEFAULT_EXCLUSION_RADIUS_CM:g} cm), primary exact "
        "(inverse-square law), R0 the smaller of that and a quarter of the mean free path at the "
        "kernel energy (column r0_cm); air kerma = energy fluence x (mu_en/rho)_air of "
        "beamaudit.model.mass_energy_absorption_cm2_g",
        "geometry": f"slab {width:g} x {length:g} x {depth:g} cm, point source on the axis at "
        f"{KERNEL_FSD_CM:g} cm focus-to-surface distance, square fields at the entrance "
        "surface; all fields of one energy from one run, the field cut into a central square "
        "and square rings with the same number of histories each (stratified sampling)",
        "materials": "water = NIST 'Water, Liquid' (1.000 g/cm3); soft_tissue = ICRU Report 44 "
        "adult soft tissue (1.06 g/cm3), compositions in beamaudit model/data/materials.json",
        "histories_per_ring": str(args.histories),
        "seed": f"{args.seed} + task index (numpy PCG64); tasks in the order water, soft_tissue, "
        "each by increasing energy",
        "statistical_uncertainty": "u_stat = standard uncertainty of B from the spread of the "
        "history scores (k = 1, statistics only; rings independent)",
        "exclusion_bias": "(B(2 R0) - B(R0)) / 3: estimated bias of B from R0, not applied",
        "model_relative_standard_uncertainty": f"{MODEL_RELATIVE_UNCERTAINTY:g}",
        "model_relative_standard_uncertainty_basis": MODEL_UNCERTAINTY_BASIS,
        "validity": "photon energies 10-150 keV; square fields 2.5-40 cm at the entrance "
        "surface; soft-tissue or water patients of about 20 cm or more; not for bone or "
        "lung entrance surfaces",
        "date": datetime.date.today().isoformat(),
        "software": f"beamaudit {beamaudit.__version__}; python {platform.python_version()}; "
        f"numpy {np.__version__}; xraylib {xraylib.__version__}",
        "runtime_s": f"{wall_s:.0f} wall on {args.workers} worker processes ({cpu_s:.0f} cpu); "
        f"load average at the end {os.getloadavg()[0]:.1f} on {os.cpu_count()} cores",
        "rerun": "nice -n 10 .venv/bin/python benchmarks/backscatter_kernels.py",
        "estimate": "every figure is an estimate for QA and optimisation",
    }
    lines = [f"# {key}: {value}" for key, value in meta.items()]
    lines.append("material,energy_kev,field_side_cm,b,u_stat,exclusion_bias,r0_cm,histories,seed")
    for r in results:
        for j, side in enumerate(r.field_side_cm):
            lines.append(
                f"{r.material},{r.energy_kev:g},{side:g},{r.backscatter_factor[j]:.5f},"
                f"{r.standard_uncertainty[j]:.5f},{r.exclusion_bias[j]:.5f},{r.exclusion_radius_cm:.4f},"
                f"{r.histories_per_ring},{r.seed}"
            )
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    print(f"wrote {path}")


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=(__doc__ or "").splitlines()[0])
    parser.add_argument("--histories", type=int, default=DEFAULT_HISTORIES, help="per ring")
    parser.add_argument("--seed", type=int, default=DEFAULT_SEED, help="base seed")
    parser.add_argument("--workers", type=int, default=2, help="worker processes")
    parser.add_argument("--output", type=Path, default=DEFAULT_OUTPUT, help="kernels CSV")
    parser.add_argument("--hvl-output", type=Path, default=DEFAULT_HVL_OUTPUT, help="HVL table")
    parser.add_argument(
        "--derive-only", action="store_true", help="only the HVL table, from --output"
    )
    parser.add_argument("--no-derive", action="store_true", help="only the kernels")
    args = parser.parse_args(argv)
    if not args.derive_only:
        wall = run_kernels(args)
        print(f"kernels: {wall:.0f} s wall")
    if not args.no_derive:
        from backscatter_by_hvl import derive_hvl_table

        derive_hvl_table(args.output, args.hvl_output)
    return 0


if __name__ == "__main__":
    sys.exit(main())
