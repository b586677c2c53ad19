"""Numbers as a reader sees them: rounded to what they mean, with their unit.

A dose estimate is good to a few per cent at best, so a page shows three significant figures,
never the sixteen digits a float carries; a value with a standard uncertainty is rounded to the
uncertainty's second significant figure (the GUM's advice, JCGM 100:2008 §7.2.6); counts and
distances of a thousand or more keep their units digit; a half-value layer keeps two decimals
(mm Al, as QA reports write it); a ratio (unit ``"1"``) keeps two. The unit ``"1"`` of a ratio is
never shown.
"""

from __future__ import annotations

import math
import numbers
from typing import Any

from beamaudit.dashboards.wording import quantity_unit

__all__ = [
    "EMPTY",
    "format_estimate",
    "format_level",
    "format_number",
    "format_quantity",
    "is_number",
]

#: What an empty value shows as.
EMPTY = "–"

#: Units whose values are given to a fixed number of decimals rather than significant figures.
_DECIMALS: dict[str, int] = {"mm Al": 2, "mm Cu": 2, "1": 2}


def is_number(value: Any) -> bool:
    """A finite real number (not a bool)."""
    return (
        isinstance(value, numbers.Real)
        and not isinstance(value, bool)
        and math.isfinite(float(value))
    )


def format_number(value: Any, unit: str = "", *, digits: int = 3) -> str:
    """``value`` rounded to what it means: ``digits`` significant figures, whole numbers from
    a thousand up, fixed decimals for HVL and plain ratios (see the module docstring).

    Examples
    --------
    >>> format_number(3.4437997188749323, "mm Al")
    '3.44'
    >>> format_number(411.8, "mAs"), format_number(1150.0, "mm"), format_number(0.08217, "Gy·cm²")
    ('412', '1150', '0.0822')
    >>> format_number(78.0, "kV"), format_number(1.0324233957472893, "1"), format_number(833.4)
    ('78', '1.03', '833')
    """
    if not is_number(value):
        return EMPTY
    x = float(value)
    if unit in _DECIMALS:
        return f"{x:.{_DECIMALS[unit]}f}"
    if x == 0:
        return "0"
    if abs(x) >= 10 ** (digits - 1) or (float(x).is_integer() and abs(x) < 1e15):
        return f"{x:.0f}"
    places = digits - 1 - math.floor(math.log10(abs(x)))
    return f"{x:.{max(places, 0)}f}"


def format_quantity(value: Any, name_or_unit: str, *, digits: int = 3) -> str:
    """``value`` with its unit (``"412 mAs"``); the unit taken from a field name's suffix
    (``exposure_mas``) or given as is; no unit for ``"1"`` or ``""``."""
    unit = quantity_unit(name_or_unit) or name_or_unit
    if "_" in unit:  # a field name without a unit suffix: a plain number
        unit = ""
    text = format_number(value, unit, digits=digits)
    if text == EMPTY or unit in ("", "1"):
        return text
    return f"{text} {unit}"


def format_estimate(value: Any, uncertainty: Any, unit: str = "") -> str:
    """An estimate with its standard uncertainty (``"19.2 ± 1.2"``), both rounded at the
    uncertainty's second significant figure; without a positive uncertainty, the value alone.

    Examples
    --------
    >>> format_estimate(19.17817833415946, 1.179600412539442)
    '19.2 ± 1.2'
    >>> format_estimate(1.3869590693323166, 0.02774882290953852)
    '1.387 ± 0.028'
    >>> format_estimate(2.907353971200927, 0.0, "mm Al")
    '2.91'
    """
    if not is_number(value):
        return EMPTY
    if not is_number(uncertainty) or float(uncertainty) <= 0:
        return format_number(value, unit)
    u = float(uncertainty)
    places = max(1 - math.floor(math.log10(u)), 0)
    return f"{float(value):.{places}f} ± {u:.{places}f}"


def format_level(value: Any, name_or_unit: str = "") -> str:
    """A reference level as it was set (``"0.1 Gy·cm²"``, ``"1.8 Gy·cm²"``, ``"950 mGy·cm"``):
    up to four significant figures, no trailing zeros, with its unit when one is given."""
    if not is_number(value):
        return EMPTY
    unit = (quantity_unit(name_or_unit) or name_or_unit) if name_or_unit else ""
    text = f"{float(value):.4g}"
    return f"{text} {unit}" if unit and unit != "1" and "_" not in unit else text
