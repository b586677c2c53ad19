"""The mapping table against PS3.6 (pydicom's data dictionary) and PS3.16
(pydicom's code dictionary)."""

from __future__ import annotations

import dataclasses
from typing import Any

import pydicom.sr._concepts_dict as concepts_dict
import pytest
from pydicom.datadict import dictionary_VR, keyword_for_tag

from beamaudit.ingest.events import AccumulatedDose, ExposureEvent, FilterLayer
from beamaudit.ingest.mapping import FIELD_LIMITS, MAPPING, concept_rows, header_rows
from beamaudit.ingest.units import dimension_of

_CONCEPTS: dict[str, Any] = concepts_dict.concepts
_EVENT_FIELDS = {f.name for f in dataclasses.fields(ExposureEvent)}
_ACC_FIELDS = {f.name for f in dataclasses.fields(AccumulatedDose)}
_MEANINGS = {
    (code, scheme): meaning
    for scheme, by_keyword in _CONCEPTS.items()
    for entries in by_keyword.values()
    for code, (meaning, _cids) in entries.items()
}
# fields read only to decide something (not stored as such)
_DECISION_FIELDS = {
    "procedure_reported",
    "material",
    "thickness_min_mm",
    "thickness_max_mm",
    "size_method",  # read into ssde_method or water_equivalent_diameter_method by its value
}


@pytest.mark.parametrize("row", header_rows(), ids=lambda r: r.keyword)
def test_header_row_matches_ps3_6(row) -> None:
    assert keyword_for_tag(row.tag) == row.keyword
    assert dictionary_VR(row.tag) == row.vr
    assert row.label == f"({row.tag >> 16:04X},{row.tag & 0xFFFF:04X}) {row.keyword}"


@pytest.mark.parametrize(
    "row", [r for r in MAPPING if r.source == "sr"], ids=lambda r: f"{r.context}-{r.code[0]}"
)
def test_concept_row_matches_ps3_16(row) -> None:
    assert _MEANINGS.get(row.code) == row.meaning


@pytest.mark.parametrize("row", MAPPING, ids=lambda r: r.label)
def test_row_feeds_a_real_field_with_convertible_units(row) -> None:
    target = _ACC_FIELDS if (row.context or "").endswith("_accumulated") else _EVENT_FIELDS
    assert row.field in target | _DECISION_FIELDS
    if row.unit or row.our_unit:
        assert dimension_of(row.unit) == dimension_of(row.our_unit)


def test_limits_name_real_fields() -> None:
    known = (
        _EVENT_FIELDS
        | _ACC_FIELDS
        | {f.name for f in dataclasses.fields(FilterLayer)}
        | _DECISION_FIELDS
    )
    assert set(FIELD_LIMITS) <= known


def test_project_kvp_range_and_zero_rule() -> None:
    # ARCHITECTURE "Bad input": kVp outside 20-150 rejected; CR's recorded 0 = not recorded
    limit = FIELD_LIMITS["kvp_kv"]
    assert (limit.low, limit.high, limit.zero_means_absent, limit.action) == (
        20.0,
        150.0,
        True,
        "reject",
    )
    assert FIELD_LIMITS["sid_mm"].low_open  # SID of 0 rejected


def test_units_of_the_quirks() -> None:
    by_label = {r.label: r for r in MAPPING}
    assert by_label["(0018,115E) ImageAndFluoroscopyAreaDoseProduct"].unit == "dGy.cm2"
    assert by_label["(122130, DCM) Dose Area Product"].unit == "Gy.m2"
    assert by_label["(113736, DCM) Exposure"].unit == "uA.s"
    assert concept_rows("ct_event")[("113824", "DCM")].unit == "s"
    assert concept_rows("projection_event")[("113824", "DCM")].unit == "ms"
