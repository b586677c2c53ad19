"""Mammography groups: the compressed-thickness band mean glandular doses are compared in.

National mammography DRLs are set per view (CC, MLO) for breasts of a stated compressed
thickness, typically 50-60 mm, and national surveys report the doses of that band (common
practice; the UK and European survey protocols use it, from memory). ICRP 135 asks for about 50
examinations per view (PUBLISHED-VALUES m, medium; ``minimum_samples['mammography']``).

For an exam type of the ``mammography`` modality group, each view goes to one group by its
compressed breast thickness (``breast_thickness_mm`` of the events table) and the review's band
(``ReviewParameters.breast_thickness_band_mm``, ``low <= t < high``, default 50-60 mm):

* inside the band: the band's group (``breast_50_60mm``); every view of it is used (it plays for
  mammography the part the standard-size weight window plays elsewhere: weights are seldom
  recorded). A level may name the band it is set for in its ``patient_group``, as a CT level
  names its size band (``breast_50_60mm``; ``breast_45_55mm`` for a set defined on 45-55 mm):
  the band's own level applies to the group, and a level of another band does not; a level that
  names no band applies to the review's band as before (a set's level of the band takes its
  place: ``review/run.py::_applicable_levels``);
* outside the band: :data:`OUTSIDE_THICKNESS_BAND`, counted and shown, no level;
* no thickness recorded: :data:`THICKNESS_NOT_RECORDED`, likewise; never guessed into the band.

2D and tomosynthesis, and screening and diagnostic examinations, are kept apart by their exam
types and clinical indications (mapping rules), as any other groups.
"""

from __future__ import annotations

import math

import numpy as np

from beamaudit.api.review._band_names import band_bounds
from beamaudit.api.review._band_names import band_name as _band_name

__all__ = [
    "ANY_THICKNESS_BAND",
    "DEFAULT_THICKNESS_BAND_MM",
    "OUTSIDE_THICKNESS_BAND",
    "THICKNESS_NOT_RECORDED",
    "assign_thickness_bands",
    "band_label",
    "band_name",
    "is_thickness_band",
    "is_thickness_group",
    "thickness_band_bounds",
]

#: The band national surveys use (common practice), mm.
DEFAULT_THICKNESS_BAND_MM = (50.0, 60.0)
OUTSIDE_THICKNESS_BAND = "breast_outside_thickness_band"
#: what a mammography level that names no band applies to (the levels page's words)
ANY_THICKNESS_BAND = "compressed breast in the review's thickness band (no band named)"
THICKNESS_NOT_RECORDED = "breast_thickness_not_recorded"
_PREFIX = "breast_"


def band_name(band_mm: tuple[float, float]) -> str:
    """The group name of a band: ``breast_50_60mm`` (``breast_45p5_60mm`` for 45.5)."""
    return _band_name(_PREFIX, band_mm[0], band_mm[1], "mm")


def is_thickness_group(name: str | None) -> bool:
    """Whether ``name`` is one of this module's groups."""
    return name is not None and name.startswith(_PREFIX)


def thickness_band_bounds(name: str) -> tuple[float, float] | None:
    """``(low, high)`` mm of a band name in its one spelling (``breast_50_60mm``), else None
    (the groups outside the band and not recorded are no band; ``0 < low < high <= 200``)."""
    return band_bounds(name, _PREFIX, "mm", 200.0)


def is_thickness_band(name: str | None) -> bool:
    """Whether ``name`` is a compressed-thickness band a level may carry."""
    return name is not None and thickness_band_bounds(name) is not None


def band_label(name: str) -> str:
    """The group for people."""
    if name == OUTSIDE_THICKNESS_BAND:
        return "compressed breast outside the thickness band (no level applies)"
    if name == THICKNESS_NOT_RECORDED:
        return "compressed breast thickness not recorded (no level applies)"
    band = thickness_band_bounds(name)
    if band is None:
        return name
    return f"compressed breast {band[0]:g}-{band[1]:g} mm (thickness band, per view)"


def check_band(band_mm: tuple[float, float]) -> tuple[float, float] | None:
    """``(low, high)`` as floats, or None when it is no band (``0 < low < high <= 200``)."""
    try:
        low, high = (float(v) for v in band_mm)
    except (TypeError, ValueError):
        return None
    if not (math.isfinite(low) and math.isfinite(high) and 0 < low < high <= 200):
        return None
    return low, high


def assign_thickness_bands(
    groups: np.ndarray,
    *,
    mammography: np.ndarray,
    thickness_mm: np.ndarray,
    band_mm: tuple[float, float],
) -> np.ndarray:
    """``groups`` (the units' patient groups) with every mammography unit's thickness group.

    Parameters
    ----------
    groups : array of object
        The units' patient groups so far (mammography units are not banded otherwise).
    mammography : array of bool
        Whether the unit's exam type is of the mammography modality group.
    thickness_mm : array of float
        Compressed breast thickness, NaN when not recorded.
    band_mm : (float, float)
        ``low <= t < high``.
    """
    out = np.asarray(groups, dtype=object).copy()
    t = np.asarray(thickness_mm, dtype=np.float64)
    low, high = band_mm
    with np.errstate(invalid="ignore"):
        inside = (t >= low) & (t < high)
    out[mammography & inside] = band_name(band_mm)
    out[mammography & ~inside & ~np.isnan(t)] = OUTSIDE_THICKNESS_BAND
    out[mammography & np.isnan(t)] = THICKNESS_NOT_RECORDED
    return out
