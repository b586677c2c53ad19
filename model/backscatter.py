"""Backscatter factors: from incident air kerma to entrance surface air kerma.

The entrance surface air kerma includes the photons scattered back out of the patient; the
backscatter factor is the ratio (ICRU Report 74; IAEA TRS 457, 2007)

.. math::

    B = \\frac{K_{a,e}}{K_{a,i}}

It depends on the beam quality, the field size at the entrance surface and the phantom
material, and hardly on the focus distance. **The dose chain takes B from beamaudit's own Monte
Carlo kernels weighted by each beam's spectrum** (:mod:`beamaudit.model.backscatter_kernels`);
this module keeps the tables indexed by first HVL and field side, and their bilinear
interpolation: ``"soft_tissue_mc"``, the kernels weighted by reference tungsten spectra (for a
beam known only by its HVL), and ``"water"``, the table shipped before, now a cross-check.

The ``"water"`` table (``data/backscatter_water.csv``) says in its header where it comes from
and how far it can be trusted: the cells were written **from memory** of the IPEM Report 88 table
(after Petoussi-Henss et al., Phys Med Biol 43:2237, 1998) and must be confirmed against the
original before B is relied on tighter than about 5 %. An independent Monte Carlo of the same
phantom (:mod:`beamaudit.model.montecarlo_backscatter`, rerun by
``benchmarks/backscatter_crosscheck.py``, results in ``data/backscatter_water_mc_check.csv``)
agrees with every cell within 4.3 % (mean 1.2 %; the 1.0 mm Al row 3-4 % above it), which is
consistent with that trust level but not a confirmation of the original. Soft tissue and water
differ by less than 1 % (Ma & Seuntjens, Phys Med Biol 44:131, 1999), so the water table serves
for soft tissue.

Between cells the factor is interpolated bilinearly in HVL (mm Al) and square-field side (cm).
A rectangular field a x b enters through its equivalent square, side :math:`2ab/(a+b)`
(Sterling, Perry & Katz, Br J Radiol 37:544, 1964, the area-over-perimeter rule of radiotherapy
scatter; here an assumption for surface backscatter, noted in every trail that uses it).
"""

from __future__ import annotations

import csv
import functools
from dataclasses import dataclass, field
from importlib import resources
from typing import Literal, NamedTuple

import numpy as np
from numpy.typing import ArrayLike, NDArray

from beamaudit.model.errors import ModelError

__all__ = [
    "BackscatterEstimate",
    "BackscatterEstimates",
    "BackscatterTable",
    "backscatter_estimate",
    "backscatter_estimates",
    "backscatter_factor",
    "equivalent_square_side_cm",
    "load_backscatter_table",
]

OutOfRange = Literal["raise", "nearest"]
#: Out-of-table policy of the elementwise :func:`backscatter_estimates`: the nearest edge (with the
#: extension term in the uncertainty), or NaN.
OutOfRangeElementwise = Literal["nearest", "nan"]

_DATA_PACKAGE = "beamaudit.model.data"
#: "water": the table written from memory (a cross-check now); "soft_tissue_mc": beamaudit's Monte
#: Carlo kernels by HVL (:mod:`beamaudit.model.backscatter_kernels`)
_TABLE_FILES = {
    "water": "backscatter_water.csv",
    "soft_tissue_mc": "backscatter_soft_tissue_by_hvl.csv",
}
#: Step for the numerical derivative of B in HVL (mm Al) and field side (cm), used to carry the
#: HVL and field-size uncertainties into B (first-order propagation, JCGM 100:2008 eq. 10).
_HVL_STEP_MM_AL = 0.05
_SIDE_STEP_CM = 0.25


@dataclass(frozen=True)
class BackscatterTable:
    """A backscatter-factor table, as shipped, with what its header says about it.

    Attributes
    ----------
    phantom : str
        Phantom material of the table (``"water"``).
    hvl_mm_al : ndarray, shape (n,)
        First HVL of each row, mm Al, increasing.
    field_side_cm : ndarray, shape (m,)
        Side of the square field of each column at the phantom surface, cm, increasing.
    factors : ndarray, shape (n, m)
        B for each row and column (read-only).
    cell_relative_standard_uncertainty : float
        Relative standard uncertainty the header assigns to each cell.
    metadata : dict of str to str
        Every ``# key: value`` line of the file header (title, original, where_found,
        confidence, phantom, validity, ...).
    """

    phantom: str
    hvl_mm_al: NDArray[np.float64]
    field_side_cm: NDArray[np.float64]
    factors: NDArray[np.float64]
    cell_relative_standard_uncertainty: float
    metadata: dict[str, str] = field(default_factory=dict)

    @property
    def source(self) -> str:
        """The original publication the table refers to, as its header names it."""
        return self.metadata.get("original", "")

    @property
    def citation(self) -> str:
        """A short citation of the original, for notes and trails."""
        return self.metadata.get("citation", self.source)

    @property
    def confidence(self) -> str:
        """The header's statement of confidence in the cells."""
        return self.metadata.get("confidence", "")


def _read_only(values: list[float]) -> NDArray[np.float64]:
    array = np.asarray(values, dtype=np.float64)
    array.setflags(write=False)
    return array


@functools.cache
def load_backscatter_table(phantom: str = "water") -> BackscatterTable:
    """Load the shipped backscatter table for ``phantom`` (read once, then cached).

    Parameters
    ----------
    phantom : str
        ``"water"`` (the only table shipped; use it for soft tissue, see the module docstring).

    Raises
    ------
    ModelError
        For a phantom with no table, or a table file that does not parse.
    """
    try:
        name = _TABLE_FILES[phantom]
    except KeyError:
        known = ", ".join(sorted(_TABLE_FILES))
        raise ModelError(f"no backscatter table for phantom {phantom!r} (known: {known})") from None
    text = resources.files(_DATA_PACKAGE).joinpath(name).read_text(encoding="utf-8")
    metadata: dict[str, str] = {}
    rows: list[list[str]] = []
    for line in text.splitlines():
        if line.startswith("#"):
            key, _, value = line[1:].partition(":")
            metadata[key.strip()] = value.strip()
        elif line.strip():
            rows.append(next(csv.reader([line])))
    header, body = rows[0], rows[1:]
    try:
        sides = [float(col.removeprefix("field_").split("x")[0]) for col in header[1:]]
        hvls = [float(row[0]) for row in body]
        cells = [[float(v) for v in row[1:]] for row in body]
        cell_u = float(metadata["cell_relative_standard_uncertainty"])
    except (ValueError, IndexError, KeyError) as exc:
        raise ModelError(f"backscatter table {name} does not parse: {exc}") from exc
    if any(len(row) != len(sides) for row in cells):
        raise ModelError(f"backscatter table {name}: ragged rows")
    factors = np.asarray(cells, dtype=np.float64)
    factors.setflags(write=False)
    return BackscatterTable(
        phantom=phantom,
        hvl_mm_al=_read_only(hvls),
        field_side_cm=_read_only(sides),
        factors=factors,
        cell_relative_standard_uncertainty=cell_u,
        metadata=metadata,
    )


def equivalent_square_side_cm(*, width_cm: ArrayLike, height_cm: ArrayLike) -> NDArray[np.float64]:
    """Side of the square field equivalent to a rectangular ``width_cm`` x ``height_cm`` field.

    .. math::

        s = \\frac{2ab}{a + b} = \\frac{4A}{P}

    (Sterling, Perry & Katz, Br J Radiol 37:544, 1964). For a square field ``s`` is its side.

    Raises
    ------
    ModelError
        If a side is not a positive finite number.
    """
    a = np.asarray(width_cm, dtype=np.float64)
    b = np.asarray(height_cm, dtype=np.float64)
    if not (np.all(np.isfinite(a)) and np.all(np.isfinite(b)) and np.all(a > 0) and np.all(b > 0)):
        raise ModelError("field sides must be positive finite numbers of cm")
    return np.asarray(2.0 * a * b / (a + b))


def _interpolate(
    table: BackscatterTable, hvl: NDArray[np.float64], side: NDArray[np.float64]
) -> NDArray[np.float64]:
    """Bilinear interpolation inside the grid (arguments already within range)."""
    hs, ss, f = table.hvl_mm_al, table.field_side_cm, table.factors
    i = np.clip(np.searchsorted(hs, hvl, side="right") - 1, 0, hs.size - 2)
    j = np.clip(np.searchsorted(ss, side, side="right") - 1, 0, ss.size - 2)
    th = (hvl - hs[i]) / (hs[i + 1] - hs[i])
    ts = (side - ss[j]) / (ss[j + 1] - ss[j])
    low = f[i, j] * (1 - ts) + f[i, j + 1] * ts
    high = f[i + 1, j] * (1 - ts) + f[i + 1, j + 1] * ts
    return np.asarray(low * (1 - th) + high * th)


def _check_range(
    table: BackscatterTable,
    hvl: NDArray[np.float64],
    side: NDArray[np.float64],
    out_of_range: OutOfRange,
) -> None:
    if not (np.all(np.isfinite(hvl)) and np.all(hvl > 0)):
        raise ModelError("HVL must be a positive finite number of mm Al")
    if not (np.all(np.isfinite(side)) and np.all(side > 0)):
        raise ModelError("field side must be a positive finite number of cm")
    h_lo, h_hi = float(table.hvl_mm_al[0]), float(table.hvl_mm_al[-1])
    s_lo, s_hi = float(table.field_side_cm[0]), float(table.field_side_cm[-1])
    if np.any(hvl < h_lo):
        raise ModelError(
            f"HVL {float(np.min(hvl)):.3g} mm Al is below the backscatter table "
            f"({h_lo:g}-{h_hi:g} mm Al); B falls steeply there (mammography beams) and is never "
            "extrapolated"
        )
    if out_of_range == "raise":
        if np.any(hvl > h_hi):
            raise ModelError(
                f"HVL {float(np.max(hvl)):.3g} mm Al is above the backscatter table "
                f"({h_lo:g}-{h_hi:g} mm Al)"
            )
        if np.any((side < s_lo) | (side > s_hi)):
            raise ModelError(
                f"field side {float(np.min(side) if np.any(side < s_lo) else np.max(side)):.3g} cm "
                f"is outside the backscatter table ({s_lo:g}-{s_hi:g} cm square fields)"
            )
    elif out_of_range != "nearest":
        raise ModelError(f"out_of_range must be 'raise' or 'nearest', not {out_of_range!r}")


def backscatter_factor(
    *,
    hvl_mm_al: ArrayLike,
    field_side_cm: ArrayLike,
    phantom: str = "water",
    out_of_range: OutOfRange = "raise",
) -> NDArray[np.float64]:
    """Backscatter factor B, interpolated in the shipped table (vectorised).

    .. math::

        B(h, s) = \\text{bilinear interpolation of } B_{ij} \\text{ in } (h_i, s_j)

    with :math:`h` the first HVL in mm Al and :math:`s` the side of the (equivalent) square field
    at the entrance surface in cm; table as described in the module docstring.

    Parameters
    ----------
    hvl_mm_al : array_like
        First half-value layer, mm Al.
    field_side_cm : array_like
        Side of the square (or equivalent square) field at the entrance surface, cm.
    phantom : str
        Table to use (``"water"``).
    out_of_range : {"raise", "nearest"}
        What to do with a field side outside the table, or an HVL above it: raise
        :class:`ModelError`, or take the nearest edge of the table. An HVL below the table always
        raises.

    Returns
    -------
    ndarray
        B, broadcast over the inputs (a 0-d array for scalar inputs).
    """
    table = load_backscatter_table(phantom)
    hvl, side = np.broadcast_arrays(
        np.asarray(hvl_mm_al, dtype=np.float64), np.asarray(field_side_cm, dtype=np.float64)
    )
    _check_range(table, hvl, side, out_of_range)
    hvl_c = np.clip(hvl, table.hvl_mm_al[0], table.hvl_mm_al[-1])
    side_c = np.clip(side, table.field_side_cm[0], table.field_side_cm[-1])
    return _interpolate(table, hvl_c, side_c)


def _linear_extension(
    table: BackscatterTable,
    hvl: NDArray[np.float64],
    side: NDArray[np.float64],
    h_c: NDArray[np.float64],
    s_c: NDArray[np.float64],
    value: NDArray[np.float64],
) -> NDArray[np.float64]:
    """B extended linearly beyond the table from its two edge rows/columns (elementwise).

    ``h_c``, ``s_c`` are the arguments clipped to the table and ``value`` B there; inside the
    table the result is ``value`` itself.
    """
    hs, ss = table.hvl_mm_al, table.field_side_cm
    # field side: slope of the first (below) or last (above) pair of columns
    k = np.where(side < ss[0], 0, ss.size - 2)
    b0 = _interpolate(table, h_c, ss[k])
    b1 = _interpolate(table, h_c, ss[k + 1])
    side_out = (side < ss[0]) | (side > ss[-1])
    side_term = np.where(side_out, (b1 - b0) / (ss[k + 1] - ss[k]) * (side - s_c), 0.0)
    # HVL above the table: slope of the last pair of rows (below it is never extended)
    c0 = _interpolate(table, np.full_like(h_c, hs[-2]), s_c)
    c1 = _interpolate(table, np.full_like(h_c, hs[-1]), s_c)
    hvl_term = np.where(hvl > hs[-1], (c1 - c0) / (hs[-1] - hs[-2]) * (hvl - h_c), 0.0)
    return np.asarray(value + side_term + hvl_term)


def _edge_notes(table: BackscatterTable, hvl: float, side: float) -> list[str]:
    """One sentence per table edge that stood in for a point outside the table."""
    hs, ss = table.hvl_mm_al, table.field_side_cm
    notes: list[str] = []
    if side < ss[0] or side > ss[-1]:
        s_c = min(max(side, ss[0]), ss[-1])
        notes.append(
            f"field side {side:.3g} cm at the entrance is outside the backscatter table "
            f"({ss[0]:g}-{ss[-1]:g} cm); B taken at the nearest edge ({s_c:g} cm)"
        )
    if hvl > hs[-1]:
        notes.append(
            f"HVL {hvl:.3g} mm Al is above the backscatter table ({hs[-1]:g} mm Al); B taken at "
            "the table's highest HVL"
        )
    return notes


def _estimate_kernel(
    table: BackscatterTable,
    hvl: NDArray[np.float64],
    side: NDArray[np.float64],
    u_hvl: NDArray[np.float64],
    u_side: NDArray[np.float64],
) -> tuple[NDArray[np.float64], NDArray[np.float64], NDArray[np.bool_]]:
    """(B, u(B), extrapolated) elementwise, for arguments already checked (see the callers).

    Points outside the table take the nearest edge, with the extension term in u(B).
    """
    hs, ss = table.hvl_mm_al, table.field_side_cm
    h_c = np.clip(hvl, hs[0], hs[-1])
    s_c = np.clip(side, ss[0], ss[-1])
    value = _interpolate(table, h_c, s_c)
    # local slopes: central differences of the interpolant, one-sided at the table's edges
    h_lo = np.maximum(h_c - _HVL_STEP_MM_AL, hs[0])
    h_hi = np.minimum(h_c + _HVL_STEP_MM_AL, hs[-1])
    db_dh = (_interpolate(table, h_hi, s_c) - _interpolate(table, h_lo, s_c)) / (h_hi - h_lo)
    s_lo = np.maximum(s_c - _SIDE_STEP_CM, ss[0])
    s_hi = np.minimum(s_c + _SIDE_STEP_CM, ss[-1])
    db_ds = (_interpolate(table, h_c, s_hi) - _interpolate(table, h_c, s_lo)) / (s_hi - s_lo)
    linear = _linear_extension(table, hvl, side, h_c, s_c, value)
    # a non-finite argument uncertainty gives a non-finite u(B) (0 · inf = NaN), without a warning
    with np.errstate(invalid="ignore", over="ignore"):
        variance = (
            (table.cell_relative_standard_uncertainty * value) ** 2
            + (db_dh * u_hvl) ** 2
            + (db_ds * u_side) ** 2
            + (value - linear) ** 2 / 3.0
        )
    extrapolated = (side < ss[0]) | (side > ss[-1]) | (hvl > hs[-1])
    return np.asarray(value), np.asarray(np.sqrt(variance)), np.asarray(extrapolated)


@dataclass(frozen=True)
class BackscatterEstimate:
    """A backscatter factor with its standard uncertainty and how it was obtained.

    Attributes
    ----------
    value : float
        B.
    standard_uncertainty : float
        Combined standard uncertainty of B (absolute, dimensionless).
    hvl_mm_al, field_side_cm : float
        The arguments it was evaluated at.
    extrapolated : bool
        True when the nearest table edge stood in for a point outside the table.
    notes : list of str
        One sentence per assumption made (the table's confidence; edge use).
    source : str
        The original publication of the table (as its header names it).
    """

    value: float
    standard_uncertainty: float
    hvl_mm_al: float
    field_side_cm: float
    extrapolated: bool
    notes: list[str]
    source: str


def backscatter_estimate(
    *,
    hvl_mm_al: float,
    field_side_cm: float,
    hvl_standard_uncertainty_mm_al: float = 0.0,
    field_side_standard_uncertainty_cm: float = 0.0,
    phantom: str = "water",
    out_of_range: OutOfRange = "raise",
) -> BackscatterEstimate:
    """B for one beam and field, with its standard uncertainty.

    The combined standard uncertainty adds in quadrature (first order, uncorrelated inputs,
    JCGM 100:2008 "GUM" eq. 10): the cell uncertainty the table header states, the HVL and
    field-side uncertainties carried through the local slope of the interpolant, and, when a
    point outside the table takes the edge value, the difference between the edge value and a
    linear extension of the table, as the half-width of a rectangular distribution:

    .. math::

        u^2(B) = (u_\\text{cell} B)^2 + \\left(\\frac{\\partial B}{\\partial h} u(h)\\right)^2
        + \\left(\\frac{\\partial B}{\\partial s} u(s)\\right)^2
        + \\frac{(B_\\text{edge} - B_\\text{linear})^2}{3}

    Parameters
    ----------
    hvl_mm_al, field_side_cm : float
        As for :func:`backscatter_factor`.
    hvl_standard_uncertainty_mm_al, field_side_standard_uncertainty_cm : float
        Standard uncertainties of those arguments (0 when unknown).
    phantom, out_of_range
        As for :func:`backscatter_factor`.

    Raises
    ------
    ModelError
        Out-of-range arguments (see :func:`backscatter_factor`), negative uncertainties.
    """
    if hvl_standard_uncertainty_mm_al < 0 or field_side_standard_uncertainty_cm < 0:
        raise ModelError("standard uncertainties must not be negative")
    table = load_backscatter_table(phantom)
    hvl = np.asarray(hvl_mm_al, dtype=np.float64)
    side = np.asarray(field_side_cm, dtype=np.float64)
    _check_range(table, hvl, side, out_of_range)
    value, u, _ = _estimate_kernel(
        table,
        hvl,
        side,
        np.asarray(hvl_standard_uncertainty_mm_al, dtype=np.float64),
        np.asarray(field_side_standard_uncertainty_cm, dtype=np.float64),
    )
    edge_notes = _edge_notes(table, float(hvl_mm_al), float(field_side_cm))
    notes = [
        f"backscatter factor from the {table.phantom}-phantom table of {table.citation}; "
        "cells written from memory, to be confirmed against the original (trust to about 5 %)",
        *edge_notes,
    ]
    return BackscatterEstimate(
        value=float(value),
        standard_uncertainty=float(u),
        hvl_mm_al=float(hvl_mm_al),
        field_side_cm=float(field_side_cm),
        extrapolated=bool(edge_notes),
        notes=notes,
        source=table.citation,
    )


class BackscatterEstimates(NamedTuple):
    """Backscatter factors of many beams and fields, as float64/bool arrays of one shape.

    ``value`` and ``standard_uncertainty`` are NaN where no factor exists (see
    :func:`backscatter_estimates`); ``extrapolated`` is True where the nearest table edge stood in
    for a point outside the table.
    """

    value: NDArray[np.float64]
    standard_uncertainty: NDArray[np.float64]
    extrapolated: NDArray[np.bool_]


def backscatter_estimates(
    *,
    hvl_mm_al: ArrayLike,
    field_side_cm: ArrayLike,
    hvl_standard_uncertainty_mm_al: ArrayLike = 0.0,
    field_side_standard_uncertainty_cm: ArrayLike = 0.0,
    phantom: str = "water",
    out_of_range: OutOfRangeElementwise = "nearest",
) -> BackscatterEstimates:
    """B and its standard uncertainty for many beams and fields at once (elementwise).

    The same figures as :func:`backscatter_estimate` (one call of it per element gives the same
    value and uncertainty), without notes and without raising on a bad element:

    .. math::

        u^2(B) = (u_\\text{cell} B)^2 + \\left(\\frac{\\partial B}{\\partial h} u(h)\\right)^2
        + \\left(\\frac{\\partial B}{\\partial s} u(s)\\right)^2
        + \\frac{(B_\\text{edge} - B_\\text{linear})^2}{3}

    (bilinear interpolation in the shipped table, see the module docstring; first-order
    propagation, JCGM 100:2008 "GUM" eq. 10; the last term only outside the table, a rectangular
    distribution of half-width the edge-to-linear-extension difference).

    Parameters
    ----------
    hvl_mm_al, field_side_cm : array_like
        First HVL, mm Al, and side of the (equivalent) square field at the entrance, cm.
    hvl_standard_uncertainty_mm_al, field_side_standard_uncertainty_cm : array_like
        Their standard uncertainties (0 when unknown).
    phantom : str
        Table to use (``"water"``).
    out_of_range : {"nearest", "nan"}
        A field side outside the table, or an HVL above it: the nearest edge of the table (as
        ``backscatter_estimate(..., out_of_range="nearest")``), or NaN.

    Returns
    -------
    BackscatterEstimates
        ``(value, standard_uncertainty, extrapolated)`` broadcast over the inputs. NaN (and not
        extrapolated) where :func:`backscatter_estimate` raises: an HVL or field side that is not
        a positive finite number, an HVL below the table (never extrapolated), a negative
        uncertainty; and outside the table with ``out_of_range="nan"``. A NaN or infinite
        uncertainty of an argument gives a NaN or infinite ``standard_uncertainty``, as there.

    Raises
    ------
    ModelError
        Only for an unknown phantom or ``out_of_range`` policy (never for an element).

    Examples
    --------
    >>> est = backscatter_estimates(hvl_mm_al=[3.0, 0.4], field_side_cm=[20.0, 20.0])
    >>> est.value.round(3).tolist(), est.extrapolated.tolist()
    ([1.37, nan], [False, False])
    """
    if out_of_range not in ("nearest", "nan"):
        raise ModelError(f"out_of_range must be 'nearest' or 'nan', not {out_of_range!r}")
    table = load_backscatter_table(phantom)
    hvl, side, u_hvl, u_side = np.broadcast_arrays(
        *(
            np.asarray(a, dtype=np.float64)
            for a in (
                hvl_mm_al,
                field_side_cm,
                hvl_standard_uncertainty_mm_al,
                field_side_standard_uncertainty_cm,
            )
        )
    )
    hs, ss = table.hvl_mm_al, table.field_side_cm
    with np.errstate(invalid="ignore"):
        ok = (
            np.isfinite(hvl)
            & (hvl > 0)
            & np.isfinite(side)
            & (side > 0)
            & (hvl >= hs[0])
            & ~(u_hvl < 0)
            & ~(u_side < 0)
        )
        if out_of_range == "nan":
            ok &= (hvl <= hs[-1]) & (side >= ss[0]) & (side <= ss[-1])
    # evaluate at a harmless point where there is no estimate, then blank those out
    safe_hvl = np.where(ok, hvl, hs[0])
    safe_side = np.where(ok, side, ss[0])
    value, u, extrapolated = _estimate_kernel(
        table, safe_hvl, safe_side, np.where(ok, u_hvl, 0.0), np.where(ok, u_side, 0.0)
    )
    return BackscatterEstimates(
        value=np.where(ok, value, np.nan),
        standard_uncertainty=np.where(ok, u, np.nan),
        extrapolated=extrapolated & ok,
    )
