"""Retired-code aliases against pydicom's SRT->SCT equality (PS3.16 mapping, DICOM-NOTES 2.9)."""

from __future__ import annotations

import pytest
from pydicom.sr.coding import Code

from beamaudit.ingest.codes import (
    RETIRED_CODES,
    SSDE_METHODS,
    WATER_EQUIVALENT_DIAMETER_METHODS,
    canonical,
    material_from_meaning,
    view_from_meaning,
)


@pytest.mark.parametrize(
    ("old", "new"), [(o, n) for o, n in RETIRED_CODES.items() if o[1] == "SRT"]
)
def test_each_srt_alias_is_pydicoms_equivalent(old: tuple[str, str], new: tuple[str, str]) -> None:
    assert Code(old[0], old[1], "x") == Code(new[0], new[1], "y")


def test_canonical_keeps_current_codes_and_maps_retired_ones() -> None:
    assert canonical("122130", "DCM") == ("122130", "DCM")
    assert canonical(" P5-06000 ", "srt") == ("44491008", "SCT")
    assert canonical("113735", "DCM") == (
        "113824",
        "DCM",
    )  # retired Exposure Time (DICOM-NOTES 2.6)


@pytest.mark.parametrize(
    ("meaning", "material"),
    [
        ("Aluminum or aluminum compound", "aluminium"),
        ("Copper or copper compound", "copper"),
        ("Molybdenum or molybdenum compound", "molybdenum"),
        ("Lead", "lead"),
        ("Plastic", None),
    ],
)
def test_material_from_meaning(meaning: str, material: str | None) -> None:
    assert material_from_meaning(meaning) == material


def test_view_from_meaning() -> None:
    assert view_from_meaning("postero-anterior") == "PA"
    assert view_from_meaning("medio-lateral oblique") == "MLO"
    assert view_from_meaning("something else") == "SOMETHING ELSE"


def _dictionary() -> dict[tuple[str, str], tuple[str, list[int]]]:
    import pydicom.sr._concepts_dict as concepts_dict

    return {
        (code, scheme): entry
        for scheme, by_keyword in concepts_dict.concepts.items()
        for entries in by_keyword.values()
        for code, entry in entries.items()
    }


@pytest.mark.parametrize("code", sorted(SSDE_METHODS))
def test_ssde_methods_are_cid_10023(code: tuple[str, str]) -> None:
    # PS3.16 CID 10023 Size Specific Dose Estimation Method for CT, in pydicom's dictionary
    assert 10023 in _dictionary()[code][1]


@pytest.mark.parametrize("code", sorted(WATER_EQUIVALENT_DIAMETER_METHODS))
def test_water_equivalent_diameter_methods_are_ps3_16_codes(code: tuple[str, str]) -> None:
    # CID 10024 Water Equivalent Diameter Method, and the Dw method codes beside it
    meaning = _dictionary()[code][0]
    assert "Water Equivalent Diameter" in meaning or "Dw" in meaning or meaning == "AAPM 220"
