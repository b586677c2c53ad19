"""Dose quantities of a projection exposure, as pure vectorised functions of plain numbers.

The chain from tube output to entrance dose (IAEA TRS 457, 2007, §7 and Appendix; ICRU
Report 74, 2005), with :math:`Y(d_0)` the tube output (air kerma per mAs, free in air, at
:math:`d_0` = 1 m from the focus) and :math:`P_{It}` the tube current-exposure time product:

- air kerma at distance :math:`d` (inverse-square law from a point focus, no attenuation in air):
  :math:`K(d) = Y(d_0)\\,P_{It}\\,(d_0/d)^2`;
- air kerma-area product: :math:`P_{KA} = K(d)\\,A(d)`, the same at every plane, since
  :math:`A(d) \\propto d^2` and :math:`K(d) \\propto d^{-2}`;
- incident air kerma, at the entrance surface without backscatter: :math:`K_{a,i} = K(d_{FSD})`;
- entrance surface air kerma: :math:`K_{a,e} = K_{a,i}\\,B`;
- entrance surface dose to tissue:
  :math:`D = K_{a,e}\\,\\overline{(\\mu_{en}/\\rho)}_{t,a}`, the ratio of mass energy-absorption
  coefficients of tissue to air averaged over the beam spectrum.

These functions do no lookups and know nothing of beams or exposures: the exposure-level
:func:`beamaudit.model.exposure.compute_exposure_dose` wires them to the beam model, the
geometry and the backscatter table. Inputs broadcast like numpy arrays; a non-positive or
non-finite input raises :class:`ModelError` (never silently clamped).

Uncertainties: every figure here is a product of powers of its inputs, so its relative standard
uncertainty is (first order, uncorrelated inputs; JCGM 100:2008 "GUM" eq. 12)

.. math::

    \\left(\\frac{u(y)}{y}\\right)^2 = \\sum_i \\left(p_i\\,\\frac{u(x_i)}{x_i}\\right)^2
    \\quad\\text{for}\\quad y = c \\prod_i x_i^{p_i}

which :func:`relative_uncertainty_of_product` computes.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike, NDArray

from beamaudit.model.errors import ModelError

__all__ = [
    "REFERENCE_DISTANCE_MM",
    "ReportedVsReconstructed",
    "air_kerma_at_distance_mgy",
    "compare_reported",
    "dap_gy_cm2",
    "entrance_surface_air_kerma_mgy",
    "entrance_surface_dose_mgy",
    "incident_air_kerma_mgy",
    "inverse_square_air_kerma_mgy",
    "off_axis_factor",
    "relative_uncertainty_of_product",
]

#: Distance at which tube output is stated (µGy/mAs at 1 m), mm.
REFERENCE_DISTANCE_MM = 1000.0
_MGY_PER_UGY = 1.0e-3
#: mGy·cm² to Gy·cm².
_GY_PER_MGY = 1.0e-3


def _positive(name: str, value: ArrayLike, *, allow_zero: bool = False) -> NDArray[np.float64]:
    array = np.asarray(value, dtype=np.float64)
    ok = np.isfinite(array) & ((array >= 0) if allow_zero else (array > 0))
    if not np.all(ok):
        bad = array[~ok] if array.ndim else array
        first = float(np.ravel(bad)[0])
        need = "zero or positive" if allow_zero else "positive"
        raise ModelError(f"{name} must be a {need} finite number, not {first!r}")
    return array


def air_kerma_at_distance_mgy(
    *, output_ugy_per_mas_1m: ArrayLike, exposure_mas: ArrayLike, distance_mm: ArrayLike
) -> NDArray[np.float64]:
    """Air kerma free in air at ``distance_mm`` from the focus (inverse-square law), mGy.

    .. math::

        K(d) = Y(d_0)\\,P_{It}\\left(\\frac{d_0}{d}\\right)^2, \\qquad d_0 = 1\\ \\text{m}

    (IAEA TRS 457 §7; attenuation and scatter in air neglected, as there.)

    Parameters
    ----------
    output_ugy_per_mas_1m : array_like
        Tube output Y at 1 m, µGy/mAs.
    exposure_mas : array_like
        Tube current-exposure time product, mAs (zero allowed: no exposure, no kerma).
    distance_mm : array_like
        Distance from the focus, mm.

    Examples
    --------
    >>> float(air_kerma_at_distance_mgy(output_ugy_per_mas_1m=50.0, exposure_mas=10.0,
    ...                                 distance_mm=500.0))
    2.0
    """
    y = _positive("output_ugy_per_mas_1m", output_ugy_per_mas_1m)
    p = _positive("exposure_mas", exposure_mas, allow_zero=True)
    d = _positive("distance_mm", distance_mm)
    return np.asarray(y * p * (REFERENCE_DISTANCE_MM / d) ** 2 * _MGY_PER_UGY)


def inverse_square_air_kerma_mgy(
    *, air_kerma_mgy: ArrayLike, from_distance_mm: ArrayLike, to_distance_mm: ArrayLike
) -> NDArray[np.float64]:
    """Air kerma moved from one distance from the focus to another (inverse-square law).

    .. math::

        K(d_2) = K(d_1) \\left(\\frac{d_1}{d_2}\\right)^2
    """
    k = _positive("air_kerma_mgy", air_kerma_mgy, allow_zero=True)
    d1 = _positive("from_distance_mm", from_distance_mm)
    d2 = _positive("to_distance_mm", to_distance_mm)
    return np.asarray(k * (d1 / d2) ** 2)


def dap_gy_cm2(*, air_kerma_mgy: ArrayLike, field_area_cm2: ArrayLike) -> NDArray[np.float64]:
    """Air kerma-area product from the air kerma and the field area at one plane, Gy·cm².

    .. math::

        P_{KA} = K(d)\\,A(d)

    with the air kerma taken as uniform over the field (no heel effect or penumbra; ICRU 74
    defines :math:`P_{KA}` as the integral of air kerma over the beam area). Because the field
    grows as :math:`d^2` and the kerma falls as :math:`d^{-2}`, the product is the same at every
    plane.

    Examples
    --------
    >>> float(dap_gy_cm2(air_kerma_mgy=1.0, field_area_cm2=1000.0))
    1.0
    """
    k = _positive("air_kerma_mgy", air_kerma_mgy, allow_zero=True)
    a = _positive("field_area_cm2", field_area_cm2)
    return np.asarray(k * a * _GY_PER_MGY)


#: Gauss-Legendre nodes for the off-axis integral: 8 reach machine precision for any field of up
#: to 60 x 60 cm at 65 cm (checked against adaptive quadrature in tests/model/test_dose.py)
_GAUSS_NODES, _GAUSS_WEIGHTS = np.polynomial.legendre.leggauss(8)
#: Fields evaluated together (keeps the temporaries of many fields within the caches).
_OFF_AXIS_BLOCK = 65_536


def off_axis_factor(
    *, field_width_cm: ArrayLike, field_height_cm: ArrayLike, distance_mm: ArrayLike
) -> NDArray[np.float64]:
    r"""Mean over a rectangular field of the air kerma, relative to the kerma on the axis.

    A point focus gives a point of the plane at distance :math:`d` and off-axis position
    :math:`(x, y)` the kerma :math:`K(d)\,d^2/(d^2 + x^2 + y^2)` (inverse-square law along the
    ray; air attenuation neglected), so the kerma-area product of a field :math:`2a \times 2b`
    centred on the axis is :math:`P_{KA} = K(d)\,A\,f` with (ICRU Report 74: :math:`P_{KA}` is
    the integral of the air kerma over the beam area)

    .. math::

        f = \frac{1}{ab}\int_0^a\!\!\int_0^b \frac{d^2}{d^2 + x^2 + y^2}\,dy\,dx
          = \frac{1}{ab}\int_0^a \frac{d^2}{\sqrt{d^2 + x^2}}
            \arctan\frac{b}{\sqrt{d^2 + x^2}}\,dx

    evaluated by 8-point Gauss-Legendre quadrature in :math:`x` (the same at every plane: it
    depends on :math:`a/d` and :math:`b/d` only). 35 x 43 cm at 1 m: f = 0.975. The heel effect
    is not included.

    Examples
    --------
    >>> round(float(off_axis_factor(field_width_cm=35.0, field_height_cm=43.0,
    ...                             distance_mm=1000.0)), 4)
    0.9753
    """
    w = np.asarray(field_width_cm, dtype=np.float64)
    h = np.asarray(field_height_cm, dtype=np.float64)
    d = np.asarray(distance_mm, dtype=np.float64) / 10.0
    a, b, d = (np.ravel(v) for v in np.broadcast_arrays(w / 2.0, h / 2.0, d))
    out = np.empty(a.shape)
    for start in range(0, a.size, _OFF_AXIS_BLOCK):
        part = slice(start, start + _OFF_AXIS_BLOCK)
        d2 = (d[part] ** 2)[:, None]
        x = a[part, None] * (_GAUSS_NODES + 1.0) / 2.0
        r = np.sqrt(d2 + x * x)
        out[part] = (d2 / r * np.arctan(b[part, None] / r)) @ _GAUSS_WEIGHTS / (2.0 * b[part])
    return out.reshape(np.broadcast_shapes(w.shape, h.shape, np.shape(distance_mm)))


def incident_air_kerma_mgy(
    *, output_ugy_per_mas_1m: ArrayLike, exposure_mas: ArrayLike, fsd_mm: ArrayLike
) -> NDArray[np.float64]:
    """Incident air kerma :math:`K_{a,i}`: air kerma on the axis at the entrance surface, mGy.

    .. math::

        K_{a,i} = Y(d_0)\\,P_{It}\\left(\\frac{d_0}{d_{FSD}}\\right)^2

    (IAEA TRS 457 §7; no backscatter, ICRU Report 74.)
    """
    return air_kerma_at_distance_mgy(
        output_ugy_per_mas_1m=output_ugy_per_mas_1m, exposure_mas=exposure_mas, distance_mm=fsd_mm
    )


def entrance_surface_air_kerma_mgy(
    *, incident_air_kerma_mgy: ArrayLike, backscatter_factor: ArrayLike
) -> NDArray[np.float64]:
    """Entrance surface air kerma :math:`K_{a,e} = K_{a,i} B`, mGy (ICRU 74; IAEA TRS 457).

    Raises
    ------
    ModelError
        If B is below 1 (backscatter can only add kerma) or not finite.
    """
    k = _positive("incident_air_kerma_mgy", incident_air_kerma_mgy, allow_zero=True)
    b = _positive("backscatter_factor", backscatter_factor)
    if np.any(b < 1.0):
        raise ModelError(f"backscatter_factor must be at least 1, not {float(np.min(b))!r}")
    return np.asarray(k * b)


def entrance_surface_dose_mgy(
    *, entrance_surface_air_kerma_mgy: ArrayLike, tissue_to_air_ratio: ArrayLike
) -> NDArray[np.float64]:
    """Entrance surface dose to tissue, mGy.

    .. math::

        D = K_{a,e}\\,\\overline{\\left(\\frac{\\mu_{en}}{\\rho}\\right)}_{\\text{tissue,air}}

    with the ratio of mass energy-absorption coefficients averaged over the beam's spectrum of
    energy fluence (IAEA TRS 457 §7; about 1.05-1.07 for ICRU soft tissue in diagnostic beams).
    """
    k = _positive("entrance_surface_air_kerma_mgy", entrance_surface_air_kerma_mgy, allow_zero=True)
    ratio = _positive("tissue_to_air_ratio", tissue_to_air_ratio)
    return np.asarray(k * ratio)


def relative_uncertainty_of_product(*terms: tuple[float, float]) -> float:
    """Relative standard uncertainty of a product of powers of uncorrelated inputs.

    Each term is ``(relative_standard_uncertainty, exponent)``:

    .. math::

        \\frac{u(y)}{y} = \\sqrt{\\sum_i \\left(p_i\\,\\frac{u(x_i)}{x_i}\\right)^2}

    (JCGM 100:2008 eq. 12.)

    Examples
    --------
    >>> round(relative_uncertainty_of_product((0.03, 1), (0.01, -2)), 4)
    0.0361
    """
    total = 0.0
    for rel, power in terms:
        if not (math.isfinite(rel) and rel >= 0):
            raise ModelError(f"relative uncertainty must be zero or positive, not {rel!r}")
        total += (power * rel) ** 2
    return math.sqrt(total)


@dataclass(frozen=True, slots=True)
class ReportedVsReconstructed:
    """A figure the device reported beside the one beamaudit reconstructed.

    ``ratio`` is reported over reconstructed (1 = agreement); ``ratio_standard_uncertainty``
    carries the reconstruction's relative uncertainty (the device's own is not known here).
    """

    quantity: str
    unit: str
    reported: float
    reconstructed: float
    ratio: float
    ratio_standard_uncertainty: float | None
    reported_source: str
    note: str | None = None

    def as_dict(self) -> dict[str, float | str | None]:
        """JSON-ready dict of the comparison."""
        return {
            "quantity": self.quantity,
            "unit": self.unit,
            "reported": self.reported,
            "reconstructed": self.reconstructed,
            "ratio": self.ratio,
            "ratio_standard_uncertainty": self.ratio_standard_uncertainty,
            "reported_source": self.reported_source,
            "note": self.note,
        }


def compare_reported(
    *,
    quantity: str,
    unit: str,
    reported: float,
    reconstructed: float,
    reconstructed_relative_uncertainty: float | None = None,
    reported_source: str = "reported by the device",
    note: str | None = None,
) -> ReportedVsReconstructed:
    """Keep a reported and a reconstructed value side by side, with their ratio.

    .. math::

        r = \\frac{X_\\text{reported}}{X_\\text{reconstructed}}, \\qquad
        \\frac{u(r)}{r} = \\frac{u(X_\\text{reconstructed})}{X_\\text{reconstructed}}

    Raises
    ------
    ModelError
        If either value is not a positive finite number (a ratio would mean nothing).
    """
    rep = float(_positive(f"reported {quantity}", reported))
    rec = float(_positive(f"reconstructed {quantity}", reconstructed))
    ratio = rep / rec
    u_ratio = None
    if reconstructed_relative_uncertainty is not None:
        u_ratio = ratio * relative_uncertainty_of_product((reconstructed_relative_uncertainty, 1))
    return ReportedVsReconstructed(
        quantity=quantity,
        unit=unit,
        reported=rep,
        reconstructed=rec,
        ratio=ratio,
        ratio_standard_uncertainty=u_ratio,
        reported_source=reported_source,
        note=note,
    )
