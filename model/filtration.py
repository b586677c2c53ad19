r"""Beam filtration: filter layers, the default total filtration and the beam's transmission.

A beam's total filtration is a sequence of layers (inherent filtration expressed as mm Al
equivalent, plus any added filters), followed by the air between the focus and the point of
interest. Narrow-beam transmission of the layers, per energy bin:

.. math::

    T(E) = \exp\Big(-\sum_j \mu_j(E)\, t_j - \mu_{air}(E)\, d_{air}\Big)

with :math:`\mu_j` the linear attenuation coefficient of layer *j* (coherent scattering
included) and :math:`t_j` its thickness.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import numpy.typing as npt

from beamaudit.model.attenuation import grid_linear_attenuation_per_mm, material
from beamaudit.model.errors import ModelError

__all__ = [
    "DEFAULT_TOTAL_FILTRATION_MM_AL",
    "FilterSpec",
    "default_filters",
    "describe_filters",
    "parse_filter",
    "transmission",
]

FloatArray = npt.NDArray[np.float64]

#: Total filtration assumed when nothing is known, mm Al: the minimum total filtration for
#: general diagnostic x-ray equipment, IEC 60601-1-3:2008 (+A1:2013) cl. 7.1 (PUBLISHED-VALUES c).
DEFAULT_TOTAL_FILTRATION_MM_AL = 2.5
#: Thickest single layer accepted, mm. Thicker than any beam filter; guards against unit errors
#: (metres or micrometres typed as millimetres). Air paths are given separately.
_MAX_LAYER_MM = 100.0


@dataclass(frozen=True)
class FilterSpec:
    """One layer of the beam's total filtration.

    Parameters
    ----------
    material : str
        Material name or alias (``"Al"``, ``"aluminium"``, ``"Cu"``, ``"copper"``, ``"Be"``,
        ``"Mo"``, ``"Rh"``, ``"Ag"``, ``"glass"``, ``"oil"``, ``"air"``, ``"water"``,
        ``"soft_tissue"``...). Stored as the canonical name.
    thickness_mm : float
        Thickness in mm, 0-100.

    Raises
    ------
    ModelError
        Unknown material, or a negative, non-finite or implausibly large thickness.
    """

    material: str
    thickness_mm: float

    def __post_init__(self) -> None:
        key = material(self.material).key
        object.__setattr__(self, "material", key)
        thickness = float(self.thickness_mm)
        if not math.isfinite(thickness) or thickness < 0.0:
            raise ModelError(
                f"filter thickness must be a non-negative number of mm, got {thickness}"
            )
        if thickness > _MAX_LAYER_MM:
            raise ModelError(
                f"filter thickness {thickness} mm is above {_MAX_LAYER_MM:g} mm; check the unit"
            )
        object.__setattr__(self, "thickness_mm", thickness)

    def as_dict(self) -> dict[str, object]:
        """Return the layer as a JSON-ready mapping."""
        return {"material": self.material, "thickness_mm": self.thickness_mm}


def default_filters() -> tuple[FilterSpec, ...]:
    """The default total filtration: 2.5 mm Al (IEC 60601-1-3 minimum), to be flagged assumed.

    Returns
    -------
    tuple of FilterSpec
    """
    return (FilterSpec("Al", DEFAULT_TOTAL_FILTRATION_MM_AL),)


def parse_filter(text: str) -> FilterSpec:
    """Parse ``"THICKNESS_MM:MATERIAL"``, e.g. ``"2.5:Al"`` or ``"0.1:Cu"``.

    Parameters
    ----------
    text : str

    Returns
    -------
    FilterSpec

    Raises
    ------
    ModelError
        Malformed text, unknown material or bad thickness.
    """
    thickness_text, sep, name = str(text).partition(":")
    if not sep or not name.strip() or not thickness_text.strip():
        raise ModelError(f"filter {text!r} is not THICKNESS_MM:MATERIAL (e.g. 2.5:Al)")
    try:
        thickness = float(thickness_text)
    except ValueError:
        raise ModelError(f"filter {text!r}: thickness {thickness_text!r} is not a number") from None
    return FilterSpec(name.strip(), thickness)


def describe_filters(filters: tuple[FilterSpec, ...]) -> str:
    """Short human-readable description, e.g. ``"2.5 mm Al + 0.1 mm Cu"``.

    Parameters
    ----------
    filters : tuple of FilterSpec

    Returns
    -------
    str
    """
    if not filters:
        return "none"
    return " + ".join(f"{f.thickness_mm:g} mm {f.material}" for f in filters)


def transmission(filters: tuple[FilterSpec, ...], *, air_path_mm: float = 0.0) -> FloatArray:
    """Narrow-beam transmission of the layers and the air path on the energy grid.

    Parameters
    ----------
    filters : tuple of FilterSpec
        Layers of the total filtration.
    air_path_mm : float
        Air between the focus and the point of interest, mm (non-negative).

    Returns
    -------
    numpy.ndarray
        Transmission per bin of :func:`beamaudit.model.attenuation.energy_bin_centres_kev`.

    Raises
    ------
    ModelError
        Negative or non-finite air path.
    """
    if not math.isfinite(air_path_mm) or air_path_mm < 0.0:
        raise ModelError(f"air path must be a non-negative number of mm, got {air_path_mm}")
    exponent = grid_linear_attenuation_per_mm("air") * air_path_mm
    for layer in filters:
        if layer.thickness_mm > 0.0:
            exponent = (
                exponent + grid_linear_attenuation_per_mm(layer.material) * layer.thickness_mm
            )
    result: FloatArray = np.exp(-exponent)
    return result
