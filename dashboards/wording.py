"""Words and symbols shown to people: the caution, status names, units, colours.

Everything a reader sees as text is written here once, so pages, figures and
the committee report say the same thing in the same words.

Status is never shown by colour alone: each status has a symbol and a short
phrase beside its colour. The colours are from the Okabe-Ito palette
(Okabe M, Ito K, *Color Universal Design*, 2002, https://jfly.uni-koeln.de/color/),
chosen to stay distinguishable under the common colour-vision deficiencies.
"""

from __future__ import annotations

import re
from dataclasses import dataclass

__all__ = [
    "CAUTION",
    "FLAG_STATUS_WORDS",
    "LEVEL_KIND_WORDS",
    "OKABE_ITO",
    "STATUS_LOOK",
    "StatusLook",
    "quantity_label",
    "quantity_short",
    "quantity_unit",
    "split_unit",
]

#: The caution shown on every page and in every report.
CAUTION = (
    "Every dose figure shown here is an estimate, for quality assurance and optimisation. "
    "Clinical decisions about a patient need a qualified medical physicist; "
    "local regulations and licensed practice take precedence."
)

#: Okabe-Ito colours by name (hex sRGB).
OKABE_ITO: dict[str, str] = {
    "black": "#000000",
    "orange": "#E69F00",
    "sky_blue": "#56B4E9",
    "bluish_green": "#009E73",
    "yellow": "#F0E442",
    "blue": "#0072B2",
    "vermillion": "#D55E00",
    "reddish_purple": "#CC79A7",
}


@dataclass(frozen=True)
class StatusLook:
    """How one review status is shown: symbol, short words, longer words, colour.

    Attributes
    ----------
    symbol : str
        A glyph that carries the status without colour.
    short : str
        Two or three words for a table cell.
    long : str
        One sentence for a legend or tooltip.
    colour : str
        Hex colour, always shown together with ``symbol`` and ``short``.
    rank : int
        Sort order, most urgent first (0).
    brief : str
        One or two words for a small figure cell.
    """

    symbol: str
    short: str
    long: str
    colour: str
    rank: int
    brief: str


#: The review statuses produced by the review core, in plain words.
STATUS_LOOK: dict[str, StatusLook] = {
    "above_level": StatusLook(
        "▲",
        "Over the level",
        "The median is over the reference level.",
        OKABE_ITO["vermillion"],
        0,
        "over",
    ),
    "possibly_above": StatusLook(
        "◆",
        "Maybe over",
        "The median is under the level, but its confidence interval reaches past it.",
        OKABE_ITO["orange"],
        1,
        "maybe over",
    ),
    "below_level": StatusLook(
        "●",
        "Under the level",
        "The median and its confidence interval are under the reference level.",
        OKABE_ITO["bluish_green"],
        3,
        "under",
    ),
    "insufficient_sample": StatusLook(
        "○",
        "Too few patients",
        "Too few standard-size patients to compare the median with a level.",
        "#8C8C8C",
        2,
        "too few",
    ),
    "no_level": StatusLook(
        "–",
        "No level to compare",
        "No reference level applies to this room, examination and quantity.",
        OKABE_ITO["sky_blue"],
        4,
        "no level",
    ),
}

#: Flag review states, in plain words.
FLAG_STATUS_WORDS: dict[str, str] = {
    "open": "Open",
    "acknowledged": "Seen, in hand",
    "closed": "Closed",
}

#: Kinds of reference level, in plain words.
LEVEL_KIND_WORDS: dict[str, str] = {
    "local": "Local level",
    "national": "National level",
}

# Unit suffixes of our field names (longest first) and how they read.
_UNIT_SUFFIXES: tuple[tuple[str, str], ...] = (
    ("_ugy_per_mas_1m", "µGy/mAs at 1 m"),
    ("_per_mas_1m", "per mAs at 1 m"),
    ("_mgy_cm2", "mGy·cm²"),
    ("_gy_cm2", "Gy·cm²"),
    ("_mgy_cm", "mGy·cm"),
    ("_mm_al", "mm Al"),
    ("_mm_cu", "mm Cu"),
    ("_mgy", "mGy"),
    ("_ugy", "µGy"),
    ("_kev", "keV"),
    ("_mas", "mAs"),
    ("_deg", "°"),
    ("_cm2", "cm²"),
    ("_kv", "kV"),
    ("_ma", "mA"),
    ("_ms", "ms"),
    ("_mm", "mm"),
    ("_cm", "cm"),
    ("_kg", "kg"),
    ("_s", "s"),
)

# Our quantity names as the trade says them (see GLOSSARY.md).
_LABELS: dict[str, str] = {
    "dap_gy_cm2": "Air kerma-area product (DAP)",
    "recon_dap_gy_cm2": "Air kerma-area product (DAP), reconstructed",
    "esak_mgy": "Entrance surface air kerma (ESAK)",
    "ctdivol_mgy": "Volume CT air kerma index (CTDIvol)",
    "dlp_mgy_cm": "CT air kerma-length product (DLP)",
    "ref_point_air_kerma_mgy": "Air kerma at the reference point (Ka,r)",
    "incident_air_kerma_mgy": "Incident air kerma (Ka,i)",
    "entrance_surface_dose_mgy": "Entrance surface dose (ESD)",
    "ssde_mgy": "Size-specific dose estimate (SSDE)",
    "mean_glandular_dose_mgy": "Mean glandular dose (MGD)",
    "agd_mgy": "Mean glandular dose (AGD)",
    "kvp_kv": "Tube voltage",
    "exposure_mas": "Tube current-exposure time product",
    "tube_current_ma": "Tube current",
    "exposure_time_ms": "Exposure time",
    "sid_mm": "Source-image distance",
    "ssd_mm": "Source-skin distance",
    "hvl1_mm_al": "First half-value layer",
    "hvl_mm_al": "Half-value layer",
    "output_ugy_per_mas_1m": "Tube output",
    "total_filtration_mm_al": "Total filtration",
    "patient_weight_kg": "Patient weight",
    "field_area_cm2": "Field area at the detector",
    "backscatter_factor": "Backscatter factor (B)",
    "fsd_mm": "Focus-to-skin distance",
    "table_transmission": "Table top and mattress transmission",
}

# Short names for figure axes and table cells.
_SHORT: dict[str, str] = {
    "dap_gy_cm2": "DAP",
    "recon_dap_gy_cm2": "DAP (reconstructed)",
    "esak_mgy": "ESAK",
    "ctdivol_mgy": "CTDIvol",
    "dlp_mgy_cm": "DLP",
    "ref_point_air_kerma_mgy": "Ka,r",
    "incident_air_kerma_mgy": "Ka,i",
    "entrance_surface_dose_mgy": "ESD",
    "ssde_mgy": "SSDE",
    "mean_glandular_dose_mgy": "MGD",
    "agd_mgy": "AGD",
}

_UNITLESS = re.compile(r"^[a-z][a-z0-9_]*$")


def split_unit(name: str) -> tuple[str, str]:
    """Split a field name with a unit suffix into its stem and a readable unit.

    Parameters
    ----------
    name : str
        A field name such as ``"kvp_kv"`` or ``"dap_gy_cm2"``.

    Returns
    -------
    tuple of str
        ``(stem, unit)``; ``unit`` is ``""`` when the name carries no known unit.

    Examples
    --------
    >>> split_unit("dap_gy_cm2")
    ('dap', 'Gy·cm²')
    >>> split_unit("standard_patient")
    ('standard_patient', '')
    """
    for suffix, unit in _UNIT_SUFFIXES:
        if name.endswith(suffix) and len(name) > len(suffix):
            return name[: -len(suffix)], unit
    return name, ""


def quantity_unit(name: str) -> str:
    """The readable unit of a field name (``""`` when it has none)."""
    return split_unit(name)[1]


def quantity_short(name: str, *, with_unit: bool = True) -> str:
    """A short name for a quantity (``"DAP (Gy·cm²)"``), for axes and table cells."""
    unit = quantity_unit(name)
    short = _SHORT.get(name) or quantity_label(name, with_unit=False)
    return f"{short} ({unit})" if with_unit and unit else short


def quantity_label(name: str, *, with_unit: bool = True) -> str:
    """A readable label for a field name, optionally with its unit in parentheses.

    Parameters
    ----------
    name : str
        A field name with a unit suffix, e.g. ``"esak_mgy"``.
    with_unit : bool
        Append ``" (unit)"`` when the name carries a unit.

    Examples
    --------
    >>> quantity_label("esak_mgy")
    'Entrance surface air kerma (ESAK) (mGy)'
    >>> quantity_label("focal_spot_mm", with_unit=False)
    'Focal spot'
    """
    stem, unit = split_unit(name)
    label = _LABELS.get(name)
    if label is None:
        words = stem if _UNITLESS.match(stem) else name
        label = words.replace("_", " ").strip().capitalize()
    if with_unit and unit:
        return f"{label} ({unit})"
    return label
