"""B by first HVL and field side, from the Monte Carlo kernels and reference tungsten spectra.

Derives ``model/data/backscatter_soft_tissue_by_hvl.csv`` from the soft-tissue kernels of
``model/data/backscatter_kernels.csv``: for each HVL row a tungsten beam (12 degrees, constant
potential, 1 m of air) at the row's tube voltage, its aluminium filtration solved so that the
beam model's first HVL equals the row's, weighted into the kernels
(:func:`beamaudit.model.backscatter_kernels.backscatter_curve`). The dose chain uses this table
only for a beam given as bare numbers (an HVL, no spectrum).

At a fixed HVL, B still depends on the spectrum's shape; each row is also computed for a lower
and a higher tube voltage and with the most copper filtration (0.1-0.3 mm) that reaches it, and
the largest relative
difference over the rows, as the half-width of a rectangular distribution, becomes the table's
``spectrum_shape_relative_standard_uncertainty``. Run by ``backscatter_kernels.py`` after the
kernels, or alone: ``.venv/bin/python benchmarks/backscatter_kernels.py --derive-only``.
"""

from __future__ import annotations

import datetime
import math
from pathlib import Path

import numpy as np

import beamaudit
from beamaudit.model import BeamResult, BeamSpec, FilterSpec, ModelError, compute_beam
from beamaudit.model.backscatter_kernels import (
    KERNEL_MATERIAL,
    BackscatterKernels,
    backscatter_curve,
    parse_backscatter_kernels,
)

#: tube voltage of the reference beam of each HVL row (mm Al -> kV), common practice pairs
#: (about 2.5 mm Al total filtration from 70 to 120 kV; mammography-like beams below 1 mm Al)
HVL_ROWS_KV = {0.3: 25.0, 0.4: 28.0, 0.5: 30.0, 0.75: 35.0, 1.0: 40.0, 1.5: 50.0, 2.0: 60.0,
               2.5: 70.0, 3.0: 80.0, 4.0: 100.0, 5.0: 120.0, 6.0: 140.0, 8.0: 150.0,
               10.0: 150.0, 12.0: 150.0}  # fmt: skip


def beam_with_hvl(
    hvl_mm_al: float, kv: float, base: tuple[FilterSpec, ...] = ()
) -> tuple[BeamResult, float] | None:
    """The beam at ``kv`` with ``base`` plus the aluminium that gives first HVL ``hvl_mm_al``.

    Bisection on the added aluminium (the HVL rises with it); None when 0-60 mm Al cannot.
    """

    def beam(al: float) -> BeamResult:
        layers = (*base, FilterSpec("Al", al)) if al > 0 else base or (FilterSpec("Al", 0.0),)
        return compute_beam(BeamSpec(kv=kv, filters=layers))

    lo, hi = 0.0, 60.0
    try:
        if not beam(lo).hvl1_mm_al <= hvl_mm_al <= beam(hi).hvl1_mm_al:
            return None
    except ModelError:
        return None
    while hi - lo > 1e-4:
        mid = 0.5 * (lo + hi)
        if beam(mid).hvl1_mm_al < hvl_mm_al:
            lo = mid
        else:
            hi = mid
    result = beam(0.5 * (lo + hi))
    return result, 0.5 * (lo + hi)


def _curve(result: BeamResult, kernels: BackscatterKernels) -> np.ndarray:
    curve = backscatter_curve(result.energies_kev, result.fluence_per_mas_1m, kernels=kernels)
    return np.asarray(curve.value)


def _variants(hvl: float, kv: float) -> list[tuple[str, float, tuple[FilterSpec, ...]]]:
    """Other beams of the same HVL: a lower and a higher tube voltage, and copper filtration."""
    out = [("lower_kv", max(20.0, round(kv * 0.8)), ()), ("higher_kv", min(150.0, kv * 1.25), ())]
    return [v for v in out if v[1] != kv]


def _copper_variant(hvl: float) -> tuple[str, BeamResult] | None:
    """The most copper-filtered beam of this HVL (0.3, 0.2, then 0.1 mm Cu, 50-150 kV)."""
    for cu in (0.3, 0.2, 0.1):
        for kv in range(50, 151, 10):
            found = beam_with_hvl(hvl, float(kv), (FilterSpec("Cu", cu),))
            if found is not None:
                return f"{cu:g} mm Cu at {kv} kV", found[0]
    return None


def derive_hvl_table(kernels_path: Path, output: Path) -> None:
    """Write the by-HVL table of the soft-tissue kernels in ``kernels_path`` to ``output``."""
    kernels = parse_backscatter_kernels(kernels_path.read_text("utf-8"), KERNEL_MATERIAL)
    rows, spectra, worst = [], [], (0.0, "")
    for hvl, kv in HVL_ROWS_KV.items():
        found = beam_with_hvl(hvl, kv)
        if found is None:
            raise ModelError(f"no reference beam of HVL {hvl} mm Al at {kv} kV")
        result, al = found
        b = _curve(result, kernels)
        rows.append((hvl, b))
        spectra.append(f"{hvl:g} mm Al: {kv:g} kV + {al:.3f} mm Al")
        others = [
            (f"{name} {kv_v:g} kV", found[0])
            for name, kv_v, base in _variants(hvl, kv)
            if (found := beam_with_hvl(hvl, kv_v, base)) is not None
        ]
        copper = _copper_variant(hvl)
        others += [copper] if copper is not None else []
        for name, other in others:
            dev = float(np.max(np.abs(_curve(other, kernels) / b - 1.0)))
            print(f"  HVL {hvl:5.2f} {name:22s}: max |B/B_ref - 1| {dev:.4f}")
            if dev > worst[0]:
                worst = (dev, f"HVL {hvl:g} mm Al, {name}")
    shape_u = math.ceil(worst[0] / math.sqrt(3.0) * 200.0) / 200.0  # rounded up to 0.005
    write_table(output, kernels, rows, spectra, shape_u, worst)


def write_table(
    output: Path,
    kernels: BackscatterKernels,
    rows: list[tuple[float, np.ndarray]],
    spectra: list[str],
    shape_u: float,
    worst: tuple[float, str],
) -> None:
    """The table in the layout of the other backscatter tables (``# key: value`` header)."""
    sides = kernels.field_side_cm
    meta = {
        "title": "Backscatter factors B for ICRU-44 soft tissue by first HVL and field side, "
        "from beamaudit's Monte Carlo kernels and reference tungsten spectra",
        "quantity": "backscatter_factor B = K_a,e / K_a,i, unit 1",
        "definition": "ICRU Report 74 (2005); IAEA TRS 457 (2007)",
        "original": "beamaudit Monte Carlo kernels (model/data/backscatter_kernels.csv, made "
        f"{kernels.metadata.get('date', '?')}) weighted by the incident air-kerma spectra of "
        "reference tungsten beams",
        "citation": "beamaudit Monte Carlo kernels by HVL (reference tungsten spectra)",
        "where_found": "computed by benchmarks/backscatter_by_hvl.py",
        "confidence": "computed; for a beam known only by its HVL: the shape of its spectrum is "
        "not known, see spectrum_shape_relative_standard_uncertainty",
        "phantom": kernels.metadata.get("geometry", ""),
        "spectra": "beamaudit.model.compute_beam, W anode 12 degrees, constant potential, 1 m "
        "air, aluminium solved for the row's first HVL: " + "; ".join(spectra),
        "rows": "hvl_mm_al = first half-value layer of the beam, mm Al",
        "columns": "field_NNxNN_cm = square field of side NN cm at the entrance surface",
        "validity": f"HVL {rows[0][0]:g} to {rows[-1][0]:g} mm Al; square fields "
        f"{sides[0]:g} to {sides[-1]:g} cm",
        "interpolation": "bilinear in HVL (mm Al) and field side (cm); rectangular fields "
        "through their equivalent square",
        "cell_relative_standard_uncertainty": kernels.metadata.get(
            "model_relative_standard_uncertainty", ""
        ),
        "spectrum_shape_relative_standard_uncertainty": f"{shape_u:g}",
        "spectrum_shape_basis": "largest relative change of B at a fixed HVL over a lower and a "
        "higher tube voltage and the most copper-filtered beam (0.1-0.3 mm Cu) of that HVL, "
        f"{worst[0]:.3f} "
        f"({worst[1]}), as the half-width of a rectangular distribution, rounded up",
        "date": datetime.date.today().isoformat(),
        "software": f"beamaudit {beamaudit.__version__}",
        "rerun": ".venv/bin/python benchmarks/backscatter_kernels.py --derive-only",
    }
    lines = [f"# {key}: {value}" for key, value in meta.items()]
    lines.append("hvl_mm_al," + ",".join(f"field_{s:g}x{s:g}_cm" for s in sides))
    lines += [f"{hvl:g}," + ",".join(f"{v:.4f}" for v in b) for hvl, b in rows]
    output.write_text("\n".join(lines) + "\n", encoding="utf-8")
    print(f"wrote {output} (spectrum shape u {shape_u:g}: {worst[1]})")
