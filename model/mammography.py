r"""The mammography beam at the breast: tube, filters, compression paddle and geometry.

A mammography exposure is a low-voltage beam (20-40 kV) from a molybdenum, rhodium, tungsten
or silver anode, filtered by the tube's beryllium window, a thin K-edge filter (Mo, Rh, Ag) or
aluminium, and the compression paddle, that enters the compressed breast from above. The
spectrum is that of :mod:`beamaudit.model.spectrum` (the same bremsstrahlung and K-line
physics for every anode) on the 0.25 keV grid of :mod:`beamaudit.model.attenuation`.

Geometry of the Dance method's dosimetry (Dance 1990; the UK and European protocols): the focus
sits above the chest-wall edge of the breast support; the incident air kerma :math:`K` is
taken free in air, without backscatter, on the midline 60 mm from the chest wall, in the plane
of the breast's upper surface, with the paddle in the beam. The distance from the focus is

.. math::

    r_{ref} = \sqrt{(d_{support} - T)^2 + 60^2}\ \text{mm}

with :math:`d_{support}` the focus-to-breast-support distance and :math:`T` the compressed
thickness, and the air kerma there per mAs is the tube output at 1 m (computed with
:math:`r_{ref}` of air in the beam) times :math:`(1000/r_{ref})^2`. The first HVL is that of
the beam with the paddle, as the European protocol measures it.

Defaults, each recorded as an assumption when used:

- tube window :data:`DEFAULT_WINDOW`: 1 mm beryllium (mammography tubes have 0.5-1 mm Be
  ports; common practice, from memory);
- compression paddle :data:`DEFAULT_PADDLE`: 3 mm PMMA. Paddles are plates of 2-3 mm PMMA or
  polycarbonate (from memory). Of those, 3 mm PMMA puts the model's first HVLs closest to the
  EUREF typical clinical HVLs, which include the paddle (mean deviation -0.021 mm Al over the
  twelve values; 3 mm polycarbonate -0.027, 2 mm PMMA -0.037): the choice is fitted to that
  table, so the test against it checks the kV and target/filter dependence, not the paddle;
- focus-to-support distance :data:`DEFAULT_FOCUS_TO_SUPPORT_MM`: 630 mm (source-to-image
  distances of 650-700 mm with the support about 20 mm above the detector; from memory);
- anode angle :data:`DEFAULT_ANODE_ANGLE_DEG`: 20 degrees, the effective angle toward the
  reference point of a tilted mammography tube (our choice; the first HVL moves by under 1 %
  between 12 and 20 degrees);
- constant potential (mammography generators are high-frequency; common practice).

Every figure is an estimate for quality assurance and optimisation.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import numpy.typing as npt

from beamaudit.model.attenuation import grid_mass_energy_absorption_cm2_g
from beamaudit.model.beam import BeamResult, BeamSpec, compute_beam
from beamaudit.model.calibration import RoomCalibration
from beamaudit.model.errors import ModelError
from beamaudit.model.filtration import FilterSpec, describe_filters

__all__ = [
    "DEFAULT_ANODE_ANGLE_DEG",
    "DEFAULT_FOCUS_TO_SUPPORT_MM",
    "DEFAULT_PADDLE",
    "DEFAULT_WINDOW",
    "MAMMOGRAPHY_KV_MAX",
    "MAMMOGRAPHY_KV_MIN",
    "REFERENCE_POINT_FROM_CHEST_WALL_MM",
    "BreastBeam",
    "MammographyTechnique",
    "breast_beam",
    "parse_target_filter",
]

FloatArray = npt.NDArray[np.float64]

#: Tube window, the first layer of every mammography beam unless the technique names another.
DEFAULT_WINDOW = FilterSpec("Be", 1.0)
#: Compression paddle, the last layer before the breast.
DEFAULT_PADDLE = FilterSpec("pmma", 3.0)
#: Focus to breast-support surface, mm.
DEFAULT_FOCUS_TO_SUPPORT_MM = 630.0
#: Effective anode angle toward the reference point, degrees.
DEFAULT_ANODE_ANGLE_DEG = 20.0
#: Reference point of the incident air kerma: midline, this far from the chest wall, mm
#: (UK and European mammography dosimetry protocols; from memory, medium confidence).
REFERENCE_POINT_FROM_CHEST_WALL_MM = 60.0
#: Tube voltages of mammography, kV: the issue's 20-40 kV (the Mo, Rh and Ag anode models
#: accept up to 50 kV; the glandular-dose table covers photons up to 50 keV).
MAMMOGRAPHY_KV_MIN = 20.0
MAMMOGRAPHY_KV_MAX = 40.0
#: Compressed thicknesses accepted, mm (the Dance tables' 20-110 mm, with 10 mm either side
#: allowed for interpolation to the table's edge values, flagged).
_THICKNESS_MIN_MM = 10.0
_THICKNESS_MAX_MM = 120.0
#: K-edge filters of mammography; a tungsten beam through one of them is a mammography beam
#: the tungsten model was checked for (EUREF W/Rh typical HVLs).
_K_EDGE_FILTERS = frozenset({"Mo", "Rh", "Ag"})


def parse_target_filter(text: str) -> tuple[str, str]:
    """Split a target/filter combination such as ``"W/Rh"`` or ``"Mo/Mo"``.

    Parameters
    ----------
    text : str

    Returns
    -------
    (anode, filter_material) : tuple of str
        Element symbols as written (validated by the beam model when used).

    Raises
    ------
    ModelError
        Not ``ANODE/FILTER``.
    """
    anode, sep, filt = str(text).strip().partition("/")
    if not sep or not anode.strip() or not filt.strip():
        raise ModelError(f"target/filter {text!r} is not ANODE/FILTER (e.g. W/Rh)")
    return anode.strip(), filt.strip()


@dataclass(frozen=True)
class MammographyTechnique:
    """One mammography exposure's technique and geometry.

    Parameters
    ----------
    kv : float
        Tube voltage, kV (20-40).
    anode : str
        Target: ``"Mo"``, ``"Rh"``, ``"W"`` or ``"Ag"``.
    filters : tuple of FilterSpec
        Added filters (e.g. 0.05 mm Rh), without window and paddle. At least one layer: the
        filter decides the spectrum and is never assumed.
    thickness_mm : float
        Compressed breast thickness, mm (10-120; the coefficients cover 20-110).
    window : FilterSpec or None
        Tube window; None: :data:`DEFAULT_WINDOW`, assumed.
    paddle : FilterSpec or None
        Compression paddle; None: :data:`DEFAULT_PADDLE`, assumed. A paddle of 0 mm is none.
    focus_to_support_mm : float or None
        Focus to breast-support surface, mm; None: :data:`DEFAULT_FOCUS_TO_SUPPORT_MM`, assumed.
    anode_angle_deg : float
        Effective anode angle, degrees (6-22).

    Raises
    ------
    ModelError
        A value outside its range, no filter, or a breast thicker than the focus distance.
    """

    kv: float
    anode: str
    filters: tuple[FilterSpec, ...]
    thickness_mm: float
    window: FilterSpec | None = None
    paddle: FilterSpec | None = None
    focus_to_support_mm: float | None = None
    anode_angle_deg: float = DEFAULT_ANODE_ANGLE_DEG

    def __post_init__(self) -> None:
        kv = float(self.kv)
        if not (math.isfinite(kv) and MAMMOGRAPHY_KV_MIN <= kv <= MAMMOGRAPHY_KV_MAX):
            raise ModelError(
                f"tube voltage {self.kv} kV is outside {MAMMOGRAPHY_KV_MIN:g}-"
                f"{MAMMOGRAPHY_KV_MAX:g} kV for mammography"
            )
        object.__setattr__(self, "kv", kv)
        layers = tuple(self.filters)
        if not layers or not all(isinstance(f, FilterSpec) for f in layers):
            raise ModelError(
                "a mammography beam needs its added filter (e.g. 0.05 mm Rh); none was given"
            )
        object.__setattr__(self, "filters", layers)
        t = float(self.thickness_mm)
        if not (math.isfinite(t) and _THICKNESS_MIN_MM <= t <= _THICKNESS_MAX_MM):
            raise ModelError(
                f"compressed breast thickness {self.thickness_mm} mm is outside "
                f"{_THICKNESS_MIN_MM:g}-{_THICKNESS_MAX_MM:g} mm"
            )
        object.__setattr__(self, "thickness_mm", t)
        d = self.focus_to_support_mm
        if d is not None:
            d = float(d)
            if not (math.isfinite(d) and t + 100.0 <= d <= 2000.0):
                raise ModelError(
                    f"focus-to-support distance {self.focus_to_support_mm} mm is outside "
                    f"{t + 100.0:g}-2000 mm for a {t:g} mm breast"
                )
            object.__setattr__(self, "focus_to_support_mm", d)
        for name in ("window", "paddle"):
            layer = getattr(self, name)
            if layer is not None and not isinstance(layer, FilterSpec):
                raise ModelError(f"{name} must be a FilterSpec layer")
        # the anode and angle are checked by the beam model (one message for both paths)
        BeamSpec(kv=kv, filters=layers, anode=self.anode, anode_angle_deg=self.anode_angle_deg)

    @property
    def target_filter(self) -> str:
        """``"W/Rh"``-style label: the anode and the added filters' materials."""
        materials = "+".join(dict.fromkeys(f.material for f in self.filters))
        return f"{self.anode}/{materials}"


@dataclass(frozen=True)
class BreastBeam:
    """The beam incident on the breast's upper surface (with the paddle).

    Attributes
    ----------
    technique : MammographyTechnique
    beam : BeamResult
        The beam model's result for window + filters + paddle, with ``air_path_mm`` the
        distance to the reference point (its output is per mAs, inverse-square scaled to 1 m).
    reference_distance_mm : float
        Focus to the reference point, :math:`r_{ref}`.
    focus_to_support_mm : float
    air_kerma_per_mas_mgy : float
        Incident air kerma at the reference point per mAs, mGy.
    air_kerma_per_mas_uncertainty_mgy : float
        Its standard uncertainty (the output's).
    air_kerma_spectrum : numpy.ndarray
        Air kerma per energy bin, normalised to sum 1 (the weights that fold monoenergetic
        coefficients with this beam).
    layers : tuple of FilterSpec
        Every layer in the beam: window, added filters, paddle.
    assumptions : list of str
    """

    technique: MammographyTechnique
    beam: BeamResult
    reference_distance_mm: float
    focus_to_support_mm: float
    air_kerma_per_mas_mgy: float
    air_kerma_per_mas_uncertainty_mgy: float
    air_kerma_spectrum: FloatArray
    layers: tuple[FilterSpec, ...]
    assumptions: list[str] = field(default_factory=list)

    @property
    def hvl1_mm_al(self) -> float:
        """First HVL of the beam with the paddle, mm Al."""
        return self.beam.hvl1_mm_al

    def as_dict(self) -> dict[str, Any]:
        """JSON-ready summary (the spectrum is left out; see ``beam.as_dict()``)."""
        return {
            "kv": self.technique.kv,
            "target_filter": self.technique.target_filter,
            "filtration": describe_filters(self.layers),
            "hvl1_mm_al": self.hvl1_mm_al,
            "reference_distance_mm": self.reference_distance_mm,
            "focus_to_support_mm": self.focus_to_support_mm,
            "air_kerma_per_mas_mgy": self.air_kerma_per_mas_mgy,
            "output_ugy_per_mas_1m": self.beam.output_ugy_per_mas_1m,
            "calibrated": self.beam.calibrated,
            "assumptions": list(self.assumptions),
        }


def _tungsten_low_kv_note(technique: MammographyTechnique) -> str | None:
    if technique.anode != "W":
        return None
    if any(f.material in _K_EDGE_FILTERS for f in technique.filters):
        return (
            "tungsten anode below 40 kV checked only with K-edge filters (EUREF typical W/Rh "
            "HVLs, 25-31 kV)"
        )
    return (
        "tungsten anode without a K-edge filter below 40 kV: the model's first HVL is up to "
        "10 % above a published W + 0.5 mm Al set at 25-35 kV (tungsten L-lines not modelled)"
    )


def breast_beam(
    technique: MammographyTechnique, *, calibration: RoomCalibration | None = None
) -> BreastBeam:
    """The beam at the breast's upper surface for one mammography technique.

    Parameters
    ----------
    technique : MammographyTechnique
    calibration : RoomCalibration, optional
        The room's calibration (made with the window, paddle and angle used here); None: the
        documented uncalibrated default.

    Returns
    -------
    BreastBeam

    Raises
    ------
    ModelError
        As :func:`beamaudit.model.compute_beam`.
    """
    assumptions: list[str] = []
    window = technique.window
    if window is None:
        window = DEFAULT_WINDOW
        assumptions.append(f"tube window assumed: {window.thickness_mm:g} mm beryllium")
    paddle = technique.paddle
    if paddle is None:
        paddle = DEFAULT_PADDLE
        assumptions.append(
            f"compression paddle assumed: {paddle.thickness_mm:g} mm {paddle.material}"
        )
    d_support = technique.focus_to_support_mm
    if d_support is None:
        d_support = DEFAULT_FOCUS_TO_SUPPORT_MM
        assumptions.append(f"focus-to-breast-support distance assumed: {d_support:g} mm")
    layers = tuple(
        layer for layer in (window, *technique.filters, paddle) if layer.thickness_mm > 0.0
    )
    r_ref = math.hypot(d_support - technique.thickness_mm, REFERENCE_POINT_FROM_CHEST_WALL_MM)
    spec = BeamSpec(
        kv=technique.kv,
        filters=layers,
        anode=technique.anode,
        anode_angle_deg=technique.anode_angle_deg,
        ripple_percent=0.0,
        air_path_mm=r_ref,
    )
    result = compute_beam(spec, calibration=calibration)
    note = _tungsten_low_kv_note(technique)
    for text in result.assumptions:
        if note is not None and "the lowest voltage the tungsten model is checked at" in text:
            continue  # replaced by the mammography note below
        assumptions.append(text)
    if note is not None:
        assumptions.append(note)
    if not result.calibrated:
        assumptions.append(
            "the default output scale was found for radiography tubes at 60-120 kV; at "
            "mammography voltages it is a rough guide until the room's output is measured"
        )
    scale = (1000.0 / r_ref) ** 2 * 1.0e-3  # µGy at 1 m -> mGy at r_ref
    kerma = result.output_ugy_per_mas_1m * scale
    u_kerma = result.uncertainty.get("output_ugy_per_mas_1m", 0.0) * scale
    weights = (
        result.fluence_per_mas_1m * result.energies_kev * grid_mass_energy_absorption_cm2_g("air")
    )
    weights = weights / weights.sum()
    return BreastBeam(
        technique=technique,
        beam=result,
        reference_distance_mm=r_ref,
        focus_to_support_mm=d_support,
        air_kerma_per_mas_mgy=kerma,
        air_kerma_per_mas_uncertainty_mgy=u_kerma,
        air_kerma_spectrum=weights,
        layers=layers,
        assumptions=assumptions,
    )
