"""The dose chain of many stored exposures at once, as arrays, without why trails.

:func:`dose_from_beams` gives, for each of n exposures, the same figures as
:func:`beamaudit.model.exposure.dose_from_beam` (its value and standard uncertainty of every
figure), as float64 arrays of length n in a :class:`BulkDose`. It is for reconstructing many
stored exposures (ingest, re-reconstruction after a calibration change); the trail of any one
exposure is regenerated on demand with :func:`dose_from_beam`, which stays the reference.

Per exposure only the geometry is resolved in Python (:func:`resolve_geometry` with
``trail=False``: its order of preference and its checks, no trail kept); everything numeric is
vectorised over the arrays. With :math:`Y` the tube
output at :math:`d_0` = 1 m, :math:`P_{It}` the mAs, :math:`d_{FSD}` the focus-to-skin
distance, :math:`A(d)` the field at the plane :math:`d`, :math:`B` the backscatter factor and
:math:`\\overline{(\\mu_{en}/\\rho)}_{t,a}` the spectrum-averaged tissue/air ratio:

- incident air kerma (inverse-square law, IAEA TRS 457, 2007, §7):
  :math:`K_{a,i} = Y\\,P_{It}\\,(d_0/d_{FSD})^2`;
- air kerma-area product (ICRU Report 74, 2005): :math:`P_{KA} = K(d)\\,A(d)` with
  :math:`K(d) = Y\\,P_{It}\\,(d_0/d)^2`;
- entrance surface air kerma :math:`K_{a,e} = K_{a,i}\\,B` (ICRU 74; IAEA TRS 457), with B
  from :func:`beamaudit.model.backscatter.backscatter_estimates`;
- entrance surface dose :math:`D = K_{a,e}\\,\\overline{(\\mu_{en}/\\rho)}_{t,a}`
  (IAEA TRS 457 §7);
- air kerma at the reference point :math:`K_{a,r} = Y\\,P_{It}\\,(d_0/d_{ref})^2`
  (reference point per IEC 60601-2-43), where its distance is known.

Uncertainty: each figure is a product of powers of its inputs, so its relative standard
uncertainty is (first order, uncorrelated inputs; JCGM 100:2008 "GUM" eq. 12)

.. math::

    \\frac{u(y)}{y} = \\sqrt{\\sum_i \\left(p_i\\,\\frac{u(x_i)}{x_i}\\right)^2}

with the same inputs and exponents as :func:`dose_from_beam` (exponent -2 for a distance).
Every figure is an estimate for quality assurance and optimisation, not a patient's measured
dose.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass, fields
from operator import attrgetter
from typing import Any

import numpy as np
from numpy.typing import ArrayLike, NDArray

from beamaudit.model.backscatter import backscatter_estimates
from beamaudit.model.defaults import dose_default
from beamaudit.model.dose import REFERENCE_DISTANCE_MM
from beamaudit.model.errors import ModelError
from beamaudit.model.exposure import BeamInputs
from beamaudit.model.geometry import GeometryInputs, ResolvedGeometry, resolve_geometry

__all__ = ["BulkDose", "dose_from_beams"]

_MGY_PER_UGY = 1.0e-3  # µGy to mGy
_GY_PER_MGY = 1.0e-3  # mGy·cm² to Gy·cm²

Floats = NDArray[np.float64]

_BEAM_NUMBERS = attrgetter(
    "kvp_kv",
    "output_ugy_per_mas_1m",
    "output_standard_uncertainty_ugy_per_mas_1m",
    "hvl1_mm_al",
    "hvl1_standard_uncertainty_mm_al",
    "tissue_to_air_ratio",
)
_GEOMETRY_NUMBERS = attrgetter(
    "fsd_mm",
    "fsd_standard_uncertainty_mm",
    "field_plane_mm",
    "field_plane_standard_uncertainty_mm",
    "field_area_at_plane_cm2",
    "field_area_relative_uncertainty",
    "entrance_field_side_cm",
    "entrance_field_side_standard_uncertainty_cm",
)
#: Everything of a GeometryInputs that its resolution depends on (provenance only names sources
#: in the trail), as one hashable key.
_GEOMETRY_KEY = attrgetter(*(f.name for f in fields(GeometryInputs) if f.name != "provenance"))


@dataclass(frozen=True)
class BulkDose:
    """Figures of n exposures as float64 arrays of length n (NaN where a figure does not exist).

    Element i holds what :func:`beamaudit.model.exposure.dose_from_beam` gives for exposure i:
    each ``*_standard_uncertainty*`` array the standard uncertainty of the figure before it.
    The backscatter factor, ESAK and entrance dose are NaN where no backscatter factor could be
    found (an HVL below the table); the reference-point air kerma where the reference point's
    distance is not known. Where ``dose_from_beam`` raises :class:`ModelError`, ``errors[i]``
    holds its message, every float array is NaN and ``calibrated`` is False; elsewhere
    ``errors[i]`` is None.

    Attributes
    ----------
    dap_gy_cm2, dap_standard_uncertainty_gy_cm2 : air kerma-area product, Gy·cm².
    incident_air_kerma_mgy, incident_air_kerma_standard_uncertainty_mgy : K_a,i, mGy.
    backscatter_factor, backscatter_factor_standard_uncertainty : B, 1.
    esak_mgy, esak_standard_uncertainty_mgy : entrance surface air kerma K_a,e, mGy.
    entrance_dose_mgy, entrance_dose_standard_uncertainty_mgy : entrance surface dose, mGy.
    reference_point_air_kerma_mgy, reference_point_air_kerma_standard_uncertainty_mgy : K_a,r.
    fsd_mm, fsd_standard_uncertainty_mm : focus-to-skin distance used, mm.
    hvl1_mm_al, output_ugy_per_mas_1m : the beam's first HVL and output at 1 m, as given.
    calibrated : True where the output came from a room calibration.
    errors : the ModelError message where the exposure has no figures, else None.
    """

    dap_gy_cm2: Floats
    dap_standard_uncertainty_gy_cm2: Floats
    incident_air_kerma_mgy: Floats
    incident_air_kerma_standard_uncertainty_mgy: Floats
    backscatter_factor: Floats
    backscatter_factor_standard_uncertainty: Floats
    esak_mgy: Floats
    esak_standard_uncertainty_mgy: Floats
    entrance_dose_mgy: Floats
    entrance_dose_standard_uncertainty_mgy: Floats
    reference_point_air_kerma_mgy: Floats
    reference_point_air_kerma_standard_uncertainty_mgy: Floats
    fsd_mm: Floats
    fsd_standard_uncertainty_mm: Floats
    hvl1_mm_al: Floats
    output_ugy_per_mas_1m: Floats
    calibrated: NDArray[np.bool_]
    errors: tuple[str | None, ...]

    def __len__(self) -> int:
        return len(self.errors)

    @property
    def ok(self) -> NDArray[np.bool_]:
        """True where the exposure has figures (no error)."""
        return np.fromiter((e is None for e in self.errors), dtype=bool, count=len(self.errors))


def _relative_uncertainty_of_product(*terms: tuple[Floats | float, float]) -> Floats:
    """Elementwise :func:`beamaudit.model.dose.relative_uncertainty_of_product` (GUM eq. 12).

    Summed in the same order as the scalar function, so the two agree to the last bit.
    """
    total: Floats | float = 0.0
    for rel, power in terms:
        total = total + (power * rel) ** 2
    return np.sqrt(np.asarray(total, dtype=np.float64))


def _bad_relative(rel: Floats | float) -> NDArray[np.bool_]:
    """Where a relative uncertainty is refused by ``relative_uncertainty_of_product``."""
    rel = np.asarray(rel)
    return np.asarray(~(np.isfinite(rel) & (rel >= 0)))


def _exposure_mas(exposure_mas: ArrayLike, n: int) -> Floats:
    try:
        mas = np.asarray(exposure_mas, dtype=np.float64)
    except (TypeError, ValueError) as exc:
        raise ModelError(f"exposure_mas must be numbers of mAs: {exc}") from None
    if mas.ndim == 0:
        return np.full(n, float(mas))
    if mas.shape != (n,):
        raise ModelError(
            f"exposure_mas has shape {mas.shape}, not one value per beam ({n}) or a single value"
        )
    return mas


def dose_from_beams(
    beams: Sequence[BeamInputs],
    *,
    exposure_mas: ArrayLike,
    geometries: Sequence[GeometryInputs],
) -> BulkDose:
    """Every figure of n exposures from plain beam numbers, vectorised, without trails.

    Element i equals ``dose_from_beam(beams[i], exposure_mas=exposure_mas[i],
    geometry=geometries[i])`` figure by figure (values and standard uncertainties; equations
    in the module docstring). An exposure for which that raises :class:`ModelError` gets its
    message in ``errors[i]`` and NaN figures; the others are unaffected. The checks come in the
    order ``dose_from_beam`` meets them, its why trail's refusal of a non-finite number
    included, so the message is the one it would give. One difference: an
    output of exactly 0 µGy/mAs, where ``dose_from_beam`` stops on a division by zero, gets the
    message of any other non-positive output.

    Geometries that are equal in every field but their provenance are resolved once.

    Parameters
    ----------
    beams : sequence of BeamInputs
        Output, HVL, tissue/air ratio and their uncertainties, one per exposure.
    exposure_mas : array_like
        Tube current-exposure time product of each exposure, mAs (or one value for all).
    geometries : sequence of GeometryInputs
        What each exposure carries about its geometry.

    Returns
    -------
    BulkDose
        The figures, as arrays of length n (n = 0 allowed).

    Raises
    ------
    ModelError
        Only when the arguments do not line up (lengths, shape of ``exposure_mas``); a bad
        exposure is reported in ``errors``, never raised.

    Examples
    --------
    >>> beam = BeamInputs(kvp_kv=80.0, output_ugy_per_mas_1m=50.0,
    ...                   output_standard_uncertainty_ugy_per_mas_1m=5.0, hvl1_mm_al=3.0,
    ...                   hvl1_standard_uncertainty_mm_al=0.0, tissue_to_air_ratio=1.06,
    ...                   calibrated=True)
    >>> geo = GeometryInputs(sid_mm=1000.0, body_part_thickness_mm=200.0,
    ...                      table_to_detector_gap_mm=50.0, field_width_mm=300.0,
    ...                      field_height_mm=300.0)
    >>> bulk = dose_from_beams([beam, beam], exposure_mas=[10.0, -1.0], geometries=[geo, geo])
    >>> bulk.dap_gy_cm2.round(4).tolist(), bulk.errors[1]
    ([0.45, nan], 'exposure_mas must be a positive finite number of mAs, not -1.0')
    """
    n = len(beams)
    if len(geometries) != n:
        raise ModelError(f"{n} beams but {len(geometries)} geometries: give one per exposure")
    mas = _exposure_mas(exposure_mas, n)
    errors: list[str | None] = [None] * n
    clean = np.ones(n, dtype=bool)

    def fail(bad: NDArray[np.bool_], message: Callable[[int], str]) -> None:
        """Give each still-clean exposure where ``bad`` holds its message (first error wins)."""
        hit = bad & clean
        for i in np.flatnonzero(hit):
            errors[i] = message(int(i))
        clean[hit] = False

    # 1. mAs (as _check_mas: the message shows the value as it was passed)
    one_mas = np.ndim(exposure_mas) == 0

    def raw_mas(i: int) -> Any:
        return exposure_mas if one_mas else exposure_mas[i]  # type: ignore[index]

    with np.errstate(invalid="ignore"):
        fail(
            ~(np.isfinite(mas) & (mas > 0)),
            lambda i: f"exposure_mas must be a positive finite number of mAs, not {raw_mas(i)!r}",
        )

    # 2. geometry, one exposure at a time (equal geometries once)
    geo = np.full((n, 8), np.nan)
    resolved: dict[tuple[Any, ...], ResolvedGeometry] = {}
    for i in np.flatnonzero(clean).tolist():
        g = geometries[i]
        key: tuple[Any, ...] | None = _GEOMETRY_KEY(g)
        try:
            found = resolved.get(key)  # type: ignore[arg-type]
        except TypeError:  # an unhashable field value (a list): resolve without sharing
            key = found = None
        if found is None:
            try:
                found = resolve_geometry(g, trail=False)
            except ModelError as exc:
                errors[i] = str(exc)
                clean[i] = False
                continue
            if key is not None:
                resolved[key] = found
        geo[i] = _GEOMETRY_NUMBERS(found)
    fsd, u_fsd, plane, u_plane, area, rel_area, side, u_side = geo.T

    beam_numbers = np.array([_BEAM_NUMBERS(b) for b in beams], dtype=np.float64).reshape(n, 6)
    kvp, y, u_y, hvl, u_hvl, ratio = beam_numbers.T
    calibrated = np.fromiter((bool(b.calibrated) for b in beams), dtype=bool, count=n)
    d_ref_raw = [g.source_to_reference_point_mm for g in geometries]
    has_ref = np.fromiter((d is not None for d in d_ref_raw), dtype=bool, count=n)
    d_ref = np.array([np.nan if d is None else d for d in d_ref_raw], dtype=np.float64)

    mas_rel = dose_default("reported_exposure_mas_relative_uncertainty").value
    ratio_rel = dose_default("tissue_to_air_ratio_relative_uncertainty").value
    distance_rel = dose_default("recorded_distance_relative_uncertainty").value

    def untrailable(values: Floats, where: str) -> None:
        """The why trail refuses a number JSON cannot carry (dose_from_beam stops there)."""
        fail(
            ~np.isfinite(values),
            lambda i: f"why trail: {where} is {float(values[i])}, which cannot be recorded",
        )

    def refused_relative(rel: Floats) -> None:
        fail(
            _bad_relative(rel),
            lambda i: f"relative uncertainty must be zero or positive, not {float(rel[i])!r}",
        )

    # The checks below come in the order dose_from_beam meets them, so that each exposure gets
    # the message of the first one it fails.
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        # 3. the beam's own trail step, then the tube output (dose_from_beam divides by it
        # before checking it is positive)
        untrailable(kvp, "kvp_kv")
        untrailable(y, "output_ugy_per_mas_1m")
        untrailable(u_y, "output_ugy_per_mas_1m.inputs.standard_uncertainty")
        fail(
            ~(y > 0),
            lambda i: (
                f"output_ugy_per_mas_1m must be a positive finite number, not {float(y[i])!r}"
            ),
        )
        y_rel = u_y / y
        fsd_rel = u_fsd / fsd
        plane_rel = u_plane / plane

        # 4. incident air kerma, inverse-square law (IAEA TRS 457 §7)
        k_i = y * mas * (REFERENCE_DISTANCE_MM / fsd) ** 2 * _MGY_PER_UGY
        refused_relative(y_rel)
        refused_relative(fsd_rel)
        k_i_rel = _relative_uncertainty_of_product((y_rel, 1), (mas_rel, 1), (fsd_rel, -2))
        untrailable(k_i, "incident_air_kerma_mgy")

        # 5. DAP at the plane the field is known at, P_KA = K(d) A(d) (ICRU 74)
        k_plane = y * mas * (REFERENCE_DISTANCE_MM / plane) ** 2 * _MGY_PER_UGY
        fail(
            ~np.isfinite(k_plane),
            lambda i: (
                f"air_kerma_mgy must be a zero or positive finite number, not {float(k_plane[i])!r}"
            ),
        )
        fail(
            ~(np.isfinite(area) & (area > 0)),
            lambda i: f"field_area_cm2 must be a positive finite number, not {float(area[i])!r}",
        )
        dap = k_plane * area * _GY_PER_MGY
        refused_relative(rel_area)
        refused_relative(plane_rel)
        dap_rel = _relative_uncertainty_of_product(
            (y_rel, 1), (mas_rel, 1), (rel_area, 1), (plane_rel, -2)
        )
        untrailable(dap, "dap_gy_cm2")

        # 6. backscatter factor (no factor, no ESAK: not an error), K_a,e = K_a,i B and
        # D = K_a,e (mu_en/rho)_t,a (ICRU 74; IAEA TRS 457 §7)
        b, u_b, _ = backscatter_estimates(
            hvl_mm_al=np.where(clean, hvl, np.nan),
            field_side_cm=side,
            hvl_standard_uncertainty_mm_al=u_hvl,
            field_side_standard_uncertainty_cm=u_side,
            out_of_range="nearest",
        )
        has_b = np.isfinite(b)

        def with_factor(values: Floats) -> Floats:
            return np.where(has_b, values, 0.0)  # checks below only where there is a factor

        untrailable(with_factor(u_hvl), "hvl1_mm_al.inputs.standard_uncertainty")
        untrailable(with_factor(u_b), "backscatter_factor.inputs.standard_uncertainty")
        fail(
            has_b & (b < 1.0),
            lambda i: f"backscatter_factor must be at least 1, not {float(b[i])!r}",
        )
        b_rel = u_b / b
        refused_relative(with_factor(b_rel))
        k_e = k_i * b
        k_e_rel = _relative_uncertainty_of_product((k_i_rel, 1), (b_rel, 1))
        untrailable(with_factor(k_e), "esak_mgy")
        fail(
            has_b & ~(np.isfinite(ratio) & (ratio > 0)),
            lambda i: (
                f"tissue_to_air_ratio must be a positive finite number, not {float(ratio[i])!r}"
            ),
        )
        d = k_e * ratio
        untrailable(with_factor(d), "entrance_dose_mgy")
        d_rel = _relative_uncertainty_of_product((k_e_rel, 1), (ratio_rel, 1))

        # 7. reference point, inverse-square law (the message shows the distance as given)
        fail(
            has_ref & ~(np.isfinite(d_ref) & (d_ref > 0)),
            lambda i: f"source_to_reference_point_mm must be positive, not {d_ref_raw[i]!r}",
        )
        k_r = y * mas * (REFERENCE_DISTANCE_MM / d_ref) ** 2 * _MGY_PER_UGY
        k_r_rel = _relative_uncertainty_of_product((y_rel, 1), (mas_rel, 1), (distance_rel, -2))
        untrailable(np.where(has_ref, k_r, 0.0), "reference_point_air_kerma_mgy")

        with_b = clean & has_b
        with_ref = clean & has_ref

        def only(where: NDArray[np.bool_], values: Floats) -> Floats:
            return np.where(where, values, np.nan)

        return BulkDose(
            dap_gy_cm2=only(clean, dap),
            dap_standard_uncertainty_gy_cm2=only(clean, dap * dap_rel),
            incident_air_kerma_mgy=only(clean, k_i),
            incident_air_kerma_standard_uncertainty_mgy=only(clean, k_i * k_i_rel),
            backscatter_factor=only(with_b, b),
            backscatter_factor_standard_uncertainty=only(with_b, u_b),
            esak_mgy=only(with_b, k_e),
            esak_standard_uncertainty_mgy=only(with_b, k_e * k_e_rel),
            entrance_dose_mgy=only(with_b, d),
            entrance_dose_standard_uncertainty_mgy=only(with_b, d * d_rel),
            reference_point_air_kerma_mgy=only(with_ref, k_r),
            reference_point_air_kerma_standard_uncertainty_mgy=only(with_ref, k_r * k_r_rel),
            fsd_mm=only(clean, fsd),
            fsd_standard_uncertainty_mm=only(clean, u_fsd),
            hvl1_mm_al=only(clean, hvl),
            output_ugy_per_mas_1m=only(clean, y),
            calibrated=calibrated & clean,
            errors=tuple(errors),
        )
