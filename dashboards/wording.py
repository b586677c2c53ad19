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
from collections.abc import Mapping
from dataclasses import dataclass

from beamaudit import CAUTION as _CAUTION

__all__ = [
    "CAUTION",
    "FLAG_KIND_WORDS",
    "FLAG_STATUS_WORDS",
    "LEVEL_KIND_WORDS",
    "OKABE_ITO",
    "SEVERITY_WORDS",
    "STATUS_LOOK",
    "TRIAGE_ACTIONS",
    "VOCABULARY",
    "StatusLook",
    "exam_name",
    "patient_group_words",
    "quantity_label",
    "quantity_short",
    "quantity_unit",
    "short_group_label",
    "split_unit",
    "user_text",
    "words_for",
]

#: The caution shown on every page and in every report.
CAUTION = _CAUTION  # the package's one wording (beamaudit.CAUTION)

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


#: The review statuses produced by the review core, in plain words (see :data:`VOCABULARY`).
STATUS_LOOK: dict[str, StatusLook] = {
    "above_level": StatusLook(
        "▲",
        "Above the level",
        "The median and its whole confidence interval are above the reference level.",
        OKABE_ITO["vermillion"],
        0,
        "above",
    ),
    "possibly_above": StatusLook(
        "◆",
        "Possibly above",
        "The confidence interval of the median reaches past the reference level.",
        OKABE_ITO["orange"],
        1,
        "possibly above",
    ),
    "below_level": StatusLook(
        "●",
        "Below the level",
        "The median and its confidence interval are below the reference level.",
        OKABE_ITO["bluish_green"],
        3,
        "below",
    ),
    "insufficient_sample": StatusLook(
        "○",
        "Too few patients",
        "Too few standard-size patients to compare the median with a level: no verdict.",
        "#8C8C8C",
        2,
        "too few",
    ),
    "no_level": StatusLook(
        "–",
        "No level",
        "No reference level applies to this room, examination and quantity.",
        OKABE_ITO["sky_blue"],
        4,
        "no level",
    ),
}

#: Triage states of a finding (a flag shows its finding's), one word each.
FLAG_STATUS_WORDS: dict[str, str] = {
    "open": "Open",
    "acknowledged": "Acknowledged",
    "closed": "Closed",
}

#: What a physicist can do to a finding, by the state it leads to (the verbs of the triage form).
TRIAGE_ACTIONS: dict[str, str] = {
    "acknowledged": "Acknowledge",
    "closed": "Close",
    "open": "Reopen",
}

#: How serious a flag is, one word each (the review core's severities).
SEVERITY_WORDS: dict[str, str] = {
    "action": "Action",
    "warning": "Warning",
    "info": "Information",
}

#: Kinds of reference level, in plain words. International guidance (IAEA BSS 115) is a kind of
#: its own: it is neither a national level nor the site's own.
LEVEL_KIND_WORDS: dict[str, str] = {
    "local": "Local level",
    "national": "National level",
    "international": "International guidance",
}

#: Kinds of flag the review raises, and the overview's other findings, in plain words.
FLAG_KIND_WORDS: dict[str, str] = {
    "group_above_level": "Median above a level",
    "exam_above_investigation_level": "Single exam above the investigation level",
    "srdl_exceeded": "Substantial radiation dose level exceeded",
    "dap_ratio_out_of_tolerance": "Reported DAP off the reconstruction",
    "mgd_ratio_off_baseline": "Reported AGD off the room's usual ratio",
    "changepoint": "Change in a monthly median",
    "deviation_index_out_of_range": "Deviation index out of range",
    "no_dose_data": "Exam without dose values",
    "unknown_exam_type": "Exam type not in the catalogue",
    "unmapped_events": "Unmapped protocols",
    "low_dose_review": "Low dose: image quality review",
    "rejected_files": "Rejected files",
}

#: Every state a reader meets, one word (or phrase) each, for the pages, the committee report,
#: the command line and the exports to share: ``{what: {state: words}}``.
VOCABULARY: dict[str, dict[str, str]] = {
    "review status": {k: v.short for k, v in STATUS_LOOK.items()},
    "finding status": FLAG_STATUS_WORDS,
    "triage action": TRIAGE_ACTIONS,
    "severity": SEVERITY_WORDS,
    "level kind": LEVEL_KIND_WORDS,
    "finding kind": FLAG_KIND_WORDS,
}


_UNITLESS = re.compile(r"^[a-z][a-z0-9_]*$")


def words_for(table: Mapping[str, str], value: str | None, *, empty: str = "–") -> str:
    """``table[value]``, else ``value`` with its underscores as spaces, else ``empty``.

    Examples
    --------
    >>> words_for(FLAG_KIND_WORDS, "changepoint")
    'Change in a monthly median'
    >>> words_for(FLAG_KIND_WORDS, "new_kind")
    'New kind'
    """
    if not value:
        return empty
    if value in table:
        return table[value]
    if not _UNITLESS.match(value):
        return value
    words = [_ABBREVIATIONS.get(w, w) for w in value.split("_") if w]
    text = " ".join(words)
    return text[:1].upper() + text[1:]


def exam_name(code: str | None, names: Mapping[str, str] | None, *, empty: str = "–") -> str:
    """The catalogue's name of an examination type (its code when the catalogue has none)."""
    if not code:
        return empty
    return (names or {}).get(code) or code


_BAND = re.compile(r"^(weight|age)_(\d+)(m|y)?_(\d+|up)(kg|m|y)?$")
_BAND_UNITS = {"kg": "kg", "m": "months", "y": "years", None: ""}


def patient_group_words(code: str | None) -> str:
    """A patient group code in words, where the caller has no label from the review.

    The API hands over the review's own label (``patient_group_label``); this reads the shape of
    the shipped band codes so that a page never shows a code.

    Examples
    --------
    >>> patient_group_words("weight_15_30kg")
    'children 15–< 30 kg'
    >>> patient_group_words("age_1_6y")
    'children 1–< 6 years'
    >>> patient_group_words(None)
    'adults'
    """
    if not code:
        return "adults"
    size = re.match(r"^ct_dw_(\d+)_(\d+)cm$", code)
    if size is not None:
        return f"water-equivalent diameter {size.group(1)}–< {size.group(2)} cm"
    match = _BAND.match(code)
    if match is None:
        return code.replace("_", " ")
    _, low, low_unit, high, unit = match.groups()
    words = _BAND_UNITS.get(unit or low_unit, "")
    if high == "1" and words.endswith("s"):
        words = words[:-1]
    if high == "up":
        return f"children from {low} {words}".rstrip()
    if low_unit and unit and low_unit != unit:
        return f"children {low} {_BAND_UNITS[low_unit]}–< {high} {words}"
    return f"children {low}–< {high} {words}".rstrip()


def short_group_label(label: object) -> str:
    """A patient group's label for a chart or a headline: without its parenthesis, '' for none
    (``compressed breast 50-60 mm (the band ...)`` -> ``compressed breast 50-60 mm``)."""
    if not isinstance(label, str) or not label.strip():
        return ""
    return label.split(" (")[0].strip()


#: Provenance phrases written for developers and the words a reader of a page gets instead
#: (what they mean for the figure, not how the project keeps track of its sources).
_USER_PHRASES: tuple[tuple[re.Pattern[str], str], ...] = (
    (
        re.compile(r"cells written from memory, to be confirmed against the original", re.I),
        "table values not yet checked against the published original",
    ),
    (
        re.compile(r"\(?coefficients from memory,?", re.I),
        "(coefficients not yet checked against the published original,",
    ),
    (re.compile(r"\bfrom memory\b", re.I), "not yet checked against the published original"),
)


def user_text(text: str) -> str:
    """``text`` as a page shows it: provenance notes meant for developers put in a reader's words.

    Examples
    --------
    >>> user_text("water table; cells written from memory, to be confirmed against the original")
    'water table; table values not yet checked against the published original'
    """
    for pattern, words in _USER_PHRASES:
        text = pattern.sub(words, text)
    return text


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

# Our quantity names as the trade says them (see GLOSSARY.md); an abbreviation comes after a
# comma, so that a unit can follow in parentheses without two parentheses in a row.
_LABELS: dict[str, str] = {
    "dap_gy_cm2": "Air kerma-area product (DAP)",
    "recon_dap_gy_cm2": "Reconstructed air kerma-area product (DAP)",
    "esak_mgy": "Entrance surface air kerma (ESAK)",
    "ctdivol_mgy": "Volume CT air kerma index (CTDIvol)",
    "dlp_mgy_cm": "CT air kerma-length product (DLP)",
    "reference_point_air_kerma_mgy": "Air kerma at the reference point (Ka,r)",
    "incident_air_kerma_mgy": "Incident air kerma (Ka,i)",
    "entrance_surface_dose_mgy": "Entrance surface dose (ESD)",
    "entrance_dose_mgy": "Entrance surface dose (ESD)",
    "ssde_mgy": "Size-specific dose estimate (SSDE)",
    "water_equivalent_diameter_cm": "Water-equivalent diameter (Dw), scan-range average",
    "water_equivalent_diameter_centre_cm": "Water-equivalent diameter (Dw) at the scan centre",
    "mean_glandular_dose_mgy": "Mean glandular dose (MGD)",
    "mgd_mgy": "Mean glandular dose (MGD)",
    "kvp_kv": "Tube voltage",
    "exposure_mas": "Tube current-exposure time product",
    "tube_current_ma": "Tube current",
    "exposure_time_ms": "Exposure time",
    "sid_mm": "Source-image distance (SID)",
    "ssd_mm": "Source-skin distance",
    "fsd_mm": "Focus-to-skin distance (FSD)",
    "plane_mm": "Distance from the focus to the field's plane",
    "hvl1_mm_al": "First half-value layer (HVL₁)",
    "hvl_mm_al": "Half-value layer (HVL)",
    "output_ugy_per_mas_1m": "Tube output",
    "total_filtration_mm_al": "Total filtration",
    "patient_weight_kg": "Patient weight",
    "body_part_thickness_mm": "Body part thickness",
    "field_area_cm2": "Field area at the detector",
    "entrance_field_area_cm2": "Field area at the skin",
    "entrance_field_side_cm": "Field side at the skin (equivalent square)",
    "side_at_plane_cm": "Field side at the field's plane (equivalent square)",
    "backscatter_factor": "Backscatter factor (B)",
    "backscatter_kernels": "Backscatter kernels",
    "beam_model": "Beam model",
    "table_transmission": "Table top and mattress transmission",
    "deviation_index": "Deviation index (DI)",
    "exposure_index": "Exposure index (EI)",
    "standard_uncertainty": "Standard uncertainty",
    "statistical_uncertainty": "Statistical uncertainty",
    "model_relative_uncertainty": "Relative model uncertainty",
    "fluoro_time_s": "Fluoroscopy time",
    # mammography (the exam page's technique rows and the Dance method's trail)
    "compressed_thickness_mm": "Compressed breast thickness",
    "thickness_mm": "Compressed breast thickness",
    "compression_force_n": "Compression force (N)",
    "target_filter": "Target/filter",
    "view_position": "View",
    "image_laterality": "Breast",
    "mammography_acquisition": "Acquisition",
    "mammography_intent": "Screening or diagnostic",
    "glandularity": "Glandularity (mass fraction)",
    "glandularity_percent": "Glandularity used (%)",
    "g": "g (50 % glandular, reference beam)",
    "c": "c (glandularity)",
    "s": "s (spectrum)",
    "tomo_factor": "T (tomosynthesis)",
}

# Short names for figure axes and table cells.
_SHORT: dict[str, str] = {
    "dap_gy_cm2": "DAP",
    "recon_dap_gy_cm2": "Reconstructed DAP",
    "esak_mgy": "ESAK",
    "ctdivol_mgy": "CTDIvol",
    "dlp_mgy_cm": "DLP",
    "reference_point_air_kerma_mgy": "Ka,r",
    "incident_air_kerma_mgy": "Ka,i",
    "entrance_surface_dose_mgy": "ESD",
    "entrance_dose_mgy": "ESD",
    "ssde_mgy": "SSDE",
    "water_equivalent_diameter_cm": "Dw",
    "water_equivalent_diameter_centre_cm": "Dw (centre)",
    "mean_glandular_dose_mgy": "MGD",
    "mgd_mgy": "MGD",
    "fsd_mm": "FSD",
    "sid_mm": "SID",
    "hvl1_mm_al": "HVL₁",
    "hvl_mm_al": "HVL",
}

# Words of a field name that are abbreviations, written as the trade writes them.
_ABBREVIATIONS: dict[str, str] = {
    w.lower(): w
    for w in (
        "AEC", "AGD", "CT", "CTDIvol", "DAP", "DI", "DICOM", "DLP", "EI", "ESAK", "ESD", "FSD",
        "HVL", "ID", "KAP", "MGD", "RDSR", "SID", "SOD", "SOP", "SSD", "SSDE", "UID",
    )
}  # fmt: skip


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
    return _with_unit(short, unit) if with_unit else short


def quantity_label(name: str, *, with_unit: bool = True) -> str:
    """A readable label for a field name, optionally with its unit.

    A label that ends in parentheses (an abbreviation) takes its unit after a comma, never a
    second pair of parentheses.

    Parameters
    ----------
    name : str
        A field name with a unit suffix, e.g. ``"esak_mgy"``.
    with_unit : bool
        Append the unit when the name carries one.

    Examples
    --------
    >>> quantity_label("esak_mgy")
    'Entrance surface air kerma (ESAK), mGy'
    >>> quantity_label("kvp_kv")
    'Tube voltage (kV)'
    >>> quantity_label("focal_spot_mm", with_unit=False)
    'Focal spot'
    >>> quantity_label("fsd_mm", with_unit=False)
    'Focus-to-skin distance (FSD)'
    >>> quantity_label("aec_dose_level", with_unit=False)
    'AEC dose level'
    """
    stem, unit = split_unit(name)
    label = _LABELS.get(name)
    if label is None:
        words = (stem if _UNITLESS.match(stem) else name).replace("_", " ").strip().split(" ")
        words = [_ABBREVIATIONS.get(w.lower(), w) for w in words if w]
        label = " ".join(words)
        label = label[:1].upper() + label[1:]
    return _with_unit(label, unit) if with_unit else label


def _with_unit(label: str, unit: str) -> str:
    if not unit:
        return label
    return f"{label}, {unit}" if label.endswith(")") else f"{label} ({unit})"
