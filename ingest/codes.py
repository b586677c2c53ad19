"""Coded values of dose reports and image headers, mapped to beamaudit's words.

Concept codes are pairs ``(CodeValue, CodingSchemeDesignator)``. Older dose
reports use retired SNOMED-RT (``SRT``) codes; :func:`canonical` turns each into
its current SNOMED CT (``SCT``) equivalent so that matching works on one
spelling. The alias table is PS3.16's SRT-to-SCT mapping as shipped in pydicom
3.0 (``pydicom.sr.coding.Code`` equality), restricted to the codes that occur in
TID 10001-10015 (see DICOM-NOTES section 2.9; ``tests/ingest/test_codes.py``
checks every row against pydicom's equality). Value sets are PS3.16 CIDs,
named beside each table.
"""

from __future__ import annotations

import re

__all__ = [
    "ACQUISITION_PLANES",
    "ANODE_MATERIALS",
    "CT_PHANTOM_DIAMETERS_CM",
    "DEVICE_TYPES",
    "ELEMENT_SYMBOLS",
    "EVENT_TYPES",
    "FILTER_MATERIALS",
    "FILTER_TYPES",
    "FLUORO_MODES",
    "GRIDS",
    "HEADER_MATERIALS",
    "LATERALITIES",
    "MAMMOGRAPHY_DIAGNOSTIC_VIEW_MODIFIERS",
    "MAMMOGRAPHY_VIEW_MODIFIERS",
    "PATIENT_ORIENTATIONS",
    "PATIENT_ORIENTATION_MODIFIERS",
    "PATIENT_TABLE_RELATIONSHIPS",
    "PROCEDURE_FAMILIES",
    "PROCEDURE_INTENTS",
    "REFERENCE_POINTS",
    "RETIRED_CODES",
    "VIEW_MEANINGS",
    "CodeKey",
    "canonical",
    "intent_from_words",
    "material_from_meaning",
    "view_from_meaning",
]

CodeKey = tuple[str, str]

# retired code -> current code (SRT -> SCT per pydicom's PS3.16 mapping; one DCM code
# retired within PS3.16: 113735 "Exposure Time" replaced by 113824)
RETIRED_CODES: dict[CodeKey, CodeKey] = {
    ("P5-06000", "SRT"): ("44491008", "SCT"),  # Fluoroscopy
    ("P5-08001", "SRT"): ("116152004", "SCT"),  # Spiral Acquisition
    ("P5-08000", "SRT"): ("77477000", "SCT"),  # Computed Tomography X-Ray
    ("P5-40010", "SRT"): ("71651007", "SCT"),  # Mammography
    ("G-C0E8", "SRT"): ("363703001", "SCT"),  # Has Intent
    ("G-C171", "SRT"): ("272741003", "SCT"),  # Laterality
    ("G-C036", "SRT"): ("370129005", "SCT"),  # Measurement Method
    ("G-C32C", "SRT"): ("408730004", "SCT"),  # Procedure Context
    ("R-FB8F1", "SRT"): ("702569007", "SCT"),  # Cone Beam Acquisition
    ("C-16400", "SRT"): ("26194003", "SCT"),  # Tungsten
    ("C-15000", "SRT"): ("71128006", "SCT"),  # Molybdenum
    ("C-16700", "SRT"): ("59801003", "SCT"),  # Rhodium
    ("C-12000", "SRT"): ("12503006", "SCT"),  # Aluminum
    ("C-12700", "SRT"): ("66925006", "SCT"),  # Copper
    ("C-13700", "SRT"): ("41967008", "SCT"),  # Silver
    ("C-13200", "SRT"): ("88488004", "SCT"),  # Lead
    ("C-13900", "SRT"): ("12597001", "SCT"),  # Tin
    ("C-15600", "SRT"): ("45215009", "SCT"),  # Tantalum
    ("A-2C090", "SRT"): ("15869005", "SCT"),  # Dosimeter
    ("R-0038D", "SRT"): ("373066001", "SCT"),  # Yes
    ("R-00339", "SRT"): ("373067005", "SCT"),  # No
    ("113735", "DCM"): ("113824", "DCM"),  # Exposure Time (retired code of TID 10003B)
    # patient position on the table (CID 19, 20, 21), read for skin-dose maps
    ("F-10470", "SRT"): ("102540008", "SCT"),  # headfirst
    ("F-10480", "SRT"): ("102541007", "SCT"),  # feet-first
    ("F-10450", "SRT"): ("102538003", "SCT"),  # recumbent
    ("F-10460", "SRT"): ("102539006", "SCT"),  # semi-erect
    ("F-10340", "SRT"): ("40199007", "SCT"),  # supine
    ("F-10310", "SRT"): ("1240000", "SCT"),  # prone
    ("F-10319", "SRT"): ("102536004", "SCT"),  # left lateral decubitus
    ("F-10317", "SRT"): ("102535000", "SCT"),  # right lateral decubitus
    ("R-10515", "SRT"): ("399220000", "SCT"),  # transverse
    ("R-10516", "SRT"): ("399366008", "SCT"),  # oblique
    ("G-A100", "SRT"): ("24028007", "SCT"),  # Right
    ("G-A101", "SRT"): ("7771000", "SCT"),  # Left
    ("G-A102", "SRT"): ("51440002", "SCT"),  # Bilateral
    ("T-04020", "SRT"): ("73056007", "SCT"),  # Right breast
    ("T-04030", "SRT"): ("80248007", "SCT"),  # Left breast
    # CID 3629 Procedure Intent and CID 4015 View Modifier for Mammography, read for screening
    # or diagnostic
    ("R-42453", "SRT"): ("360156006", "SCT"),  # Screening Intent
    ("R-408C3", "SRT"): ("261004008", "SCT"),  # Diagnostic Intent
    ("R-102D6", "SRT"): ("399163009", "SCT"),  # Magnification
    ("R-102D7", "SRT"): ("399055006", "SCT"),  # Spot Compression
    ("R-102D3", "SRT"): ("399197002", "SCT"),  # Rolled Lateral
    ("R-102D4", "SRT"): ("399226006", "SCT"),  # Rolled Medial
    ("R-102C9", "SRT"): ("415670009", "SCT"),  # Rolled Superior
    ("R-102CA", "SRT"): ("414493004", "SCT"),  # Rolled Inferior
    ("R-102C2", "SRT"): ("399110001", "SCT"),  # tangential
    ("R-102D2", "SRT"): ("399161006", "SCT"),  # Cleavage
    ("R-102D1", "SRT"): ("399011000", "SCT"),  # Axillary Tail
    ("R-102D5", "SRT"): ("399209000", "SCT"),  # Implant Displaced
}

# the same SNOMED codes are written with scheme "SNM3" by some early writers
_SCHEME_ALIASES = {"SNM3": "SRT", "SNOMED": "SRT", "99SDM": "SRT"}


def canonical(value: str, scheme: str) -> CodeKey:
    """The current spelling of code ``(value, scheme)``: retired SNOMED-RT codes
    become their SNOMED CT equivalents, everything else is returned as given
    (stripped).

    Examples
    --------
    >>> canonical("P5-06000", "SRT")
    ('44491008', 'SCT')
    >>> canonical("122130", "DCM")
    ('122130', 'DCM')
    """
    key = (value.strip(), scheme.strip().upper())
    if key[1] in _SCHEME_ALIASES:
        key = (key[0], _SCHEME_ALIASES[key[1]])
    return RETIRED_CODES.get(key, key)


# CID 10002 Irradiation Event Types and CID 10013 CT Acquisition Types
EVENT_TYPES: dict[CodeKey, str] = {
    ("113611", "DCM"): "stationary",
    ("113612", "DCM"): "stepping",
    ("113613", "DCM"): "rotational",
    ("44491008", "SCT"): "fluoroscopy",
    ("113804", "DCM"): "ct_sequenced",
    ("116152004", "SCT"): "ct_spiral",
    ("113805", "DCM"): "ct_localizer",  # Constant Angle Acquisition
    ("113806", "DCM"): "ct_stationary",
    ("113807", "DCM"): "ct_free",
    ("702569007", "SCT"): "ct_cone_beam",
}

# CID 10006 X-Ray Filter Materials and CID 10016 Anode Target Materials (SCT)
FILTER_MATERIALS: dict[CodeKey, str] = {
    ("12503006", "SCT"): "aluminium",
    ("66925006", "SCT"): "copper",
    ("71128006", "SCT"): "molybdenum",
    ("59801003", "SCT"): "rhodium",
    ("41967008", "SCT"): "silver",
    ("88488004", "SCT"): "lead",
    ("12597001", "SCT"): "tin",
    ("45215009", "SCT"): "tantalum",
    ("767776000", "SCT"): "niobium",
    ("767775001", "SCT"): "europium",
    ("26194003", "SCT"): "tungsten",
}
ANODE_MATERIALS: dict[CodeKey, str] = {
    ("26194003", "SCT"): "tungsten",
    ("71128006", "SCT"): "molybdenum",
    ("59801003", "SCT"): "rhodium",
}

# Defined Terms of (0018,7050) Filter Material and (0018,1191) Anode Target Material, PS3.3
HEADER_MATERIALS: dict[str, str] = {
    "ALUMINUM": "aluminium",
    "ALUMINIUM": "aluminium",
    "COPPER": "copper",
    "MOLYBDENUM": "molybdenum",
    "RHODIUM": "rhodium",
    "NIOBIUM": "niobium",
    "EUROPIUM": "europium",
    "LEAD": "lead",
    "SILVER": "silver",
    "TIN": "tin",
    "TANTALUM": "tantalum",
    "TUNGSTEN": "tungsten",
}

# element symbols, for free-text filter descriptions such as "0.1Cu 1Al"
ELEMENT_SYMBOLS: dict[str, str] = {
    "Al": "aluminium",
    "Cu": "copper",
    "Mo": "molybdenum",
    "Rh": "rhodium",
    "Ag": "silver",
    "Pb": "lead",
    "Sn": "tin",
    "Ta": "tantalum",
    "Nb": "niobium",
    "Eu": "europium",
    "W": "tungsten",
}


def material_from_meaning(meaning: str) -> str | None:
    """A material named by a code meaning we do not know by code.

    Older reports carry SNOMED-RT compound codes (``C-1xxF9``, e.g. "Aluminum or
    aluminum compound") that have no SCT equivalent in pydicom's table; their
    meanings still name the element. Returns ``None`` when none is named.
    """
    text = meaning.lower()
    for word, name in (
        ("alumin", "aluminium"),
        ("copper", "copper"),
        ("molybden", "molybdenum"),
        ("rhodium", "rhodium"),
        ("silver", "silver"),
        ("lead", "lead"),
        ("tin", "tin"),
        ("tantalum", "tantalum"),
        ("niobium", "niobium"),
        ("europium", "europium"),
        ("tungsten", "tungsten"),
    ):
        if text.startswith(word) or f" {word}" in text:
            return name
    return None


# CID 10007 X-Ray Filter Types
FILTER_TYPES: dict[CodeKey, str] = {
    ("113650", "DCM"): "strip",
    ("113651", "DCM"): "wedge",
    ("113652", "DCM"): "butterfly",
    ("113653", "DCM"): "flat",
    ("111609", "DCM"): "none",
}

# CID 244 Laterality (Target Region's modifier in TID 10003) and CID 6022 Side (the modifier of
# TID 10005 Accumulated Average Glandular Dose) -> "L", "R", "B"
LATERALITIES: dict[CodeKey, str] = {
    ("7771000", "SCT"): "L",  # Left
    ("24028007", "SCT"): "R",  # Right
    ("51440002", "SCT"): "B",  # Bilateral (Right and left)
    ("80248007", "SCT"): "L",  # Left breast
    ("73056007", "SCT"): "R",  # Right breast
}

# CID 10017 X-Ray Grids
GRIDS: dict[CodeKey, str] = {
    ("111640", "DCM"): "virtual",
    ("111641", "DCM"): "fixed",
    ("111642", "DCM"): "focused",
    ("111643", "DCM"): "reciprocating",
    ("111644", "DCM"): "parallel",
    ("111645", "DCM"): "crossed",
    ("111646", "DCM"): "none",
}

# CID 10004 Fluoro Modes
FLUORO_MODES: dict[CodeKey, str] = {
    ("113630", "DCM"): "continuous",
    ("113631", "DCM"): "pulsed",
}

# CID 4052 Phantom Devices -> CTDI phantom diameter in cm (IEC 60601-2-44: head 16 cm,
# body 32 cm). NEMA XR 21-2000 names no single diameter here, so it maps to None.
CT_PHANTOM_DIAMETERS_CM: dict[CodeKey, float | None] = {
    ("113690", "DCM"): 16.0,
    ("113691", "DCM"): 32.0,
    ("130541", "DCM"): 10.0,
    ("113692", "DCM"): None,
}

# CID 10024 Water Equivalent Diameter Method (and the method codes TID 10013 also uses beside
# it); codes and meanings checked against pydicom's PS3.16 dictionary in the tests
WATER_EQUIVALENT_DIAMETER_METHODS: dict[CodeKey, str] = {
    ("113981", "DCM"): "representative_value",
    ("113982", "DCM"): "integrated_across_scan_range",
    ("113983", "DCM"): "from_raw_data",
    ("113984", "DCM"): "from_localizer",
    ("113992", "DCM"): "from_limited_fov_images",
    ("113990", "DCM"): "average_of_dw_z",
    ("113987", "DCM"): "aapm220",
}

# CID 10023 Size Specific Dose Estimation Method for CT
SSDE_METHODS: dict[CodeKey, str] = {
    ("113934", "DCM"): "aapm204_lateral",
    ("113935", "DCM"): "aapm204_ap",
    ("113936", "DCM"): "aapm204_lateral_plus_ap",
    ("113937", "DCM"): "aapm204_from_age",
    ("113988", "DCM"): "from_water_equivalent_diameter",
    ("113989", "DCM"): "average_of_ssde_z",
}

# CID 10003 Equipment Plane Identification
ACQUISITION_PLANES: dict[CodeKey, str] = {
    ("113622", "DCM"): "single",
    ("113620", "DCM"): "plane_a",
    ("113621", "DCM"): "plane_b",
    ("113890", "DCM"): "all",
}

# (121058, DCM, "Procedure reported") values -> modality family
PROCEDURE_FAMILIES: dict[CodeKey, str] = {
    ("113704", "DCM"): "projection",
    ("71651007", "SCT"): "projection",  # Mammography, reported with TID 10001
    ("77477000", "SCT"): "ct",
}

# CID 3629 Procedure Intent (the row "Has Intent" (363703001, SCT) under "Procedure reported" of
# TID 10001): the two intents that say screening or diagnostic; every other intent says neither
PROCEDURE_INTENTS: dict[CodeKey, str] = {
    ("360156006", "SCT"): "screening",  # Screening Intent
    ("261004008", "SCT"): "diagnostic",  # Diagnostic Intent
}

# CID 4015 View Modifier for Mammography (PS3.16; codes and meanings as pydicom 3.0.2's CID
# dictionary, generated from PS3.16, lists them): (code, meaning, whether a workup view). The
# modifiers of a workup view (magnification, spot compression, rolled and tangential views)
# belong to a diagnostic examination and not to screening (common practice); the others (implant
# displaced, cleavage, axillary tail, nipple in profile, ...) are taken in screening too and say
# neither.
_VIEW_MODIFIER_ROWS: tuple[tuple[CodeKey, str, bool], ...] = (
    (("399163009", "SCT"), "Magnification", True),
    (("399055006", "SCT"), "Spot Compression", True),
    (("399197002", "SCT"), "Rolled Lateral", True),
    (("399226006", "SCT"), "Rolled Medial", True),
    (("415670009", "SCT"), "Rolled Superior", True),
    (("414493004", "SCT"), "Rolled Inferior", True),
    (("399110001", "SCT"), "tangential", True),
    (("399161006", "SCT"), "Cleavage", False),
    (("399011000", "SCT"), "Axillary Tail", False),
    (("399209000", "SCT"), "Implant Displaced", False),
    (("442581004", "SCT"), "Nipple in profile", False),
    (("441752004", "SCT"), "Anterior compression", False),
    (("442593008", "SCT"), "Infra-mammary fold", False),
    (("442580003", "SCT"), "Axillary tissue", False),
)
#: every CID 4015 modifier, by code: its meaning
MAMMOGRAPHY_VIEW_MODIFIERS: dict[CodeKey, str] = {c: m for c, m, _ in _VIEW_MODIFIER_ROWS}
#: the CID 4015 modifiers of a diagnostic workup view (common practice)
MAMMOGRAPHY_DIAGNOSTIC_VIEW_MODIFIERS: frozenset[CodeKey] = frozenset(
    c for c, _, workup in _VIEW_MODIFIER_ROWS if workup
)
_SCREENING_WORDS = re.compile(r"screen", re.IGNORECASE)
_DIAGNOSTIC_WORDS = re.compile(r"diagnos|symptom|assess|recall|work-?up", re.IGNORECASE)


def intent_from_words(text: str) -> str | None:
    """``screening`` or ``diagnostic`` when the code meaning ``text`` (a procedure code's, the
    coding scheme's or a local one's) names one and not the other, else None.

    Examples
    --------
    >>> intent_from_words("MG Breast Screening")
    'screening'
    >>> intent_from_words("Mammogram diagnostic bilateral")
    'diagnostic'
    >>> intent_from_words("MG Breast") is None
    True
    """
    screening = bool(_SCREENING_WORDS.search(text))
    diagnostic = bool(_DIAGNOSTIC_WORDS.search(text))
    if screening == diagnostic:
        return None
    return "screening" if screening else "diagnostic"


# CID 10032 Projection X-Ray Acquisition Device Types
DEVICE_TYPES: dict[CodeKey, str] = {
    ("113957", "DCM"): "fluoroscopy_guided",
    ("113958", "DCM"): "integrated_projection",
    ("113959", "DCM"): "cassette_based",
}


# ---- patient position and reference point of fluoroscopy dose reports (TID 10003, 10003B);
#      read for skin-dose maps. An unknown code of these value sets keeps its meaning, lower-cased.

# CID 10025 Radiation Dose Reference Points: where K_a,r (113738, DCM) "Dose (RP)" is stated
REFERENCE_POINTS: dict[CodeKey, str] = {
    ("113860", "DCM"): "isocenter_15cm_toward_source",  # IEC 60601-2-43 interventional
    ("113861", "DCM"): "image_input_30cm_in_front",
    ("113862", "DCM"): "tabletop_1cm_above",
    ("113863", "DCM"): "tabletop_30cm_above",
    ("113864", "DCM"): "table_centerline_15cm",
    ("113865", "DCM"): "breast_support_4_2cm_above",
    ("113941", "DCM"): "detector_plane",
    ("113964", "DCM"): "patient_surface",
    ("113965", "DCM"): "source_100cm",
}

# CID 21 Patient Equipment Relationship: (113745, DCM) "Patient Table Relationship"
PATIENT_TABLE_RELATIONSHIPS: dict[CodeKey, str] = {
    ("102540008", "SCT"): "headfirst",
    ("102541007", "SCT"): "feetfirst",
    ("399220000", "SCT"): "transverse",
    ("399366008", "SCT"): "oblique",
    ("126830", "DCM"): "left_first",
    ("126831", "DCM"): "right_first",
    ("126832", "DCM"): "posterior_first",
    ("126833", "DCM"): "anterior_first",
}

# CID 19 Patient Orientation: (113743, DCM) "Patient Orientation"
PATIENT_ORIENTATIONS: dict[CodeKey, str] = {
    ("102538003", "SCT"): "recumbent",
    ("C86043", "NCIT"): "erect",
    ("102539006", "SCT"): "semi_erect",
}

# CID 20 Patient Orientation Modifier: (113744, DCM), a concept modifier of the orientation
PATIENT_ORIENTATION_MODIFIERS: dict[CodeKey, str] = {
    ("40199007", "SCT"): "supine",
    ("1240000", "SCT"): "prone",
    ("102536004", "SCT"): "left_lateral_decubitus",
    ("102535000", "SCT"): "right_lateral_decubitus",
    ("10904000", "SCT"): "standing",
}


# Image View meanings (CID 4010 / 4014) -> the ViewPosition (0018,5101) Defined Terms used by
# image headers, so that headers and reports group alike. Meanings from memory of PS3.16;
# an unknown meaning is kept upper-cased.
VIEW_MEANINGS: dict[str, str] = {
    "postero-anterior": "PA",
    "antero-posterior": "AP",
    "left lateral": "LL",
    "right lateral": "RL",
    "lateral": "LAT",
    "left anterior oblique": "LAO",
    "right anterior oblique": "RAO",
    "left posterior oblique": "LPO",
    "right posterior oblique": "RPO",
    "cranio-caudal": "CC",
    "medio-lateral oblique": "MLO",
    "medio-lateral": "ML",
    "latero-medial": "LM",
    "exaggerated cranio-caudal": "XCC",
}


def view_from_meaning(meaning: str) -> str:
    """The ViewPosition-style term for an Image View code meaning."""
    text = meaning.strip()
    return VIEW_MEANINGS.get(text.lower(), text.upper())
