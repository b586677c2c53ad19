"""CT groups by patient size: bands of the water-equivalent diameter Dw.

CTDIvol and DLP depend strongly on the patient's size, so CT doses are compared between
patients of like size: AAPM Report 220 (2014) defines the water-equivalent diameter Dw (eq. 2-3,
PUBLISHED-VALUES, high) and says it replaces the effective diameter of AAPM Report 204; ICRP 135
asks for patient size to be taken into account and bands children's body examinations by
weight (``bands.py``). **No band edges in Dw are published** by AAPM 204, AAPM 220 or ICRP 135
(none is recalled; from memory), so the edges are a setting of the review
(``ReviewParameters.ct_size_band_edges_cm``), empty by default: CT groups are then formed as
before. :data:`EXAMPLE_EDGES_CM` is an example for a site to adapt, not a published value.

With edges ``(e0, e1, ..., en)`` each CT unit (an exam type of the ``ct`` modality group) of an
adult (no paediatric band) goes to one group by its Dw (the ``ct_dw_cm`` column of the events
table: Dw averaged over the scan range from the images, else the scanner's reported Dw):

* ``e(i) <= Dw < e(i+1)``: the band's group (``ct_dw_20_25cm``); every patient of it is used
  (the band takes the place of the standard-size weight window), and only levels that carry this
  band as their ``patient_group`` apply to it;
* below ``e0`` or at/above ``en``: :data:`OUTSIDE_SIZE_BANDS`, counted and shown, no level;
* no Dw: :data:`SIZE_NOT_KNOWN`, likewise; never guessed into a band.

A study-level unit (a CT examination of several acquisitions) takes the Dw of its first event
that has one.
"""

from __future__ import annotations

import itertools
import math
from collections.abc import Sequence

import numpy as np

from beamaudit.api.review._band_names import band_bounds, band_name

__all__ = [
    "EXAMPLE_EDGES_CM",
    "OUTSIDE_SIZE_BANDS",
    "SIZE_NOT_KNOWN",
    "SIZE_SPECIAL_GROUPS",
    "assign_size_bands",
    "check_edges",
    "is_size_band",
    "size_band_label",
    "size_band_name",
    "size_band_names",
]

#: An example of edges for adult body CT (cm): NOT a published value; a site sets its own.
EXAMPLE_EDGES_CM = (20.0, 25.0, 30.0, 35.0, 40.0)
OUTSIDE_SIZE_BANDS = "ct_dw_outside_bands"
SIZE_NOT_KNOWN = "ct_dw_not_known"
SIZE_SPECIAL_GROUPS = (OUTSIDE_SIZE_BANDS, SIZE_NOT_KNOWN)
_PREFIX = "ct_dw_"


def size_band_name(low_cm: float, high_cm: float) -> str:
    """The group name of a band: ``ct_dw_20_25cm`` (``ct_dw_22p5_25cm`` for 22.5)."""
    return band_name(_PREFIX, low_cm, high_cm, "cm")


def size_band_names(edges_cm: Sequence[float]) -> list[str]:
    """The band names of ``edges_cm``, in order."""
    return [size_band_name(lo, hi) for lo, hi in itertools.pairwise(edges_cm)]


def _bounds(name: str) -> tuple[float, float] | None:
    return band_bounds(name, _PREFIX, "cm", 100.0)


def is_size_band(name: str | None) -> bool:
    """Whether ``name`` is a Dw band a level may carry (not one of the special groups)."""
    return name is not None and _bounds(name) is not None


def size_band_label(name: str) -> str:
    """The group for people."""
    if name == OUTSIDE_SIZE_BANDS:
        return "CT patient size outside the Dw bands (no level applies)"
    if name == SIZE_NOT_KNOWN:
        return "CT patient size not known: no Dw from the images or the scanner (no level applies)"
    bounds = _bounds(name)
    if bounds is None:
        return name
    return f"CT patients of water-equivalent diameter {bounds[0]:g}-{bounds[1]:g} cm (AAPM 220 Dw)"


def check_edges(edges_cm: Sequence[float]) -> tuple[float, ...] | None:
    """The edges as floats, or None when they are no bands (empty, or at least two strictly
    increasing values in ``(0, 100]`` cm)."""
    try:
        edges = tuple(float(v) for v in edges_cm)
    except (TypeError, ValueError):
        return None
    if not edges:
        return edges
    if len(edges) < 2 or not all(math.isfinite(e) and 0 < e <= 100 for e in edges):
        return None
    if any(b <= a for a, b in itertools.pairwise(edges)):
        return None
    return edges


def assign_size_bands(
    groups: np.ndarray,
    *,
    ct: np.ndarray,
    dw_cm: np.ndarray,
    edges_cm: Sequence[float],
) -> np.ndarray:
    """``groups`` with every adult CT unit's size group (unchanged when ``edges_cm`` is empty).

    Parameters
    ----------
    groups : array of object
        The units' patient groups so far; units already in a paediatric band keep it.
    ct : array of bool
        Whether the unit's exam type is of the ``ct`` modality group.
    dw_cm : array of float
        Water-equivalent diameter, NaN when not known.
    edges_cm : sequence of float
        Band edges, ``e(i) <= Dw < e(i+1)``.
    """
    out = np.asarray(groups, dtype=object).copy()
    if not len(edges_cm):
        return out
    adult = np.array([g is None for g in out], dtype=bool) if len(out) else np.zeros(0, bool)
    chosen = ct & adult
    dw = np.asarray(dw_cm, dtype=np.float64)
    known = ~np.isnan(dw)
    out[chosen & ~known] = SIZE_NOT_KNOWN
    edges = np.asarray(edges_cm, dtype=np.float64)
    with np.errstate(invalid="ignore"):
        index = np.searchsorted(edges, np.where(known, dw, 0.0), side="right") - 1
    inside = known & (index >= 0) & (index < len(edges) - 1)
    out[chosen & known & ~inside] = OUTSIDE_SIZE_BANDS
    names = np.array(size_band_names(edges_cm), dtype=object)
    pick = chosen & inside
    out[pick] = names[index[pick]]
    return out
