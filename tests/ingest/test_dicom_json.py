"""DICOM JSON from a DICOMweb server into Datasets: tolerant of what PS3.18 Annex F allows.

The JSON shapes follow PS3.18 (2024e) Annex F (DICOM-NOTES 3.4): DS/IS as numbers or strings
(F.2.3.1), BulkDataURI for any of the bulk-capable VRs including DS (F.2.7), PN objects, SQ as
arrays of objects. The values are those of NEMA WG04 RG1 (pydicom-data RG1_UNCI.dcm) as Orthanc
1.10.1 returned them in a session here: KVP 150 and the area dose product 1.2 as JSON numbers.
"""

from __future__ import annotations

from typing import Any

import pytest

from beamaudit.ingest.dicom_json import all_values, dataset_from_metadata, first_value
from beamaudit.ingest.errors import IngestError

CR = "1.2.840.10008.5.1.4.1.1.1"  # Computed Radiography Image Storage, PS3.4 Table B.5-1


def _instance(**extra: dict[str, Any]) -> dict[str, Any]:
    obj: dict[str, Any] = {
        "00080016": {"vr": "UI", "Value": [CR]},
        "00080018": {"vr": "UI", "Value": ["1.2.3.4.5"]},
        "00100010": {"vr": "PN", "Value": [{"Alphabetic": "CompressedSamples^RG1"}]},
    }
    obj.update(extra)
    return obj


def test_ds_as_number_or_string_reads_the_same() -> None:
    as_number, _ = dataset_from_metadata(_instance(**{"00180060": {"vr": "DS", "Value": [150]}}))
    as_string, _ = dataset_from_metadata(_instance(**{"00180060": {"vr": "DS", "Value": ["150"]}}))
    assert float(as_number.KVP) == float(as_string.KVP) == 150.0


def test_ds_number_too_long_for_ds_is_formatted_within_16_characters() -> None:
    # a JSON double with 17 significant digits; DS holds at most 16 characters (PS3.5 6.2)
    ds, _ = dataset_from_metadata(
        _instance(**{"0018115E": {"vr": "DS", "Value": [29.769628200000003]}})
    )
    assert len(str(ds.ImageAndFluoroscopyAreaDoseProduct)) <= 16
    assert float(ds.ImageAndFluoroscopyAreaDoseProduct) == pytest.approx(29.7696282, rel=1e-12)


def test_multi_valued_ds_numbers() -> None:
    ds, _ = dataset_from_metadata(_instance(**{"00181164": {"vr": "DS", "Value": [0.1, 0.1]}}))
    assert [float(v) for v in ds.ImagerPixelSpacing] == [0.1, 0.1]


def test_pixel_data_never_enters_the_dataset() -> None:
    uri = "http://127.0.0.1:1/dicom-web/studies/1/series/2/instances/3/bulk/7fe00010"
    ds, warnings = dataset_from_metadata(
        _instance(**{"7FE00010": {"vr": "OW", "BulkDataURI": uri}})
    )
    assert "PixelData" not in ds
    assert warnings == []
    inline, _ = dataset_from_metadata(
        _instance(**{"7FE00010": {"vr": "OB", "InlineBinary": "AAECAw=="}})
    )
    assert "PixelData" not in inline


def test_numeric_attribute_sent_by_reference_is_left_out_and_named() -> None:
    ds, warnings = dataset_from_metadata(
        _instance(**{"0018115E": {"vr": "DS", "BulkDataURI": "http://127.0.0.1:1/bulk/x"}})
    )
    assert "ImageAndFluoroscopyAreaDoseProduct" not in ds
    assert warnings == [
        "(0018,115E) came as bulk data by reference and was left out (bulk data is never fetched)"
    ]


def test_bulk_data_inside_a_sequence_is_named_with_its_place() -> None:
    item = {"0040A30A": {"vr": "DS", "BulkDataURI": "http://127.0.0.1:1/bulk/y"}}
    ds, warnings = dataset_from_metadata(_instance(**{"0040A300": {"vr": "SQ", "Value": [item]}}))
    assert len(ds.MeasuredValueSequence) == 1
    assert "NumericValue" not in ds.MeasuredValueSequence[0]
    assert warnings[0].startswith("(0040,A30A) in item 1 of (0040,A300) came as bulk data")


def test_nested_ds_numbers_are_converted_too() -> None:
    item = {"0040A30A": {"vr": "DS", "Value": [0.00123]}}
    ds, _ = dataset_from_metadata(_instance(**{"0040A300": {"vr": "SQ", "Value": [item]}}))
    assert float(ds.MeasuredValueSequence[0].NumericValue) == pytest.approx(0.00123)


def test_malformed_json_names_the_tag_but_not_the_value() -> None:
    bad = _instance(**{"00100010": {"vr": "PN", "Value": "Doe^Jane"}})  # Value must be a list
    with pytest.raises(IngestError, match=r"\(0010,0010\)") as caught:
        dataset_from_metadata(bad)
    assert caught.value.code == "bad_value"
    assert "Doe" not in str(caught.value)


def test_missing_sop_instance_uid() -> None:
    obj = _instance()
    del obj["00080018"]
    with pytest.raises(IngestError, match="SOPInstanceUID") as caught:
        dataset_from_metadata(obj)
    assert caught.value.code == "missing_attribute"


def test_not_an_object() -> None:
    with pytest.raises(IngestError, match="not a DICOM JSON object"):
        dataset_from_metadata(["00080018"])


def test_value_helpers() -> None:
    obj = {"00080061": {"vr": "CS", "Value": ["CT", None, "SR"]}, "00080020": {"vr": "DA"}}
    assert all_values(obj, "00080061") == ["CT", "SR"]
    assert first_value(obj, "00080061") == "CT"
    assert first_value(obj, "00080020") is None  # empty attribute: no "Value" (F.2.5)
    assert first_value(obj, "00100010") is None
    assert all_values(obj, "00100010") == []
