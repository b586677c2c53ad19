"""The SR builder is strict on what it writes."""

from __future__ import annotations

from datetime import datetime, timedelta, timezone

import pytest

from beamaudit.ingest.sr_build import (
    build_sr_document,
    code,
    container,
    datetime_item,
    num,
    text,
    uidref,
)

CONCEPT = ("122130", "DCM", "Dose Area Product")


def test_num_item_carries_value_and_ucum_unit() -> None:
    item = num(CONCEPT, 1.2e-5, "Gy.m2")
    measured = item.MeasuredValueSequence[0]
    assert float(measured.NumericValue) == 1.2e-5
    assert measured.MeasurementUnitsCodeSequence[0].CodingSchemeDesignator == "UCUM"
    assert item.RelationshipType == "CONTAINS"


def test_invalid_items_are_refused() -> None:
    with pytest.raises(TypeError):
        num(CONCEPT, "1.0", "Gy.m2")
    with pytest.raises(ValueError, match="needs a unit"):
        num(CONCEPT, 1.0, "")
    with pytest.raises(ValueError, match="relationship"):
        text(CONCEPT, "x", relationship="OWNS")
    with pytest.raises(ValueError, match="not a UID"):
        uidref(CONCEPT, "abc")
    with pytest.raises(ValueError, match="value and a scheme"):
        code(("", "DCM", "x"))
    with pytest.raises(ValueError, match="root must be a CONTAINER"):
        build_sr_document(container(CONCEPT))  # has a relationship: not a root


def test_datetime_keeps_the_offset() -> None:
    moment = datetime(2024, 3, 5, 10, 15, tzinfo=timezone(timedelta(hours=1)))
    assert datetime_item(CONCEPT, moment).DateTime == "20240305101500+0100"


def test_document_has_no_patient_name_or_birth_date() -> None:
    ds = build_sr_document(
        container(("113701", "DCM", "X-Ray Radiation Dose Report"), relationship=None)
    )
    assert ds.PatientName == "" and ds.PatientBirthDate == ""
    assert ds.file_meta.MediaStorageSOPClassUID == ds.SOPClassUID
