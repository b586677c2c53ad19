"""Names of numeric bands, one spelling each: ``<prefix><low>_<high><unit>`` (``ct_dw_20_25cm``,
``breast_50_60mm``; a decimal point written ``p``: ``breast_45p5_60mm``). Used by the CT size
bands (:mod:`.ct_size`) and the mammography thickness bands (:mod:`.mammography`)."""

from __future__ import annotations

import math

__all__ = ["band_bounds", "band_name"]


def _number(value: float) -> str:
    return f"{value:g}".replace(".", "p")


def band_name(prefix: str, low: float, high: float, unit: str) -> str:
    """``<prefix><low>_<high><unit>``."""
    return f"{prefix}{_number(low)}_{_number(high)}{unit}"


def band_bounds(name: str, prefix: str, unit: str, limit: float) -> tuple[float, float] | None:
    """``(low, high)`` of a name in its one spelling with ``0 < low < high <= limit``, else None."""
    if not name.startswith(prefix) or not name.endswith(unit):
        return None
    parts = name.removeprefix(prefix).removesuffix(unit).split("_")
    if len(parts) != 2:
        return None
    try:
        low, high = (float(p.replace("p", ".")) for p in parts)
    except ValueError:
        return None
    if not (math.isfinite(low) and math.isfinite(high) and 0 < low < high <= limit):
        return None
    if band_name(prefix, low, high, unit) != name:  # one spelling per band
        return None
    return low, high
