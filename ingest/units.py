"""Unit conversion at the edge: DICOM and UCUM unit strings to beamaudit's units.

Dose reports name their units in ``MeasurementUnitsCodeSequence`` with UCUM
codes (PS3.16 CID 82 and the UCUM specification, https://ucum.org/ucum);
image headers have fixed units set by PS3.3 (e.g. dGy·cm² for
(0018,115E)). Both meet here: a value is converted once, from the unit where it
sits to the unit in our field name, by an exact power-of-ten factor. A unit we
do not know, or one of another dimension, is refused, never guessed.

Examples
--------
>>> convert(1.2e-5, "Gy.m2", "Gy.cm2")
0.12
>>> convert(1.2, "dGy.cm2", "Gy.cm2")
0.12
>>> convert(442, "uA.s", "mA.s")
0.442
"""

from __future__ import annotations

import re

from .errors import IngestError

__all__ = ["UnitError", "convert", "dimension_of", "known_units", "normalise_unit"]

# unit -> (dimension, factor to the dimension's base unit). Exact decimal factors by
# definition of the SI prefixes (BIPM SI Brochure, 9th ed., Table 7) and of UCUM's
# "." (product) and "/" (quotient). Bases: Gy.cm2, mGy, s, mA.s, mA, mm, cm2, kV,
# mGy.cm, 1, 1/s, kg, N, kPa, mSv, mGy/mA.s, deg.
_UNITS: dict[str, tuple[str, float]] = {
    # air kerma-area product
    "Gy.m2": ("kerma_area", 1e4),
    "dGy.m2": ("kerma_area", 1e3),
    "cGy.m2": ("kerma_area", 1e2),
    "mGy.m2": ("kerma_area", 1e1),
    "uGy.m2": ("kerma_area", 1e-2),
    "Gy.cm2": ("kerma_area", 1.0),
    "dGy.cm2": ("kerma_area", 1e-1),
    "cGy.cm2": ("kerma_area", 1e-2),
    "mGy.cm2": ("kerma_area", 1e-3),
    "uGy.cm2": ("kerma_area", 1e-6),
    # air kerma, absorbed dose
    "Gy": ("dose", 1e3),
    "dGy": ("dose", 1e2),
    "cGy": ("dose", 1e1),
    "mGy": ("dose", 1.0),
    "uGy": ("dose", 1e-3),
    # time
    "h": ("time", 3600.0),
    "min": ("time", 60.0),
    "s": ("time", 1.0),
    "ms": ("time", 1e-3),
    "us": ("time", 1e-6),
    # tube current-exposure time product
    "A.s": ("charge", 1e3),
    "mA.s": ("charge", 1.0),
    "uA.s": ("charge", 1e-3),
    # tube current
    "A": ("current", 1e3),
    "mA": ("current", 1.0),
    "uA": ("current", 1e-3),
    # length
    "m": ("length", 1e3),
    "cm": ("length", 1e1),
    "mm": ("length", 1.0),
    "um": ("length", 1e-3),
    # area
    "m2": ("area", 1e4),
    "cm2": ("area", 1.0),
    "mm2": ("area", 1e-2),
    # tube voltage
    "kV": ("voltage", 1.0),
    "V": ("voltage", 1e-3),
    # kerma-length product
    "Gy.cm": ("kerma_length", 1e3),
    "mGy.cm": ("kerma_length", 1.0),
    "mGy.mm": ("kerma_length", 1e-1),
    "Gy.m": ("kerma_length", 1e5),
    # dimensionless and rates
    "1": ("one", 1.0),
    "%": ("one", 1e-2),
    "/s": ("rate", 1.0),
    "/min": ("rate", 1.0 / 60.0),
    # patient and mammography quantities
    "kg": ("mass", 1.0),
    "g": ("mass", 1e-3),
    "N": ("force", 1.0),
    "daN": ("force", 10.0),
    "kPa": ("pressure", 1.0),
    "Pa": ("pressure", 1e-3),
    "hPa": ("pressure", 1e-1),
    "mSv": ("effective_dose", 1.0),
    "Sv": ("effective_dose", 1e3),
    "uSv": ("effective_dose", 1e-3),
    "mGy/mA.s": ("output", 1.0),
    "uGy/mA.s": ("output", 1e-3),
    "deg": ("angle", 1.0),
}

# spellings seen outside strict UCUM -> UCUM (µ for u, "mAs", "cm^2", spaces, "sec")
_ALIASES: dict[str, str] = {
    "mAs": "mA.s",
    "uAs": "uA.s",
    "As": "A.s",
    "sec": "s",
    "Gym2": "Gy.m2",
    "dGycm2": "dGy.cm2",
    "mGycm": "mGy.cm",
    "[degree]": "deg",
    "°": "deg",
}

_ANNOTATION = re.compile(r"\{[^}]*\}")


class UnitError(IngestError, ValueError):
    """A unit string we do not know, or a conversion across dimensions (code ``bad_value``).

    Its text is the message alone (no code), as callers quote it inside their own reasons.
    """

    def __init__(self, message: str) -> None:
        super().__init__("bad_value", message)

    def __str__(self) -> str:
        return self.reason

    def __reduce__(self) -> tuple[type[UnitError], tuple[str]]:  # type: ignore[override]
        return (type(self), (self.reason,))


def normalise_unit(unit: str) -> str:
    """The UCUM spelling of ``unit``: annotations dropped, µ as ``u``, ``^`` and
    ``*`` removed, known aliases resolved (``"{ratio}"`` -> ``"1"``,
    ``"{pulse}/s"`` -> ``"/s"``, ``"mAs"`` -> ``"mA.s"``)."""
    text = _ANNOTATION.sub("", unit.strip())
    text = text.replace("µ", "u").replace("μ", "u").replace("^", "").replace(" ", "")
    text = text.replace("*", ".")
    if not text:
        return "1"
    return _ALIASES.get(text, text)


def dimension_of(unit: str) -> str:
    """The physical dimension beamaudit knows ``unit`` by (``"dose"``, ``"time"``...).

    Raises
    ------
    UnitError
        If the unit is unknown.
    """
    key = normalise_unit(unit)
    try:
        return _UNITS[key][0]
    except KeyError:
        raise UnitError(f"unknown unit {unit!r}") from None


def known_units() -> tuple[str, ...]:
    """Every UCUM unit string :func:`convert` accepts (aliases aside)."""
    return tuple(_UNITS)


def convert(value: float, from_unit: str, to_unit: str) -> float:
    """``value`` expressed in ``from_unit``, converted to ``to_unit``.

    .. math:: v_\\text{to} = v_\\text{from} \\, f_\\text{from} / f_\\text{to}

    where :math:`f` is each unit's exact factor to its dimension's base unit.

    Parameters
    ----------
    value
        The number as read.
    from_unit, to_unit
        UCUM unit strings (annotations such as ``{ratio}`` are ignored).

    Raises
    ------
    UnitError
        If either unit is unknown or the two are of different dimensions.
    """
    src = normalise_unit(from_unit)
    dst = normalise_unit(to_unit)
    if src == dst:
        return float(value)
    try:
        dim_src, f_src = _UNITS[src]
    except KeyError:
        raise UnitError(f"unknown unit {from_unit!r}") from None
    try:
        dim_dst, f_dst = _UNITS[dst]
    except KeyError:
        raise UnitError(f"unknown unit {to_unit!r}") from None
    if dim_src != dim_dst:
        raise UnitError(f"cannot convert {from_unit!r} ({dim_src}) to {to_unit!r} ({dim_dst})")
    ratio = f_src / f_dst
    result = float(value) * ratio if ratio >= 1.0 else float(value) / (f_dst / f_src)
    # The factors are exact powers of ten; round away the binary representation
    # noise of the product (1.2e-5 * 1e4 = 0.12000000000000001) at 15 significant
    # digits, below the 16 characters a DS value can hold.
    return float(f"{result:.15g}")
