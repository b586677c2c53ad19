"""The dose chain of many stored exposures at once, as arrays, without why trails.

:func:`dose_from_beams` gives, for each of n exposures, the same figures as
:func:`beamaudit.model.exposure.dose_from_beam` (its value and standard uncertainty of every
figure), as float64 arrays of length n in a :class:`BulkDose`. It is for reconstructing many
stored exposures (ingest, re-reconstruction after a calibration change); the trail of any one
exposure is made on demand with :func:`dose_from_beam`. Both compute their numbers with the one
dose chain of :mod:`beamaudit.model._chain` (equations and uncertainty combination there), so
they agree figure by figure and error by error.

Per exposure only the geometry is resolved in Python (:func:`resolve_geometry` with
``trail=False``: its order of preference and its checks, no trail kept; equal geometries once);
everything numeric is vectorised over the arrays. Every figure is an estimate for quality
assurance and optimisation, not a patient's measured dose.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, fields
from operator import attrgetter
from typing import Any

import numpy as np
from numpy.typing import ArrayLike, NDArray

from beamaudit.model._chain import (
    GEOMETRY_NUMBERS,
    N_GEOMETRY_NUMBERS,
    ChainFigures,
    Failures,
    check_mas,
    collect_curves,
    run_chain,
)
from beamaudit.model.errors import ModelError
from beamaudit.model.exposure import BeamInputs
from beamaudit.model.geometry import GeometryInputs, ResolvedGeometry, resolve_geometry

__all__ = ["BulkDose", "dose_from_beams"]

Floats = NDArray[np.float64]

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
    ([0.4434, nan], 'exposure_mas must be a positive finite number of mAs, not -1.0')
    """
    n = len(beams)
    if len(geometries) != n:
        raise ModelError(f"{n} beams but {len(geometries)} geometries: give one per exposure")
    mas = _exposure_mas(exposure_mas, n)
    failures = Failures(n)
    one_mas = np.ndim(exposure_mas) == 0

    def raw_mas(i: int) -> Any:
        return exposure_mas if one_mas else exposure_mas[i]  # type: ignore[index]

    check_mas(failures, mas, raw_mas)
    geometry_numbers = _resolve_all(geometries, failures)
    beam_numbers, curves = collect_curves(beams)
    chain = run_chain(
        failures,
        beam_numbers=beam_numbers,
        mas=mas,
        geometry_numbers=geometry_numbers,
        d_ref_raw=[g.source_to_reference_point_mm for g in geometries],
        curves=curves,
    )
    calibrated = np.fromiter((bool(b.calibrated) for b in beams), dtype=bool, count=n)
    return _bulk(chain, calibrated, tuple(failures.errors))


def _resolve_all(geometries: Sequence[GeometryInputs], failures: Failures) -> Floats:
    """The chain's numbers of each geometry still clean (NaN elsewhere); equal ones once."""
    out = np.full((len(geometries), N_GEOMETRY_NUMBERS), np.nan)
    resolved: dict[tuple[Any, ...], ResolvedGeometry] = {}
    for i in np.flatnonzero(failures.clean).tolist():
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
                failures.fail_one(i, str(exc))
                continue
            if key is not None:
                resolved[key] = found
        out[i] = GEOMETRY_NUMBERS(found)
    return out


def _bulk(
    chain: ChainFigures, calibrated: NDArray[np.bool_], errors: tuple[str | None, ...]
) -> BulkDose:
    """The figures where they exist, NaN elsewhere."""
    c = chain
    with_b = c.clean & c.has_b
    with_ref = c.clean & c.has_ref

    def only(where: NDArray[np.bool_], values: Floats) -> Floats:
        return np.where(where, values, np.nan)

    with np.errstate(invalid="ignore", over="ignore"):
        return BulkDose(
            dap_gy_cm2=only(c.clean, c.dap),
            dap_standard_uncertainty_gy_cm2=only(c.clean, c.dap * c.dap_rel),
            incident_air_kerma_mgy=only(c.clean, c.k_i),
            incident_air_kerma_standard_uncertainty_mgy=only(c.clean, c.k_i * c.k_i_rel),
            backscatter_factor=only(with_b, c.b),
            backscatter_factor_standard_uncertainty=only(with_b, c.u_b),
            esak_mgy=only(with_b, c.k_e),
            esak_standard_uncertainty_mgy=only(with_b, c.k_e * c.k_e_rel),
            entrance_dose_mgy=only(with_b, c.d),
            entrance_dose_standard_uncertainty_mgy=only(with_b, c.d * c.d_rel),
            reference_point_air_kerma_mgy=only(with_ref, c.k_r),
            reference_point_air_kerma_standard_uncertainty_mgy=only(with_ref, c.k_r * c.k_r_rel),
            fsd_mm=only(c.clean, c.fsd),
            fsd_standard_uncertainty_mm=only(c.clean, c.u_fsd),
            hvl1_mm_al=only(c.clean, c.hvl),
            output_ugy_per_mas_1m=only(c.clean, c.y),
            calibrated=calibrated & c.clean,
            errors=errors,
        )
