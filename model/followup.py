r"""Follow-up of fluoroscopy and interventional patients: NCRP 168 levels, cumulative skin dose.

- :func:`substantial_dose_levels_crossed`: which of the substantial radiation dose levels of
  NCRP Report 168 (2010) a procedure reached, and by how much (``data/substantial_dose_levels.csv``
  holds the levels and their source: peak skin dose 3 Gy, K_a,r 5 Gy, P_KA 500 Gy·cm² for a
  100 cm² field at the skin, fluoroscopy time 60 min; from memory, medium-high confidence).
- :data:`FOLLOW_UP_LEVELS_MGY`: the skin-dose levels a map reports the area above and draws
  isodose lines at: 2 Gy (the threshold of transient erythema, about 2 Gy in Balter et al.,
  Radiology 254:326, 2010, and ICRP Publication 118; from memory), 3 Gy (NCRP 168's substantial
  dose level) and 5 Gy (Balter et al.'s band of 5-10 Gy, where erythema and temporary
  epilation are expected; from memory).
- :func:`cumulative_skin_dose`: the peak skin dose of one patient over several procedures,
  the maps added cell by cell where they describe the same body on the same frame.
"""

from __future__ import annotations

import functools
import math
from collections.abc import Sequence
from dataclasses import dataclass
from datetime import datetime, timedelta
from typing import TYPE_CHECKING, Literal

import numpy as np
from numpy.typing import NDArray

from beamaudit.model.defaults import _read_table
from beamaudit.model.errors import ModelError
from beamaudit.model.fluoro_ct import _value

if TYPE_CHECKING:
    from beamaudit.model.skin_dose import SkinDoseMap

__all__ = [
    "FOLLOW_UP_LEVELS_MGY",
    "CumulativeSkinDose",
    "LevelCheck",
    "SubstantialDoseLevel",
    "cumulative_skin_dose",
    "substantial_dose_levels",
    "substantial_dose_levels_crossed",
]

#: Skin-dose levels of the map's areas and isodose lines, mGy (module docstring).
FOLLOW_UP_LEVELS_MGY: tuple[float, ...] = (2000.0, 3000.0, 5000.0)

_REFERENCE_FIELD_CM2 = 100.0


@dataclass(frozen=True)
class SubstantialDoseLevel:
    """One NCRP 168 substantial radiation dose level, as the data file states it."""

    key: str
    quantity: str
    value: float
    unit: str
    note: str
    source: str


@functools.cache
def substantial_dose_levels() -> dict[str, SubstantialDoseLevel]:
    """The four levels by key (read once from ``data/substantial_dose_levels.csv``)."""
    header, rows = _read_table("substantial_dose_levels.csv")
    source = header.get("original", "")
    try:
        return {
            row["key"]: SubstantialDoseLevel(
                key=row["key"],
                quantity=row["quantity"],
                value=float(row["value"]),
                unit=row["unit"],
                note=row["note"] or "",
                source=source,
            )
            for row in rows
        }
    except (KeyError, ValueError) as exc:
        raise ModelError(f"substantial_dose_levels.csv does not parse: {exc}") from exc


@dataclass(frozen=True)
class LevelCheck:
    """A procedure's value beside one level.

    ``crossed`` is None when the value is not known; ``ratio`` is value over level and
    ``excess`` value minus level (in the level's unit), both None when the value is not known.
    """

    key: str
    quantity: str
    level: float
    unit: str
    value: float | None
    crossed: bool | None
    ratio: float | None
    excess: float | None
    note: str | None = None

    def describe(self) -> str:
        """One line, e.g. ``"peak skin dose 3400 mGy, 1.13 x the 3000 mGy level"``."""
        if self.value is None:
            return f"{self.quantity}: not known (level {self.level:g} {self.unit})"
        verb = "at or above" if self.crossed else "below"
        return (
            f"{self.quantity} {self.value:.4g} {self.unit}, {self.ratio:.2f} x the "
            f"{self.level:g} {self.unit} level ({verb})"
        )


def substantial_dose_levels_crossed(
    *,
    peak_skin_dose_mgy: float | None = None,
    reference_point_air_kerma_mgy: float | None = None,
    dap_gy_cm2: float | None = None,
    fluoroscopy_time_s: float | None = None,
    skin_field_area_cm2: float | None = None,
) -> list[LevelCheck]:
    """A procedure's totals against the NCRP 168 substantial radiation dose levels.

    .. math::

        \\text{crossed} = x \\ge L, \\qquad \\text{ratio} = x / L, \\qquad
        \\text{excess} = x - L

    for each quantity :math:`x` and level :math:`L` (peak skin dose, total K_a,r, total P_KA,
    total fluoroscopy time). With ``skin_field_area_cm2`` the P_KA level is scaled to that
    field, :math:`L_{P_{KA}} = 500\\,\\text{Gy·cm}^2 \\times A / 100\\,\\text{cm}^2` (NCRP 168's
    note, from memory).

    Returns
    -------
    list of LevelCheck
        In the order of the data file: peak skin dose, K_a,r, P_KA, fluoroscopy time.

    Examples
    --------
    >>> [c.crossed for c in substantial_dose_levels_crossed(reference_point_air_kerma_mgy=6000)]
    [None, True, None, None]
    """
    values = {
        "peak_skin_dose": _value("peak_skin_dose_mgy", peak_skin_dose_mgy),
        "reference_point_air_kerma": _value(
            "reference_point_air_kerma_mgy", reference_point_air_kerma_mgy
        ),
        "air_kerma_area_product": _value("dap_gy_cm2", dap_gy_cm2),
        "fluoroscopy_time": (
            None
            if fluoroscopy_time_s is None
            else _value("fluoroscopy_time_s", fluoroscopy_time_s) / 60.0  # type: ignore[operator]
        ),
    }
    field = _value("skin_field_area_cm2", skin_field_area_cm2)
    out = []
    for key, level in substantial_dose_levels().items():
        threshold = level.value
        note = level.note or None
        if key == "air_kerma_area_product" and field:
            threshold = level.value * field / _REFERENCE_FIELD_CM2
            note = f"level scaled to a {field:g} cm² field at the skin ({level.note})"
        value = values.get(key)
        out.append(
            LevelCheck(
                key=key,
                quantity=level.quantity,
                level=threshold,
                unit=level.unit,
                value=value,
                crossed=None if value is None else value >= threshold,
                ratio=None if value is None else value / threshold,
                excess=None if value is None else value - threshold,
                note=note,
            )
        )
    return out


CumulativeMethod = Literal["maps_added", "maps_added_assumed_alignment", "peaks_added", "none"]


@dataclass(frozen=True)
class CumulativeSkinDose:
    """One patient's skin dose over several procedures.

    Attributes
    ----------
    peak_skin_dose_mgy : float
        The best estimate: the peak of the added maps, or the sum of the peaks where the maps
        cannot be added (an upper bound then).
    lower_bound_mgy, upper_bound_mgy : float
        The highest single procedure's PSD; the sum of the procedures' PSDs.
    method : str
        ``"maps_added"``, ``"maps_added_assumed_alignment"`` (the same grid, but where a map
        lies along the body was assumed), ``"peaks_added"`` or ``"none"``.
    dose_mgy : ndarray or None
        The added map (the first map's grid), when the maps were added.
    procedures_used : tuple of int
        Indices of the procedures inside the window.
    notes : tuple of str
    """

    peak_skin_dose_mgy: float
    lower_bound_mgy: float
    upper_bound_mgy: float
    method: CumulativeMethod
    dose_mgy: NDArray[np.float64] | None
    procedures_used: tuple[int, ...]
    notes: tuple[str, ...]


def _same_frame(a: SkinDoseMap, b: SkinDoseMap) -> bool:
    ga, gb = a.grid, b.grid
    return (
        ga.shape == gb.shape
        and np.allclose(ga.around_mm, gb.around_mm, atol=0.5)
        and np.allclose(ga.along_mm, gb.along_mm, atol=0.5)
    )


def _alignment_assumed(m: SkinDoseMap) -> bool:
    return any("taken to lie at the isocentre" in a for a in m.assumptions)


def cumulative_skin_dose(
    maps: Sequence[SkinDoseMap],
    *,
    dates: Sequence[datetime] | None = None,
    window_days: float = 60.0,
    as_of: datetime | None = None,
) -> CumulativeSkinDose:
    """Cumulative skin dose of one patient's procedures within a window.

    Maps on the same frame (the same patient model and cells) are added cell by cell and the
    peak of the sum taken: :math:`D_c = \\sum_p D_{c,p}`, PSD = max over cells. Maps on
    different frames cannot be added: the sum of their peaks is the estimate (an upper bound;
    it supposes every peak fell on the same skin). Where a map's place along the body came from
    an assumed landmark, an added map says so (``maps_added_assumed_alignment``).

    Parameters
    ----------
    maps : sequence of SkinDoseMap
        One per procedure, all of one patient.
    dates : sequence of datetime, optional
        The procedures' dates; with them only those within ``window_days`` before ``as_of``
        (default the latest date) count.
    window_days : float
        The window, days (a setting of the application; 60 by default).
    """
    if dates is not None and len(dates) != len(maps):
        raise ModelError("dates and maps differ in number")
    if not (math.isfinite(window_days) and window_days > 0):
        raise ModelError("window_days must be a positive number of days")
    used = list(range(len(maps)))
    notes: list[str] = []
    if dates is not None and maps:
        end = as_of or max(dates)
        start = end - timedelta(days=window_days)
        used = [i for i, d in enumerate(dates) if start <= d <= end]
        if len(used) < len(maps):
            notes.append(
                f"{len(maps) - len(used)} procedure(s) outside the {window_days:g}-day "
                "window left out"
            )
    chosen = [maps[i] for i in used]
    if not chosen:
        return CumulativeSkinDose(0.0, 0.0, 0.0, "none", None, (), tuple(notes))
    peaks = [m.peak_skin_dose_mgy for m in chosen]
    lower, upper = max(peaks), math.fsum(peaks)
    if all(_same_frame(chosen[0], m) for m in chosen[1:]):
        total = np.sum([m.dose_mgy for m in chosen], axis=0)
        assumed = any(_alignment_assumed(m) for m in chosen)
        if assumed and len(chosen) > 1:
            notes.append(
                "maps added on an assumed place along the body: the sum of the peaks "
                f"({upper:.0f} mGy) bounds the cumulative peak from above"
            )
        return CumulativeSkinDose(
            float(total.max()),
            lower,
            upper,
            "maps_added_assumed_alignment" if assumed and len(chosen) > 1 else "maps_added",
            total,
            tuple(used),
            tuple(notes),
        )
    notes.append(
        "the maps describe different patient models or cells and cannot be added: the sum of "
        "the procedures' peaks is given (an upper bound)"
    )
    return CumulativeSkinDose(upper, lower, upper, "peaks_added", None, tuple(used), tuple(notes))
