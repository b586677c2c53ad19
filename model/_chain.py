"""The one dose chain of beamaudit, on arrays: what every projection exposure's figures come from.

Private. :func:`beamaudit.model.dose_from_beams` (many exposures, no trails) and
:func:`beamaudit.model.dose_from_beam` (one exposure, with its why trail) both compute their
numbers here, with the same checks in the same order, so their figures and error messages are
one and the same by construction. The why trail of one exposure is written afterwards from the
numbers computed here (:mod:`beamaudit.model.exposure`).

With :math:`Y` the tube output at :math:`d_0` = 1 m, :math:`P_{It}` the mAs, :math:`d_{FSD}` the
focus-to-skin distance, :math:`A(d)` the field at the plane :math:`d`, :math:`B` the backscatter
factor and :math:`\\overline{(\\mu_{en}/\\rho)}_{t,a}` the spectrum-averaged tissue/air ratio:

- incident air kerma (inverse-square law, IAEA TRS 457, 2007, §7):
  :math:`K_{a,i} = Y\\,P_{It}\\,(d_0/d_{FSD})^2`;
- air kerma-area product (ICRU Report 74, 2005): :math:`P_{KA} = K(d)\\,A(d)\\,f` with
  :math:`K(d) = Y\\,P_{It}\\,(d_0/d)^2` on the axis and :math:`f` the field's mean kerma over its
  axis kerma (off-axis inverse-square law, :func:`beamaudit.model.dose.off_axis_factor`);
- entrance surface air kerma :math:`K_{a,e} = K_{a,i}\\,B` (ICRU 74; IAEA TRS 457);
- entrance surface dose :math:`D = K_{a,e}\\,\\overline{(\\mu_{en}/\\rho)}_{t,a}`
  (IAEA TRS 457 §7);
- air kerma at the reference point :math:`K_{a,r} = Y\\,P_{It}\\,(d_0/d_{ref})^2`
  (reference point per IEC 60601-2-43), where its distance is known.

Uncertainty: each figure is a product of powers of its inputs, so its relative standard
uncertainty is (first order, uncorrelated inputs; JCGM 100:2008 "GUM" eq. 12)

.. math::

    \\frac{u(y)}{y} = \\sqrt{\\sum_i \\left(p_i\\,\\frac{u(x_i)}{x_i}\\right)^2}

with exponent -2 for a distance. Every figure is an estimate for quality assurance and
optimisation, not a patient's measured dose.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass
from operator import attrgetter
from typing import Any

import numpy as np
from numpy.typing import NDArray

from beamaudit.model.backscatter_kernels import BackscatterValues, backscatter_from_curves
from beamaudit.model.defaults import dose_default
from beamaudit.model.dose import REFERENCE_DISTANCE_MM, off_axis_factor
from beamaudit.model.errors import ModelError

__all__ = ["ChainFigures", "Curves", "Failures", "collect_curves", "run_chain"]

_MGY_PER_UGY = 1.0e-3  # µGy to mGy
_GY_PER_MGY = 1.0e-3  # mGy·cm² to Gy·cm²

Floats = NDArray[np.float64]

#: The numbers of a :class:`beamaudit.model.BeamInputs` the chain reads, in this order.
BEAM_NUMBERS = attrgetter(
    "kvp_kv",
    "output_ugy_per_mas_1m",
    "output_standard_uncertainty_ugy_per_mas_1m",
    "hvl1_mm_al",
    "hvl1_standard_uncertainty_mm_al",
    "tissue_to_air_ratio",
    "entrance_transmission",
    "entrance_transmission_standard_uncertainty",
)
#: Columns of :data:`BEAM_NUMBERS`.
N_BEAM_NUMBERS = 8
#: The numbers of a :class:`beamaudit.model.ResolvedGeometry` the chain reads, in this order.
GEOMETRY_NUMBERS = attrgetter(
    "fsd_mm",
    "fsd_standard_uncertainty_mm",
    "field_plane_mm",
    "field_plane_standard_uncertainty_mm",
    "field_area_at_plane_cm2",
    "field_area_relative_uncertainty",
    "entrance_field_side_cm",
    "entrance_field_side_standard_uncertainty_cm",
    "field_width_at_plane_cm",
    "field_height_at_plane_cm",
)
#: Columns of :data:`GEOMETRY_NUMBERS` (a side not known is NaN).
N_GEOMETRY_NUMBERS = 10


class Failures:
    """The error message of each exposure (None while it has none) and where none was met yet.

    The first error an exposure meets wins: later checks leave it alone.
    """

    def __init__(self, n: int) -> None:
        self.errors: list[str | None] = [None] * n
        self.clean = np.ones(n, dtype=bool)

    def fail(self, bad: NDArray[np.bool_], message: Callable[[int], str]) -> None:
        """Give each still-clean exposure where ``bad`` holds its message."""
        hit = bad & self.clean
        for i in np.flatnonzero(hit):
            self.errors[i] = message(int(i))
        self.clean[hit] = False

    def fail_one(self, i: int, message: str) -> None:
        """Give exposure ``i`` its message (if it has none yet)."""
        if self.clean[i]:
            self.errors[i] = message
            self.clean[i] = False

    def untrailable(self, values: Floats, where: str) -> None:
        """The why trail refuses a number JSON cannot carry (the per-exposure trail stops there)."""
        self.fail(
            ~np.isfinite(values),
            lambda i: f"why trail: {where} is {float(values[i])}, which cannot be recorded",
        )

    def refused_relative(self, rel: Floats) -> None:
        """A relative uncertainty that GUM's combination refuses (negative or not finite)."""
        bad = np.asarray(~(np.isfinite(rel) & (rel >= 0)))
        self.fail(
            bad,
            lambda i: f"relative uncertainty must be zero or positive, not {float(rel[i])!r}",
        )


def check_mas(failures: Failures, mas: Floats, raw: Callable[[int], Any]) -> None:
    """mAs must be positive and finite (the message shows the value as it was passed)."""
    with np.errstate(invalid="ignore"):
        failures.fail(
            ~(np.isfinite(mas) & (mas > 0)),
            lambda i: f"exposure_mas must be a positive finite number of mAs, not {raw(i)!r}",
        )


def relative_uncertainty_of_product(*terms: tuple[Floats | float, float]) -> Floats:
    """Elementwise :func:`beamaudit.model.dose.relative_uncertainty_of_product` (GUM eq. 12).

    Summed in the same order as the scalar function, so the two agree to the last bit.
    """
    total: Floats | float = 0.0
    for rel, power in terms:
        total = total + (power * rel) ** 2
    return np.sqrt(np.asarray(total, dtype=np.float64))


@dataclass(frozen=True)
class Curves:
    """The backscatter curves of the beams and which one each exposure uses.

    ``values`` and ``statistical`` have shape (k, m): k distinct curves at the kernels' m field
    sides; ``rows`` (length n) gives each exposure's curve, or -1 for a beam without one (its B
    then comes from its HVL; see :mod:`beamaudit.model.backscatter_kernels`).
    """

    values: Floats
    statistical: Floats
    rows: NDArray[np.intp]


def collect_curves(beams: Sequence[Any]) -> tuple[Floats, Curves]:
    """The beams' :data:`BEAM_NUMBERS` (n, 8) and their backscatter curves, each distinct curve
    once (curves are shared objects: one per distinct beam)."""
    n = len(beams)
    index: dict[int, int] = {}
    distinct: list[Any] = []
    rows = np.full(n, -1, dtype=np.intp)
    numbers = np.array([BEAM_NUMBERS(b) for b in beams], dtype=np.float64).reshape(
        n, N_BEAM_NUMBERS
    )
    curves = [b.backscatter_curve for b in beams]
    for i in (i for i, c in enumerate(curves) if c is not None):
        curve = curves[i]
        k = index.get(id(curve))
        if k is None:
            k = index[id(curve)] = len(distinct)
            distinct.append(curve)
        rows[i] = k
    m = len(distinct[0].value) if distinct else 0
    if any(len(c.value) != m for c in distinct):
        raise ModelError("backscatter curves of different field sides in one call")
    values = np.array([c.value for c in distinct], dtype=np.float64).reshape(len(distinct), m)
    stat = np.array([c.statistical_uncertainty for c in distinct], dtype=np.float64).reshape(
        len(distinct), m
    )
    return numbers, Curves(values=values, statistical=stat, rows=rows)


@dataclass(frozen=True)
class ChainFigures:
    """Every number of the chain for n exposures (float64 arrays of length n).

    Values are computed everywhere; ``clean`` says where an exposure has figures at all,
    ``has_b`` where it has a backscatter factor (and so ESAK and entrance dose), ``has_ref``
    where its reference point's distance is known. ``*_rel`` are relative standard
    uncertainties, ``u_*`` absolute ones.
    """

    mas: Floats
    y: Floats
    y_rel: Floats
    hvl: Floats
    u_hvl: Floats
    ratio: Floats
    ratio_rel: float
    mas_rel: float
    t: Floats
    u_t: Floats
    fsd: Floats
    u_fsd: Floats
    plane: Floats
    area: Floats
    side: Floats
    u_side: Floats
    k_i: Floats
    k_i_rel: Floats
    k_plane: Floats
    off_axis: Floats
    dap: Floats
    dap_rel: Floats
    b: Floats
    u_b: Floats
    b_statistical: Floats
    b_above_fields: NDArray[np.bool_]
    b_below_fields: NDArray[np.bool_]
    b_above_hvls: NDArray[np.bool_]
    has_curve: NDArray[np.bool_]
    k_e: Floats
    k_e_rel: Floats
    d: Floats
    d_rel: Floats
    d_ref: Floats
    k_r: Floats
    k_r_rel: Floats
    has_b: NDArray[np.bool_]
    has_ref: NDArray[np.bool_]
    clean: NDArray[np.bool_]


def run_chain(
    failures: Failures,
    *,
    beam_numbers: Floats,
    mas: Floats,
    geometry_numbers: Floats,
    d_ref_raw: Sequence[Any],
    curves: Curves,
) -> ChainFigures:
    """The figures of n exposures whose mAs and geometry were checked (see ``failures``).

    Parameters
    ----------
    failures : Failures
        Where the mAs and geometry checks already failed; the checks here add to it, in the
        order the per-exposure trail meets them, so each exposure keeps the message of the first
        check it fails.
    beam_numbers : ndarray, shape (n, 8)
        :data:`BEAM_NUMBERS` of each exposure's beam.
    mas : ndarray, shape (n,)
        mAs.
    geometry_numbers : ndarray, shape (n, 10)
        :data:`GEOMETRY_NUMBERS` of each resolved geometry (NaN where it failed).
    d_ref_raw : sequence
        Each exposure's source-to-reference-point distance as given (None: not known).
    curves : Curves
        The beams' backscatter curves.
    """
    n = mas.shape[0]
    kvp, y, u_y, hvl, u_hvl, ratio, t, u_t = beam_numbers.reshape(n, N_BEAM_NUMBERS).T
    fsd, u_fsd, plane, u_plane, area, rel_area, side, u_side, width, height = (
        geometry_numbers.reshape(n, N_GEOMETRY_NUMBERS).T
    )
    has_ref = np.fromiter((d is not None for d in d_ref_raw), dtype=bool, count=n)
    d_ref = np.array([np.nan if d is None else d for d in d_ref_raw], dtype=np.float64)
    mas_rel = dose_default("reported_exposure_mas_relative_uncertainty").value
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        y_rel = _check_beam(failures, kvp, y, u_y, t, u_t)
        off_axis = _off_axis(area, width, height, plane)
        k_i, k_i_rel, k_plane, dap, dap_rel = _kerma_and_dap(
            failures, y=y, y_rel=y_rel, mas=mas, mas_rel=mas_rel, t=t, t_rel=u_t / t, geometry=(
                fsd, u_fsd, plane, u_plane, area, rel_area, off_axis
            )
        )  # fmt: skip
        bs = _backscatter(failures, hvl, u_hvl, side, u_side, curves)
        b, u_b, has_b = bs.value, bs.standard_uncertainty, np.isfinite(bs.value)
        k_e, k_e_rel, d, d_rel, ratio_rel = _entrance(
            failures, k_i=k_i, k_i_rel=k_i_rel, b=b, u_b=u_b, has_b=has_b, ratio=ratio
        )
        k_r, k_r_rel = _reference(
            failures, y=y, y_rel=y_rel, mas=mas, mas_rel=mas_rel, d_ref=d_ref,
            has_ref=has_ref, d_ref_raw=d_ref_raw,
        )  # fmt: skip
    return ChainFigures(
        mas=mas, y=y, y_rel=y_rel, hvl=hvl, u_hvl=u_hvl, ratio=ratio, ratio_rel=ratio_rel,
        mas_rel=mas_rel, t=t, u_t=u_t, fsd=fsd, u_fsd=u_fsd, plane=plane, area=area, side=side,
        u_side=u_side, k_i=k_i, k_i_rel=k_i_rel, k_plane=k_plane, off_axis=off_axis, dap=dap,
        dap_rel=dap_rel, b=b,
        u_b=u_b, b_statistical=bs.statistical, b_above_fields=bs.above_fields,
        b_below_fields=bs.below_fields, b_above_hvls=bs.above_hvls, has_curve=curves.rows >= 0,
        k_e=k_e, k_e_rel=k_e_rel, d=d, d_rel=d_rel, d_ref=d_ref, k_r=k_r, k_r_rel=k_r_rel,
        has_b=has_b, has_ref=has_ref, clean=failures.clean.copy(),
    )  # fmt: skip


def _check_beam(
    failures: Failures, kvp: Floats, y: Floats, u_y: Floats, t: Floats, u_t: Floats
) -> Floats:
    """The beam's own trail step, the tube output, the entrance transmission; returns u(Y)/Y."""
    failures.untrailable(kvp, "kvp_kv")
    failures.untrailable(y, "output_ugy_per_mas_1m")
    failures.untrailable(u_y, "output_ugy_per_mas_1m.inputs.standard_uncertainty")
    failures.fail(
        ~(y > 0),
        lambda i: f"output_ugy_per_mas_1m must be a positive finite number, not {float(y[i])!r}",
    )
    failures.fail(
        ~((t > 0) & (t <= 1)) | ~(u_t >= 0) | ~np.isfinite(u_t),
        lambda i: (
            f"entrance transmission must be in (0, 1] with a finite uncertainty, not "
            f"{float(t[i])!r} +- {float(u_t[i])!r}"
        ),
    )
    return np.asarray(u_y / y)


def _kerma_and_dap(
    failures: Failures,
    *,
    y: Floats,
    y_rel: Floats,
    mas: Floats,
    mas_rel: float,
    t: Floats,
    t_rel: Floats,
    geometry: tuple[Floats, Floats, Floats, Floats, Floats, Floats, Floats],
) -> tuple[Floats, Floats, Floats, Floats, Floats]:
    """Incident air kerma at the skin (inverse-square law, times the transmission of a table in
    the beam) and DAP at the field's plane (ICRU 74; free in air, on the tube side)."""
    fsd, u_fsd, plane, u_plane, area, rel_area, off_axis = geometry
    fsd_rel = u_fsd / fsd
    plane_rel = u_plane / plane
    k_i = y * mas * (REFERENCE_DISTANCE_MM / fsd) ** 2 * _MGY_PER_UGY * t
    failures.refused_relative(y_rel)
    failures.refused_relative(fsd_rel)
    k_i_rel = relative_uncertainty_of_product((y_rel, 1), (mas_rel, 1), (fsd_rel, -2), (t_rel, 1))
    failures.untrailable(k_i, "incident_air_kerma_mgy")
    k_plane = y * mas * (REFERENCE_DISTANCE_MM / plane) ** 2 * _MGY_PER_UGY
    failures.fail(
        ~np.isfinite(k_plane),
        lambda i: (
            f"air_kerma_mgy must be a zero or positive finite number, not {float(k_plane[i])!r}"
        ),
    )
    failures.fail(
        ~(np.isfinite(area) & (area > 0)),
        lambda i: f"field_area_cm2 must be a positive finite number, not {float(area[i])!r}",
    )
    dap = k_plane * area * off_axis * _GY_PER_MGY
    failures.refused_relative(rel_area)
    failures.refused_relative(plane_rel)
    dap_rel = relative_uncertainty_of_product(
        (y_rel, 1), (mas_rel, 1), (rel_area, 1), (plane_rel, -2)
    )
    failures.untrailable(dap, "dap_gy_cm2")
    return k_i, k_i_rel, k_plane, dap, dap_rel


def _off_axis(area: Floats, width: Floats, height: Floats, plane: Floats) -> Floats:
    """The field's mean kerma over its axis kerma (:func:`beamaudit.model.dose.off_axis_factor`);
    a field known only by its area is taken as the square of that area."""
    square = np.sqrt(area)
    sides_known = np.isfinite(width) & np.isfinite(height)
    w = np.where(sides_known, width, square)
    h = np.where(sides_known, height, square)
    good = np.isfinite(w) & (w > 0) & np.isfinite(h) & (h > 0) & np.isfinite(plane) & (plane > 0)
    factor = off_axis_factor(
        field_width_cm=np.where(good, w, 1.0),
        field_height_cm=np.where(good, h, 1.0),
        distance_mm=np.where(good, plane, 1000.0),
    )
    return np.where(good, factor, 1.0)


def _backscatter(
    failures: Failures,
    hvl: Floats,
    u_hvl: Floats,
    side: Floats,
    u_side: Floats,
    curves: Curves,
) -> BackscatterValues:
    """B and u(B) where there is one (no factor is not an error)."""
    bs = backscatter_from_curves(
        curves=curves.values,
        curves_statistical=curves.statistical,
        rows=curves.rows,
        hvl_mm_al=np.where(failures.clean, hvl, np.nan),
        hvl_standard_uncertainty_mm_al=u_hvl,
        field_side_cm=side,
        field_side_standard_uncertainty_cm=u_side,
    )
    b, u_b = bs.value, bs.standard_uncertainty
    has_b = np.isfinite(b)
    # the checks of the factor's trail step, only where there is a factor
    failures.untrailable(np.where(has_b, u_hvl, 0.0), "hvl1_mm_al.inputs.standard_uncertainty")
    failures.untrailable(
        np.where(has_b, u_b, 0.0), "backscatter_factor.inputs.standard_uncertainty"
    )
    failures.fail(
        has_b & (b < 1.0),
        lambda i: f"backscatter_factor must be at least 1, not {float(b[i])!r}",
    )
    return bs


def _entrance(
    failures: Failures,
    *,
    k_i: Floats,
    k_i_rel: Floats,
    b: Floats,
    u_b: Floats,
    has_b: NDArray[np.bool_],
    ratio: Floats,
) -> tuple[Floats, Floats, Floats, Floats, float]:
    """K_a,e = K_a,i B and D = K_a,e (mu_en/rho)_t,a (ICRU 74; IAEA TRS 457 §7)."""
    ratio_rel = dose_default("tissue_to_air_ratio_relative_uncertainty").value
    b_rel = u_b / b
    failures.refused_relative(np.where(has_b, b_rel, 0.0))
    k_e = k_i * b
    k_e_rel = relative_uncertainty_of_product((k_i_rel, 1), (b_rel, 1))
    failures.untrailable(np.where(has_b, k_e, 0.0), "esak_mgy")
    failures.fail(
        has_b & ~(np.isfinite(ratio) & (ratio > 0)),
        lambda i: f"tissue_to_air_ratio must be a positive finite number, not {float(ratio[i])!r}",
    )
    d = k_e * ratio
    failures.untrailable(np.where(has_b, d, 0.0), "entrance_dose_mgy")
    d_rel = relative_uncertainty_of_product((k_e_rel, 1), (ratio_rel, 1))
    return k_e, k_e_rel, d, d_rel, ratio_rel


def _reference(
    failures: Failures,
    *,
    y: Floats,
    y_rel: Floats,
    mas: Floats,
    mas_rel: float,
    d_ref: Floats,
    has_ref: NDArray[np.bool_],
    d_ref_raw: Sequence[Any],
) -> tuple[Floats, Floats]:
    """K_a,r by the inverse-square law (the message shows the distance as given)."""
    failures.fail(
        has_ref & ~(np.isfinite(d_ref) & (d_ref > 0)),
        lambda i: f"source_to_reference_point_mm must be positive, not {d_ref_raw[i]!r}",
    )
    distance_rel = dose_default("recorded_distance_relative_uncertainty").value
    k_r = y * mas * (REFERENCE_DISTANCE_MM / d_ref) ** 2 * _MGY_PER_UGY
    k_r_rel = relative_uncertainty_of_product((y_rel, 1), (mas_rel, 1), (distance_rel, -2))
    failures.untrailable(np.where(has_ref, k_r, 0.0), "reference_point_air_kerma_mgy")
    return k_r, k_r_rel
