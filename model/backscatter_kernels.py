r"""Backscatter factors from beamaudit's own Monte Carlo kernels, for the spectrum of any beam.

The backscatter factor (ICRU Report 74, 2005; IAEA TRS 457, 2007) is

.. math::

    B = \frac{K_{a,e}}{K_{a,i}} = 1 + \frac{K_s}{K_p}.

beamaudit computes it from **monoenergetic kernels** :math:`B(E, s)` made by its own photon
transport (:mod:`beamaudit.model.montecarlo_kernels`, run once by
``benchmarks/backscatter_kernels.py``) and shipped as package data
(``data/backscatter_kernels.csv``, whose header says how it was made): a 40 x 40 x 20 cm slab of
ICRU-44 soft tissue (or water), a point source at 100 cm, square fields of side :math:`s` =
2.5-40 cm, photon energies 10-150 keV, each cell with its statistical uncertainty.

Since scatter and primary kerma are both linear in the incident photons, the B of a beam is the
kernel weighted by that beam's **spectrum of incident air kerma** :math:`K_p(E)`:

.. math::

    B(s) = \sum_E w(E)\,B(E, s), \qquad
    w(E) = \frac{\Phi(E)\,E\,(\mu_{en}/\rho)_{air}(E)}{\sum_{E'} \Phi(E')\,E'\,
    (\mu_{en}/\rho)_{air}(E')}

with :math:`\Phi` the photon fluence per energy bin and :math:`B(E, s)` interpolated linearly in
:math:`E` between kernel energies (bins below 10 keV take the 10 keV kernel; their share of the
kerma is reported). A copper-filtered interventional beam and a mammography beam are covered by
the same physics as a radiographic one. :func:`backscatter_curve` does this for one beam;
:func:`backscatter_from_curves` evaluates many beams' curves at each exposure's field side.

Between field sides B is interpolated linearly; below the smallest kernel field (2.5 cm) it is
interpolated toward the pencil-beam limit :math:`B(0) = 1` (B - 1 grows linearly with a small
field; checked by the Monte Carlo tests); above the largest (40 cm) the edge value stands, with
half the difference to a linear extension as an extra uncertainty (rectangular distribution).
For a beam given only by its first HVL (no spectrum), B comes from
``data/backscatter_soft_tissue_by_hvl.csv``: the same kernels weighted by reference tungsten
spectra of each HVL, with an extra uncertainty for the spectrum shape the HVL does not fix.

Combined standard uncertainty (first order, uncorrelated; JCGM 100:2008 eq. 10):

.. math::

    u^2(B) = (u_{model} B)^2 + u_{stat}^2 + \left(\frac{\partial B}{\partial s} u(s)\right)^2
    + \left(\frac{\partial B}{\partial h} u(h)\right)^2 + \frac{\Delta_{ext}^2}{3}
    \;[+ (u_{shape} B)^2 \text{ by HVL}]

with :math:`u_{model}` the kernels' stated model uncertainty (header), :math:`u_{stat}` the
kernels' statistics carried through the weights, :math:`\partial B/\partial h` the slope of the
by-HVL table (the beam model's HVL uncertainty stands for its spectrum's).
"""

from __future__ import annotations

import functools
from dataclasses import dataclass, field
from importlib import resources
from typing import NamedTuple

import numpy as np
from numpy.typing import ArrayLike, NDArray

from beamaudit.model._datafile import parse_commented_csv
from beamaudit.model.attenuation import mass_energy_absorption_on
from beamaudit.model.backscatter import BackscatterTable, load_backscatter_table
from beamaudit.model.errors import ModelError

__all__ = [
    "BY_HVL_TABLE",
    "KERNEL_MATERIAL",
    "BackscatterCurve",
    "BackscatterKernels",
    "BackscatterValues",
    "backscatter_curve",
    "backscatter_from_curves",
    "load_backscatter_kernels",
    "parse_backscatter_kernels",
]

Floats = NDArray[np.float64]

_DATA_PACKAGE = "beamaudit.model.data"
_KERNEL_FILE = "backscatter_kernels.csv"
#: The kernel material the dose chain uses for patients (ICRU-44 soft tissue).
KERNEL_MATERIAL = "soft_tissue"
#: The :func:`beamaudit.model.backscatter.load_backscatter_table` key of the by-HVL table.
BY_HVL_TABLE = "soft_tissue_mc"


@dataclass(frozen=True)
class BackscatterKernels:
    """The shipped kernels of one material.

    Attributes
    ----------
    material : str
    energies_kev : ndarray, shape (n,)
        Kernel photon energies, increasing.
    field_side_cm : ndarray, shape (m,)
        Square field sides at the entrance surface, increasing.
    factors, statistical_uncertainty : ndarray, shape (n, m)
        B and its statistical standard uncertainty.
    model_relative_uncertainty : float
        Relative standard uncertainty beyond statistics, as the header states.
    metadata : dict of str to str
        The header (``# key: value`` lines).
    """

    material: str
    energies_kev: Floats
    field_side_cm: Floats
    factors: Floats
    statistical_uncertainty: Floats
    model_relative_uncertainty: float
    metadata: dict[str, str] = field(default_factory=dict)

    @property
    def source(self) -> str:
        """A short citation of the kernels, for notes and trails."""
        return (
            f"beamaudit Monte Carlo backscatter kernels, {self.material} slab "
            f"(model/data/{_KERNEL_FILE}, made {self.metadata.get('date', '?')})"
        )


@functools.cache
def load_backscatter_kernels(material: str = KERNEL_MATERIAL) -> BackscatterKernels:
    """The shipped kernels of ``material`` (``"soft_tissue"`` or ``"water"``), read once.

    Raises
    ------
    ModelError
        For a material without kernels, or a file that does not parse.
    """
    text = resources.files(_DATA_PACKAGE).joinpath(_KERNEL_FILE).read_text(encoding="utf-8")
    return parse_backscatter_kernels(text, material)


def parse_backscatter_kernels(text: str, material: str) -> BackscatterKernels:
    """The kernels of ``material`` from the text of a kernels file (as the shipped one).

    Raises
    ------
    ModelError
        For a material without kernels, or a file that does not parse.
    """
    meta, rows = parse_commented_csv(text)
    mine = [r for r in rows if r.get("material") == material]
    if not mine:
        known = ", ".join(sorted({r.get("material", "") for r in rows}))
        raise ModelError(f"no backscatter kernels for {material!r} (known: {known})")
    try:
        energies = sorted({float(r["energy_kev"]) for r in mine})
        sides = sorted({float(r["field_side_cm"]) for r in mine})
        b = np.full((len(energies), len(sides)), np.nan)
        u = np.full_like(b, np.nan)
        for r in mine:
            i = energies.index(float(r["energy_kev"]))
            j = sides.index(float(r["field_side_cm"]))
            b[i, j], u[i, j] = float(r["b"]), float(r["u_stat"])
        model_u = float(meta["model_relative_standard_uncertainty"])
    except (KeyError, ValueError) as exc:
        raise ModelError(f"backscatter kernels {_KERNEL_FILE} do not parse: {exc}") from exc
    if not np.all(np.isfinite(b)) or not np.all(np.isfinite(u)):
        raise ModelError(f"backscatter kernels {_KERNEL_FILE}: missing cells for {material}")
    for array in (b, u):
        array.setflags(write=False)
    return BackscatterKernels(
        material=material,
        energies_kev=_read_only(energies),
        field_side_cm=_read_only(sides),
        factors=b,
        statistical_uncertainty=u,
        model_relative_uncertainty=model_u,
        metadata=meta,
    )


def _read_only(values: list[float]) -> Floats:
    array = np.asarray(values, dtype=np.float64)
    array.setflags(write=False)
    return array


@dataclass(frozen=True)
class BackscatterCurve:
    """B of one beam against square field side, from its incident air-kerma spectrum.

    Attributes
    ----------
    material : str
        Kernel material.
    field_side_cm, value, statistical_uncertainty : tuple of float
        The kernels' field sides, B there and its statistical standard uncertainty.
    kerma_fraction_below_kernels : float
        Share of the incident air kerma in bins below the lowest kernel energy (they take the
        lowest kernel's B).
    """

    material: str
    field_side_cm: tuple[float, ...]
    value: tuple[float, ...]
    statistical_uncertainty: tuple[float, ...]
    kerma_fraction_below_kernels: float = 0.0


@functools.lru_cache(maxsize=16)
def _interpolation_matrix(
    energies: tuple[float, ...], kernel_energies: tuple[float, ...]
) -> Floats:
    """M with B(E_i) = sum_j M_ij B_j: linear interpolation in E, clamped at both ends."""
    grid = np.asarray(kernel_energies)
    return np.column_stack(
        [np.interp(np.asarray(energies), grid, np.eye(grid.size)[j]) for j in range(grid.size)]
    )


def backscatter_curve(
    energies_kev: ArrayLike,
    photon_fluence: ArrayLike,
    *,
    material: str = KERNEL_MATERIAL,
    kernels: BackscatterKernels | None = None,
) -> BackscatterCurve:
    """The kernels weighted by one beam's incident air-kerma spectrum (module docstring).

    Parameters
    ----------
    energies_kev, photon_fluence : array_like
        The beam's photon spectrum at the entrance surface: bin energies (keV) and photons per
        bin (any scale).
    material : str
        Kernel material (of the shipped kernels).
    kernels : BackscatterKernels, optional
        Other kernels than the shipped ones (``material`` is then theirs).

    Raises
    ------
    ModelError
        A spectrum that is not finite, negative, empty, or has energies above the kernels.
    """
    kernels = kernels or load_backscatter_kernels(material)
    e = np.asarray(energies_kev, dtype=np.float64)
    phi = np.asarray(photon_fluence, dtype=np.float64)
    if e.shape != phi.shape or e.ndim != 1 or e.size == 0:
        raise ModelError("energies and photon fluence must be 1-d arrays of the same length")
    if not (np.all(np.isfinite(phi)) and np.all(phi >= 0) and np.any(phi > 0)):
        raise ModelError("photon fluence must be finite, non-negative and not all zero")
    if np.any(e[phi > 0] > kernels.energies_kev[-1] + 1e-9) or np.any(e[phi > 0] <= 0):
        raise ModelError(
            f"photon energies must lie in 0-{kernels.energies_kev[-1]:g} keV for the kernels"
        )
    kerma = phi * e * mass_energy_absorption_on("air", e)
    w = kerma / kerma.sum()
    weights = w @ _interpolation_matrix(tuple(e.tolist()), tuple(kernels.energies_kev.tolist()))
    value = weights @ kernels.factors
    stat = np.sqrt((weights**2) @ kernels.statistical_uncertainty**2)
    below = float(w[e < kernels.energies_kev[0]].sum())
    return BackscatterCurve(
        material=kernels.material,
        field_side_cm=tuple(kernels.field_side_cm.tolist()),
        value=tuple(value.tolist()),
        statistical_uncertainty=tuple(stat.tolist()),
        kerma_fraction_below_kernels=below,
    )


class BackscatterValues(NamedTuple):
    """B of many exposures (float64/bool arrays of length n); NaN where there is none.

    ``statistical`` is the kernels' statistical part of ``standard_uncertainty``;
    ``above_fields`` marks a field side above the kernels (edge value used), ``below_fields``
    one below them (interpolated toward the pencil-beam limit), ``above_hvls`` an HVL above the
    by-HVL table (edge row used; only for beams without a curve).
    """

    value: Floats
    standard_uncertainty: Floats
    statistical: Floats
    above_fields: NDArray[np.bool_]
    below_fields: NDArray[np.bool_]
    above_hvls: NDArray[np.bool_]


def backscatter_from_curves(
    *,
    curves: Floats,
    curves_statistical: Floats,
    rows: NDArray[np.intp],
    hvl_mm_al: Floats,
    hvl_standard_uncertainty_mm_al: Floats,
    field_side_cm: Floats,
    field_side_standard_uncertainty_cm: Floats,
) -> BackscatterValues:
    """B and u(B) of n exposures at their entrance field sides (module docstring).

    Parameters
    ----------
    curves, curves_statistical : ndarray, shape (k, m)
        :class:`BackscatterCurve` values and statistical uncertainties of k beams, at the kernels'
        m field sides (k may be 0).
    rows : ndarray of int, shape (n,)
        The curve of each exposure, or -1: B by the exposure's HVL (no spectrum known).
    hvl_mm_al, hvl_standard_uncertainty_mm_al : ndarray, shape (n,)
        First HVL and its standard uncertainty (the slope term; the by-HVL look-up).
    field_side_cm, field_side_standard_uncertainty_cm : ndarray, shape (n,)
        Equivalent square field side at the entrance surface and its standard uncertainty.

    Returns
    -------
    BackscatterValues
        NaN where there is no B: a field side or HVL that is not a positive finite number, a
        negative uncertainty, or (without a curve) an HVL below the by-HVL table.
    """
    kernels = load_backscatter_kernels(KERNEL_MATERIAL)
    table = load_backscatter_table(BY_HVL_TABLE)
    sides = kernels.field_side_cm
    if not np.array_equal(table.field_side_cm, sides):
        raise ModelError("the by-HVL backscatter table and the kernels have other field sides")
    hvl, u_hvl, side, u_side = (
        np.asarray(a, dtype=np.float64)
        for a in (hvl_mm_al, hvl_standard_uncertainty_mm_al, field_side_cm,
                  field_side_standard_uncertainty_cm)
    )  # fmt: skip
    has_curve = rows >= 0
    hs = table.hvl_mm_al
    with np.errstate(invalid="ignore"):
        ok = (
            np.isfinite(side) & (side > 0) & np.isfinite(hvl) & (hvl > 0)
            & ~(u_hvl < 0) & ~(u_side < 0) & (has_curve | (hvl >= hs[0]))
        )  # fmt: skip
    side = np.where(ok, side, sides[0])
    hvl = np.where(ok, hvl, hs[0])
    u_hvl, u_side = np.where(ok, u_hvl, 0.0), np.where(ok, u_side, 0.0)
    columns = _Columns(table, curves, curves_statistical, rows, hvl)
    b, db_ds, ext, stat, db_dh = columns.at(sides, side)
    hvl_ext = np.where(~has_curve & (hvl > hs[-1]), db_dh * (hvl - hs[-1]), 0.0)
    shape_u = float(table.metadata.get("spectrum_shape_relative_standard_uncertainty", 0.0))
    with np.errstate(invalid="ignore", over="ignore"):
        variance = (
            (kernels.model_relative_uncertainty * b) ** 2
            + stat**2
            + (db_ds * u_side) ** 2
            + (db_dh * u_hvl) ** 2
            + (ext**2 + hvl_ext**2) / 3.0
            + np.where(has_curve, 0.0, (shape_u * b) ** 2)
        )
    b = b + hvl_ext
    return BackscatterValues(
        value=np.where(ok, b, np.nan),
        standard_uncertainty=np.where(ok, np.sqrt(variance), np.nan),
        statistical=np.where(ok, stat, np.nan),
        above_fields=ok & (side > sides[-1]),
        below_fields=ok & (side < sides[0]),
        above_hvls=ok & ~has_curve & (hvl > hs[-1]),
    )


class _Columns:
    """B of each exposure at one kernel field side (a column): from its beam's curve, or from
    the by-HVL table at its HVL (linear between rows); with B's statistical uncertainty and its
    slope in HVL (the table's, for every exposure)."""

    def __init__(
        self,
        table: BackscatterTable,
        curves: Floats,
        curves_statistical: Floats,
        rows: NDArray[np.intp],
        hvl: Floats,
    ) -> None:
        hs = table.hvl_mm_al
        h_c = np.clip(hvl, hs[0], hs[-1])
        self.i = np.clip(np.searchsorted(hs, h_c, side="right") - 1, 0, hs.size - 2)
        self.dh = hs[self.i + 1] - hs[self.i]
        self.th = (h_c - hs[self.i]) / self.dh
        self.f = table.factors
        self.has_curve = rows >= 0
        self.rows = np.where(self.has_curve, rows, 0)
        self.curves, self.curves_statistical = curves, curves_statistical

    def __call__(self, k: NDArray[np.intp]) -> tuple[Floats, Floats, Floats]:
        """(B, u_stat, dB/dh) at column ``k`` of each exposure."""
        low, high = self.f[self.i, k], self.f[self.i + 1, k]
        value = low * (1.0 - self.th) + high * self.th
        stat = np.zeros_like(value)
        if self.curves.shape[0]:
            value = np.where(self.has_curve, self.curves[self.rows, k], value)
            stat = np.where(self.has_curve, self.curves_statistical[self.rows, k], 0.0)
        return value, stat, (high - low) / self.dh

    def at(self, sides: Floats, side: Floats) -> tuple[Floats, Floats, Floats, Floats, Floats]:
        """At field side ``side``: B, dB/ds, the extension term beyond the last side (the linear
        extension minus the edge value, which is taken), u_stat and dB/dh.

        Linear between kernel sides; below the first side between 1 at side 0 (pencil-beam limit,
        no scatter and no uncertainty) and the first side.
        """
        s_c = np.clip(side, sides[0], sides[-1])
        j = np.clip(np.searchsorted(sides, s_c, side="right") - 1, 0, sides.size - 2)
        ds = sides[j + 1] - sides[j]
        ts = (s_c - sides[j]) / ds
        b0, u0, h0 = self(j)
        b1, u1, h1 = self(j + 1)
        value = b0 * (1.0 - ts) + b1 * ts
        stat = u0 * (1.0 - ts) + u1 * ts
        db_dh = h0 * (1.0 - ts) + h1 * ts
        slope = (b1 - b0) / ds
        below = side < sides[0]
        if np.any(below):
            first, u_first, h_first = self(np.zeros_like(j))
            fraction = side / sides[0]
            value = np.where(below, 1.0 + (first - 1.0) * fraction, value)
            stat = np.where(below, u_first * fraction, stat)
            db_dh = np.where(below, h_first * fraction, db_dh)
            slope = np.where(below, (first - 1.0) / sides[0], slope)
        above = side > sides[-1]
        ext = np.where(above, slope * (side - sides[-1]), 0.0)
        slope = np.where(above, 0.0, slope)
        return value, slope, ext, stat, db_dh
