"""DICOM JSON (PS3.18 Annex F) as received from a DICOMweb server, made into pydicom Datasets.

Tolerant read: DS values may come as JSON numbers or strings (F.2.3.1); bulk data may come by
reference (``BulkDataURI``, F.2.7), even for a DS or a text, and is never fetched: such an
attribute is left out and named in the warnings, so a parser sees it as not recorded rather than
as a wrong value. Pixel data never enters the dataset.
"""

from __future__ import annotations

import re
from typing import Any

from pydicom.dataset import Dataset
from pydicom.valuerep import format_number_as_ds

from .errors import IngestError

__all__ = ["all_values", "dataset_from_metadata", "first_value"]

# Float Pixel Data, Double Float Pixel Data, Pixel Data (PS3.6 Table 6-1)
_PIXEL_DATA_TAGS = frozenset({"7FE00008", "7FE00009", "7FE00010"})
# VRs of binary data: left out silently when sent by reference (they never hold a value a parser
# of dose attributes reads); any other VR sent by reference is named in the warnings.
_BINARY_VRS = frozenset({"OB", "OD", "OF", "OL", "OV", "OW", "UN"})
_TAG_IN_MESSAGE = re.compile(r"'([0-9A-Fa-f]{8})'")
_DS_MAX_CHARS = 16  # DS: at most 16 bytes (PS3.5 Table 6.2-1)


def first_value(obj: dict[str, Any], tag: str) -> Any:
    """The first value of attribute ``tag`` (8 hex digits) in DICOM JSON, or None."""
    element = obj.get(tag)
    if not isinstance(element, dict):
        return None
    values = element.get("Value")
    if not isinstance(values, list) or not values:
        return None
    return values[0]


def all_values(obj: dict[str, Any], tag: str) -> list[Any]:
    """All non-null values of attribute ``tag`` in DICOM JSON (empty when absent)."""
    element = obj.get(tag)
    if not isinstance(element, dict) or not isinstance(element.get("Value"), list):
        return []
    return [v for v in element["Value"] if v is not None]


def _tag_text(tag: str) -> str:
    return f"({tag[:4]},{tag[4:]})"


def _ds_text(value: Any) -> Any:
    """A DS value as a DS string of at most 16 characters (numbers as JSON sends them)."""
    if isinstance(value, bool) or not isinstance(value, int | float):
        return value
    text = str(value)
    return text if len(text) <= _DS_MAX_CHARS else format_number_as_ds(float(value))


def _clean(obj: dict[str, Any], path: str, warnings: list[str]) -> dict[str, Any]:
    """Copy DICOM JSON without bulk data references or pixel data; DS numbers as strings."""
    out: dict[str, Any] = {}
    for tag, element in obj.items():
        if not isinstance(element, dict):
            out[tag] = element  # pydicom says what is wrong with it
            continue
        vr = element.get("vr")
        if tag.upper() in _PIXEL_DATA_TAGS:
            continue
        if "BulkDataURI" in element:
            if vr not in _BINARY_VRS:
                warnings.append(
                    f"{_tag_text(tag)}{path} came as bulk data by reference and was left out "
                    "(bulk data is never fetched)"
                )
            continue
        values = element.get("Value")
        if vr == "SQ" and isinstance(values, list):
            items = [
                _clean(item, f" in item {i + 1} of {_tag_text(tag)}{path}", warnings)
                if isinstance(item, dict)
                else item
                for i, item in enumerate(values)
            ]
            element = {**element, "Value": items}
        elif vr == "DS" and isinstance(values, list):
            element = {**element, "Value": [_ds_text(v) for v in values]}
        out[tag] = element
    return out


def _no_bulk_data(tag: str, vr: str, uri: str) -> None:
    """Bulk data URI handler that fetches nothing (``_clean`` has removed every reference
    already; this keeps it so should one slip through)."""
    return None


def dataset_from_metadata(obj: Any) -> tuple[Dataset, list[str]]:
    """A pydicom Dataset from one instance's WADO-RS metadata (DICOM JSON), without pixel data.

    Parameters
    ----------
    obj : dict
        One element of a WADO-RS metadata response (PS3.18 F.2: tag -> {"vr", "Value" ...}).

    Returns
    -------
    dataset : pydicom.dataset.Dataset
        The attributes (no file meta: WADO-RS metadata has no group 0002).
    warnings : list of str
        Attributes left out because the server sent them by reference.

    Raises
    ------
    IngestError
        ``bad_value`` when the JSON is not valid DICOM JSON (the reason names the tag, never the
        value, which may be a patient's name); ``missing_attribute`` without SOP Instance UID or
        SOP Class UID.
    """
    if not isinstance(obj, dict):
        raise IngestError("bad_value", "instance metadata is not a DICOM JSON object")
    warnings: list[str] = []
    try:
        dataset = Dataset.from_json(_clean(obj, "", warnings), bulk_data_uri_handler=_no_bulk_data)
    except (TypeError, ValueError, KeyError, AttributeError) as exc:
        # what pydicom's from_json raises for malformed DICOM JSON; its message quotes the value
        found = _TAG_IN_MESSAGE.search(str(exc))
        where = f" at {_tag_text(found[1].upper())}" if found else ""
        raise IngestError(
            "bad_value", f"metadata is not valid DICOM JSON{where} ({type(exc).__name__})"
        ) from exc
    for keyword, tag in (("SOPInstanceUID", "(0008,0018)"), ("SOPClassUID", "(0008,0016)")):
        if not dataset.get(keyword):
            raise IngestError("missing_attribute", f"metadata has no {tag} {keyword}")
    return dataset, warnings
