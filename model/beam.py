r"""Beam specification and beam quantities: output per mAs at 1 m, HVLs, energies, spectrum.

:func:`compute_beam` runs the spectrum model (:mod:`beamaudit.model.spectrum`) through the
filtration (:mod:`beamaudit.model.filtration`), scales its air kerma by the room's calibration
(or the documented uncalibrated default, :mod:`beamaudit.model.calibration`) and derives the
quantities of :mod:`beamaudit.model.quantities`. Standard uncertainties are propagated by
linearisation (:mod:`beamaudit.model.uncertainty`) from:

- the tube-voltage accuracy (``kv_uncertainty_kv``),
- the total filtration, as mm Al added or removed (``filtration_uncertainty_mm_al``; when a room
  calibration fitted the inherent filtration and no value is given, the fit's uncertainty),
- the output scale (the calibration's relative uncertainty; 40 % for the default).

The inverse-square law converts output between distances:
:math:`Y(d) = Y(1\,\text{m})\,(1000/d)^2` (point source; air attenuation between the
distances not included).

Every figure is an estimate for QA and optimisation; clinical decisions need a qualified
medical physicist.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import numpy.typing as npt

from beamaudit.model._engine import REFERENCE_DISTANCE_MM, evaluate_unscaled
from beamaudit.model.attenuation import mu_en_ratio
from beamaudit.model.calibration import RoomCalibration, default_calibration
from beamaudit.model.errors import ModelError
from beamaudit.model.filtration import FilterSpec, default_filters, describe_filters
from beamaudit.model.spectrum import get_anode
from beamaudit.model.uncertainty import propagate_linearised

__all__ = [
    "ANODE_ANGLE_CHECK",
    "ANODE_ANGLE_CHECKED_DEG",
    "ANODE_ANGLE_MAX_DEG",
    "ANODE_ANGLE_MIN_DEG",
    "DEFAULT_AIR_PATH_MM",
    "BeamConfig",
    "BeamResult",
    "BeamSpec",
    "compute_beam",
    "output_at_distance_ugy_per_mas",
    "tissue_to_air_ratio",
]

FloatArray = npt.NDArray[np.float64]

#: Anode angles accepted, degrees: the range of diagnostic tubes the model is meant for (common
#: practice for general radiography, fluoroscopy and CT tubes).
ANODE_ANGLE_MIN_DEG = 6.0
ANODE_ANGLE_MAX_DEG = 22.0
#: The anode angle the model's figures were checked at, degrees, and how (said wherever the angle
#: is shown, so a user does not take the accepted range for a validated one).
ANODE_ANGLE_CHECKED_DEG = 12.0
ANODE_ANGLE_CHECK = (
    f"anode angles {ANODE_ANGLE_MIN_DEG:g}-{ANODE_ANGLE_MAX_DEG:g} degrees are accepted; the "
    f"model was checked at {ANODE_ANGLE_CHECKED_DEG:g} degrees against the IEC 61267:2005 RQR 2-10 "
    "first HVLs and homogeneity coefficients, and over 6-22 degrees only for the direction of "
    "the heel effect (common practice)"
)
#: Default air path from the focus, mm: the 1 m at which output is quoted.
DEFAULT_AIR_PATH_MM = REFERENCE_DISTANCE_MM


def _validate_tube(
    anode: str, anode_angle_deg: float, ripple_percent: float, air_path_mm: float
) -> str:
    key = get_anode(anode).key
    if not (
        math.isfinite(anode_angle_deg)
        and ANODE_ANGLE_MIN_DEG <= anode_angle_deg <= ANODE_ANGLE_MAX_DEG
    ):
        raise ModelError(
            f"anode angle {anode_angle_deg} degrees is outside "
            f"{ANODE_ANGLE_MIN_DEG:g}-{ANODE_ANGLE_MAX_DEG:g} degrees"
        )
    if not (math.isfinite(ripple_percent) and 0.0 <= ripple_percent <= 100.0):
        raise ModelError(f"voltage ripple {ripple_percent} % is outside 0-100 %")
    if not (math.isfinite(air_path_mm) and 0.0 <= air_path_mm <= 10_000.0):
        raise ModelError(f"air path {air_path_mm} mm is outside 0-10000 mm")
    return key


def _validate_filters(filters: Any) -> tuple[FilterSpec, ...] | None:
    if filters is None:
        return None
    layers = tuple(filters)
    if not all(isinstance(f, FilterSpec) for f in layers):
        raise ModelError("filters must be FilterSpec layers")
    return layers


@dataclass(frozen=True)
class BeamConfig:
    """Everything about a beam but its tube voltage (one row of a room's protocol).

    Parameters
    ----------
    filters : tuple of FilterSpec or None
        Layers of the total filtration, inherent included (added filters only when used with a
        calibration that fitted inherent filtration). None: the default 2.5 mm Al, assumed.
    anode : str
        Target material (``"W"``).
    anode_angle_deg : float
        Anode angle, 6-22 degrees.
    ripple_percent : float
        Voltage ripple, 0 (constant potential) to 100 (single-phase).
    air_path_mm : float
        Air between focus and the point of interest, mm (default 1000).
    """

    filters: tuple[FilterSpec, ...] | None = None
    anode: str = "W"
    anode_angle_deg: float = 12.0
    ripple_percent: float = 0.0
    air_path_mm: float = DEFAULT_AIR_PATH_MM

    def __post_init__(self) -> None:
        key = _validate_tube(
            self.anode, self.anode_angle_deg, self.ripple_percent, self.air_path_mm
        )
        object.__setattr__(self, "anode", key)
        object.__setattr__(self, "filters", _validate_filters(self.filters))

    def at_kv(self, kv: float) -> BeamSpec:
        """The beam of this configuration at tube voltage ``kv``."""
        return BeamSpec(
            kv=kv,
            filters=self.filters,
            anode=self.anode,
            anode_angle_deg=self.anode_angle_deg,
            ripple_percent=self.ripple_percent,
            air_path_mm=self.air_path_mm,
        )


@dataclass(frozen=True)
class BeamSpec:
    """An x-ray beam: tube voltage, filtration and tube.

    Parameters
    ----------
    kv : float
        Peak tube voltage, kV (20-150 for tungsten; validated against IEC 61267 from 40 kV).
    filters, anode, anode_angle_deg, ripple_percent, air_path_mm
        As in :class:`BeamConfig`.

    Raises
    ------
    ModelError
        Any value outside its range.
    """

    kv: float
    filters: tuple[FilterSpec, ...] | None = None
    anode: str = "W"
    anode_angle_deg: float = 12.0
    ripple_percent: float = 0.0
    air_path_mm: float = DEFAULT_AIR_PATH_MM

    def __post_init__(self) -> None:
        key = _validate_tube(
            self.anode, self.anode_angle_deg, self.ripple_percent, self.air_path_mm
        )
        a = get_anode(key)
        kv = float(self.kv)
        if not (math.isfinite(kv) and a.kv_min <= kv <= a.kv_max):
            raise ModelError(
                f"tube voltage {self.kv} kV is outside {a.kv_min:g}-{a.kv_max:g} kV "
                f"for a {a.label} anode"
            )
        object.__setattr__(self, "kv", kv)
        object.__setattr__(self, "anode", key)
        object.__setattr__(self, "filters", _validate_filters(self.filters))

    @property
    def filtration_assumed(self) -> bool:
        """True when no filtration was given and the default is used."""
        return self.filters is None

    @property
    def config(self) -> BeamConfig:
        """The beam without its tube voltage."""
        return BeamConfig(
            filters=self.filters,
            anode=self.anode,
            anode_angle_deg=self.anode_angle_deg,
            ripple_percent=self.ripple_percent,
            air_path_mm=self.air_path_mm,
        )


@dataclass(frozen=True)
class BeamResult:
    """Beam quantities of one beam (all at 1 m from the focus, per mAs).

    Attributes
    ----------
    kv : float
    hvl1_mm_al, hvl2_mm_al : float
        First and second half-value layers, mm Al.
    homogeneity : float
        HVL1 / HVL2.
    hvl1_mm_cu : float
        First HVL in mm Cu.
    mean_energy_kev : float
        Fluence-weighted mean photon energy.
    effective_energy_kev : float
        Energy of the monoenergetic beam with the same HVL1 in Al.
    output_ugy_per_mas_1m : float
        Air kerma per mAs at 1 m, µGy/mAs.
    energies_kev : numpy.ndarray
        Bin centres.
    fluence_per_mas_1m : numpy.ndarray
        Photons per mm² per bin at 1 m per mAs (scaled like the output).
    calibrated : bool
        False when the output scale is the published-typical default.
    filtration_assumed : bool
        True when the default total filtration was used.
    assumptions : list of str
        Every default and caveat that entered the figures.
    uncertainty : dict of str to float
        Standard uncertainties, keyed like the quantities.
    filters : tuple of FilterSpec
        Filtration layers actually used (inherent included).
    anode, anode_angle_deg, ripple_percent, air_path_mm
        The tube and geometry.
    output_scale : float
        Factor applied to the physics model's air kerma.
    characteristic_kerma_fraction : float
        Share of the air kerma carried by the K-lines.
    """

    kv: float
    hvl1_mm_al: float
    hvl2_mm_al: float
    homogeneity: float
    hvl1_mm_cu: float
    mean_energy_kev: float
    effective_energy_kev: float
    output_ugy_per_mas_1m: float
    energies_kev: FloatArray
    fluence_per_mas_1m: FloatArray
    calibrated: bool
    filtration_assumed: bool
    assumptions: list[str] = field(default_factory=list)
    uncertainty: dict[str, float] = field(default_factory=dict)
    filters: tuple[FilterSpec, ...] = ()
    anode: str = "W"
    anode_angle_deg: float = 12.0
    ripple_percent: float = 0.0
    air_path_mm: float = DEFAULT_AIR_PATH_MM
    output_scale: float = 1.0
    characteristic_kerma_fraction: float = 0.0

    def as_dict(self) -> dict[str, Any]:
        """Return a JSON-ready mapping (arrays as lists of floats)."""
        return {
            "kv": self.kv,
            "hvl1_mm_al": self.hvl1_mm_al,
            "hvl2_mm_al": self.hvl2_mm_al,
            "homogeneity": self.homogeneity,
            "hvl1_mm_cu": self.hvl1_mm_cu,
            "mean_energy_kev": self.mean_energy_kev,
            "effective_energy_kev": self.effective_energy_kev,
            "output_ugy_per_mas_1m": self.output_ugy_per_mas_1m,
            "calibrated": self.calibrated,
            "filtration_assumed": self.filtration_assumed,
            "filters": [f.as_dict() for f in self.filters],
            "filtration": describe_filters(self.filters),
            "anode": self.anode,
            "anode_angle_deg": self.anode_angle_deg,
            "ripple_percent": self.ripple_percent,
            "air_path_mm": self.air_path_mm,
            "output_scale": self.output_scale,
            "characteristic_kerma_fraction": self.characteristic_kerma_fraction,
            "assumptions": list(self.assumptions),
            "uncertainty": dict(self.uncertainty),
            "energies_kev": [float(e) for e in self.energies_kev],
            "fluence_per_mas_1m": [float(p) for p in self.fluence_per_mas_1m],
        }


def _with_al_change(filters: tuple[FilterSpec, ...], delta_mm: float) -> tuple[FilterSpec, ...]:
    if delta_mm >= 0.0:
        return (*filters, FilterSpec("Al", delta_mm)) if delta_mm > 0.0 else filters
    remaining = -delta_mm
    out = []
    for layer in filters:
        if layer.material == "Al" and remaining > 0.0:
            take = min(layer.thickness_mm, remaining)
            remaining -= take
            out.append(FilterSpec("Al", layer.thickness_mm - take))
        else:
            out.append(layer)
    if remaining > 1e-12:
        raise ModelError("cannot remove more aluminium than the filtration holds")
    return tuple(out)


def _setup(
    spec: BeamSpec, calibration: RoomCalibration | None, filtration_uncertainty_mm_al: float | None
) -> tuple[RoomCalibration, tuple[FilterSpec, ...], bool, list[str], float | None]:
    """The calibration and total filtration a beam uses, and every assumption they bring:
    (calibration, filters, filtration assumed, assumptions, filtration uncertainty)."""
    assumptions: list[str] = []
    if calibration is None:
        cal = default_calibration(
            anode=spec.anode,
            anode_angle_deg=spec.anode_angle_deg,
            ripple_percent=spec.ripple_percent,
        )
        assumptions.append(
            "uncalibrated: output scaled to a published typical output (fleet mean of about 40 "
            "radiographic units), relative standard uncertainty "
            f"{cal.output_scale_uncertainty_rel:.0%}"
        )
    else:
        cal = calibration
        if (cal.anode, cal.anode_angle_deg, cal.ripple_percent) != (
            spec.anode,
            spec.anode_angle_deg,
            spec.ripple_percent,
        ):
            raise ModelError(
                "the room calibration was made for another tube "
                f"({cal.anode}, {cal.anode_angle_deg:g} degrees, {cal.ripple_percent:g} % ripple)"
            )
        if not cal.calibrated:
            assumptions.append("uncalibrated: " + cal.source)
    filtration_assumed = False
    if cal.inherent_filtration_mm_al is not None:
        filters = (FilterSpec("Al", cal.inherent_filtration_mm_al), *(spec.filters or ()))
        assumptions.append(
            f"inherent filtration {cal.inherent_filtration_mm_al:.2f} mm Al from the room "
            "calibration; the beam's filters are taken as added filters"
        )
        if filtration_uncertainty_mm_al is None:
            filtration_uncertainty_mm_al = cal.inherent_filtration_uncertainty_mm_al
    elif spec.filters is None:
        filters = default_filters()
        filtration_assumed = True
        assumptions.append(
            "filtration assumed: 2.5 mm Al total (IEC 60601-1-3 minimum), nothing was known"
        )
    else:
        filters = spec.filters
    a = get_anode(spec.anode)
    if a.validated_kv_min is None:
        assumptions.append(
            f"the {a.label} anode model is not checked against any published beam quality"
        )
    elif spec.kv < a.validated_kv_min:
        assumptions.append(
            f"{spec.kv:g} kV is below {a.validated_kv_min:g} kV, the lowest voltage the "
            f"{a.label} model is checked at"
        )
    if spec.ripple_percent > 0.0:
        assumptions.append(
            f"voltage ripple {spec.ripple_percent:g} %: rectified-sine waveform, "
            "constant tube current"
        )
    if spec.anode_angle_deg != ANODE_ANGLE_CHECKED_DEG:
        assumptions.append(
            f"anode angle {spec.anode_angle_deg:g} degrees: the model was checked at "
            f"{ANODE_ANGLE_CHECKED_DEG:g} degrees (IEC 61267 RQR qualities) and elsewhere only "
            "for the direction of the heel effect"
        )
    return cal, filters, filtration_assumed, assumptions, filtration_uncertainty_mm_al


def compute_beam(
    spec: BeamSpec,
    *,
    calibration: RoomCalibration | None = None,
    kv_uncertainty_kv: float | None = None,
    filtration_uncertainty_mm_al: float | None = None,
) -> BeamResult:
    """Compute the beam quantities of one beam.

    Parameters
    ----------
    spec : BeamSpec
    calibration : RoomCalibration, optional
        The room's calibration; None uses :func:`default_calibration` (figures uncalibrated).
    kv_uncertainty_kv : float, optional
        Standard uncertainty of the tube voltage, kV (None: taken as exact).
    filtration_uncertainty_mm_al : float, optional
        Standard uncertainty of the total filtration, mm Al (None: exact, or the calibration's
        inherent-filtration uncertainty when it fitted one).

    Returns
    -------
    BeamResult

    Raises
    ------
    ModelError
        The calibration belongs to another tube, or an uncertainty is out of range.
    """
    cal, filters, filtration_assumed, assumptions, filtration_uncertainty_mm_al = _setup(
        spec, calibration, filtration_uncertainty_mm_al
    )
    a = get_anode(spec.anode)

    def figures(inputs: Mapping[str, float], *, with_spectrum: bool = False) -> dict[str, Any]:
        raw = evaluate_unscaled(
            kv=inputs["kv"],
            filters=_with_al_change(filters, inputs["filtration_mm_al"]),
            anode=spec.anode,
            anode_angle_deg=spec.anode_angle_deg,
            ripple_percent=spec.ripple_percent,
            air_path_mm=spec.air_path_mm,
        )
        scale = cal.output_scale * inputs["output_scale_rel"]
        out: dict[str, Any] = {
            "output_ugy_per_mas_1m": scale * raw.output_ugy_per_mas_1m,
            "hvl1_mm_al": raw.hvl1_mm_al,
            "hvl2_mm_al": raw.hvl2_mm_al,
            "homogeneity": raw.hvl1_mm_al / raw.hvl2_mm_al,
            "hvl1_mm_cu": raw.hvl1_mm_cu,
            "mean_energy_kev": raw.mean_energy_kev,
            "effective_energy_kev": raw.effective_energy_kev,
        }
        if with_spectrum:
            out["_raw"] = raw
        return out

    nominal_inputs = {"kv": spec.kv, "filtration_mm_al": 0.0, "output_scale_rel": 1.0}
    nominal = figures(nominal_inputs, with_spectrum=True)
    raw = nominal.pop("_raw")
    total_al = sum(f.thickness_mm for f in filters if f.material == "Al")
    budget = propagate_linearised(
        figures,
        nominal_inputs,
        {"kv": kv_uncertainty_kv or 0.0, "filtration_mm_al": filtration_uncertainty_mm_al or 0.0},
        bounds={"kv": (a.kv_min, a.kv_max), "filtration_mm_al": (-total_al, math.inf)},
        nominal_outputs=nominal,
    )
    uncertainty = dict(budget.standard_uncertainties)
    # The output scale multiplies the output only: its contribution is exact, no re-evaluation.
    scale_part = nominal["output_ugy_per_mas_1m"] * cal.output_scale_uncertainty_rel
    uncertainty["output_ugy_per_mas_1m"] = math.hypot(
        uncertainty["output_ugy_per_mas_1m"], scale_part
    )
    return BeamResult(
        kv=spec.kv,
        energies_kev=raw.energies_kev,
        fluence_per_mas_1m=raw.fluence_per_mas_1m * cal.output_scale,
        calibrated=cal.calibrated,
        filtration_assumed=filtration_assumed,
        assumptions=assumptions,
        uncertainty=uncertainty,
        filters=filters,
        anode=spec.anode,
        anode_angle_deg=spec.anode_angle_deg,
        ripple_percent=spec.ripple_percent,
        air_path_mm=spec.air_path_mm,
        output_scale=cal.output_scale,
        characteristic_kerma_fraction=raw.characteristic_kerma_fraction,
        **nominal,
    )


def tissue_to_air_ratio(
    result_or_energies: BeamResult | npt.ArrayLike,
    fluence: npt.ArrayLike | None = None,
    *,
    tissue: str = "soft_tissue",
) -> float:
    r"""Spectrum-weighted :math:`(\mu_{en}/\rho)_{tissue}/(\mu_{en}/\rho)_{air}`.

    Weighted by the air-kerma spectrum (energy fluence times :math:`(\mu_{en}/\rho)_{air}`), i.e.
    the ratio of tissue kerma to air kerma for this beam (IAEA TRS 457, section 7); see
    :func:`beamaudit.model.attenuation.mu_en_ratio`.

    Parameters
    ----------
    result_or_energies : BeamResult or array_like
        A beam result, or the bin energies in keV.
    fluence : array_like, optional
        Photon fluence per bin (required with energies; ignored with a BeamResult).
    tissue : str
        Medium, default ICRU-44 soft tissue.

    Returns
    -------
    float
    """
    if isinstance(result_or_energies, BeamResult):
        energies = np.asarray(result_or_energies.energies_kev)
        phi = np.asarray(result_or_energies.fluence_per_mas_1m)
    else:
        if fluence is None:
            raise ModelError("fluence is required when energies are given")
        energies = np.asarray(result_or_energies, dtype=np.float64)
        phi = np.asarray(fluence, dtype=np.float64)
    return mu_en_ratio(energies, energies * phi, tissue, "air")


def output_at_distance_ugy_per_mas(output_ugy_per_mas_1m: float, distance_mm: float) -> float:
    """Inverse-square law: output at ``distance_mm`` from the output at 1 m.

    Parameters
    ----------
    output_ugy_per_mas_1m : float
    distance_mm : float
        Distance from the focus, mm (positive).

    Returns
    -------
    float
        µGy/mAs at ``distance_mm``.
    """
    if not math.isfinite(distance_mm) or distance_mm <= 0.0:
        raise ModelError(f"distance must be a positive number of mm, got {distance_mm}")
    return output_ugy_per_mas_1m * (REFERENCE_DISTANCE_MM / distance_mm) ** 2
