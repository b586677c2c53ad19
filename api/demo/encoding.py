"""A small, strict DICOM Part 10 encoder for the demo's own objects (PS3.5, PS3.10).

Building thousands of objects through :class:`pydicom.dataset.Dataset` and
:func:`pydicom.dcmwrite` costs a few milliseconds per image and tens of milliseconds per dose
report, far too slow for a demo that writes ~4,000 objects in seconds. The demo therefore
describes each object as plain data, :data:`Elements` (DICOM keyword -> value, sequences as lists
of :data:`Elements`), and encodes it here:

* Explicit VR Little Endian (PS3.5 7.1.2), elements in ascending tag order, defined lengths for
  sequences and items (PS3.5 7.5), text padded to even length with a space (UI with NUL), binary
  values packed little-endian;
* tags and VRs from pydicom's data dictionary (PS3.6), so a keyword that does not exist, a value
  longer than its VR allows (PS3.5 Table 6.2-1) or a text value with a backslash in a single-valued
  VR is an error, never written;
* PS3.10 file: 128-byte preamble, ``DICM``, the File Meta Information group with its group length.

The result is the encoding pydicom itself writes for the same content: the tests read every
object back with pydicom and re-encode a sample with :func:`pydicom.dcmwrite`, byte for byte.
"""

from __future__ import annotations

import struct
from collections.abc import Mapping
from functools import cache
from typing import Any

from pydicom.datadict import dictionary_VR, tag_for_keyword
from pydicom.uid import PYDICOM_ROOT_UID, ExplicitVRLittleEndian, generate_uid

from beamaudit.api.errors import ApiError
from beamaudit.ingest.sr_build import decimal_string

__all__ = [
    "IMPLEMENTATION_CLASS_UID",
    "IMPLEMENTATION_VERSION_NAME",
    "Elements",
    "EncodingError",
    "encode_dataset",
    "format_ds",
    "part10_file",
]

#: Keyword -> value; a sequence is a list of Elements.
Elements = Mapping[str, Any]

#: Implementation identification of files the demo writes (PS3.7 D.3.3.2), under pydicom's root.
IMPLEMENTATION_CLASS_UID = str(
    generate_uid(prefix=PYDICOM_ROOT_UID, entropy_srcs=["beamaudit demo writer"])
)
IMPLEMENTATION_VERSION_NAME = "BEAMAUDIT_DEMO"

# VRs whose explicit-VR header has a reserved 2 bytes and a 4-byte length (PS3.5 Table 7.1-1).
_LONG_VRS = frozenset(
    {"OB", "OD", "OF", "OL", "OV", "OW", "SQ", "SV", "UC", "UN", "UR", "UT", "UV"}
)
# Maximum length of one value, bytes (PS3.5 Table 6.2-1); PN: per component group.
_MAX_LENGTH = {
    "AE": 16,
    "AS": 4,
    "CS": 16,
    "DA": 8,
    "DS": 16,
    "DT": 26,
    "IS": 12,
    "LO": 64,
    "LT": 10240,
    "PN": 64,
    "SH": 16,
    "ST": 1024,
    "TM": 14,
    "UI": 64,
}
_SINGLE_VALUED_TEXT = frozenset({"LT", "ST", "UT", "UR"})
_TEXT_VRS = frozenset(
    {
        "AE",
        "AS",
        "CS",
        "DA",
        "DS",
        "DT",
        "IS",
        "LO",
        "LT",
        "PN",
        "SH",
        "ST",
        "TM",
        "UC",
        "UI",
        "UR",
        "UT",
    }
)
_BINARY = {"US": "H", "UL": "I", "SS": "h", "SL": "i", "FL": "f", "FD": "d"}
# Ambiguous dictionary VRs resolved for the demo's objects (16-bit pixels)
_VR_CHOICE = {"PixelData": "OW"}


class EncodingError(ApiError, ValueError):
    """A value the encoder refuses to write (unknown keyword, bad length, bad type)."""


@cache
def _tag_vr(keyword: str) -> tuple[int, str]:
    tag = tag_for_keyword(keyword)
    if tag is None:
        raise EncodingError(f"{keyword!r} is not a DICOM keyword")
    vr = _VR_CHOICE.get(keyword) or dictionary_VR(tag)
    if " or " in vr:
        raise EncodingError(f"{keyword} has the ambiguous VR {vr!r}; choose one")
    return tag, vr


def format_ds(value: float) -> str:
    """``value`` as a Decimal String of at most 16 characters (PS3.5 6.2, DS), as the SR
    builder writes a NUM value (:func:`beamaudit.ingest.sr_build.decimal_string`).

    Examples
    --------
    >>> format_ds(0.000123456789)
    '0.000123456789'
    >>> format_ds(2.5)
    '2.5'
    """
    try:
        return decimal_string(value)
    except ValueError as exc:
        raise EncodingError(str(exc)) from None


def _text(keyword: str, vr: str, value: Any) -> bytes:
    values = value if isinstance(value, list | tuple) else [value]
    parts = []
    for v in values:
        if vr == "DS" and isinstance(v, float | int) and not isinstance(v, bool):
            text = format_ds(float(v))
        elif vr == "IS" and isinstance(v, int) and not isinstance(v, bool):
            text = str(v)
        elif isinstance(v, str):
            text = v
        else:
            raise EncodingError(f"{keyword} ({vr}) cannot hold {v!r}")
        limit = _MAX_LENGTH.get(vr)
        if limit is not None and vr != "PN" and len(text) > limit:
            raise EncodingError(f"{keyword} ({vr}) value {text!r} is longer than {limit}")
        if vr == "PN" and any(len(g) > 64 for g in text.split("=")):
            raise EncodingError(f"{keyword} (PN) component group longer than 64 in {text!r}")
        if "\\" in text:
            raise EncodingError(f"{keyword} value {text!r} holds a backslash")
        parts.append(text)
    if vr in _SINGLE_VALUED_TEXT and len(parts) > 1:
        raise EncodingError(f"{keyword} ({vr}) takes a single value")
    data = "\\".join(parts).encode("latin-1")
    if len(data) % 2:
        data += b"\x00" if vr == "UI" else b" "
    return data


def _value(keyword: str, vr: str, value: Any) -> bytes:
    if vr == "SQ":
        if not isinstance(value, list | tuple):
            raise EncodingError(f"{keyword} (SQ) needs a list of items")
        out = bytearray()
        for item in value:
            body = encode_dataset(item)
            out += struct.pack("<HHI", 0xFFFE, 0xE000, len(body)) + body
        return bytes(out)
    if vr in _TEXT_VRS:
        return _text(keyword, vr, value)
    if vr in _BINARY:
        values = value if isinstance(value, list | tuple) else [value]
        return struct.pack(f"<{len(values)}{_BINARY[vr]}", *values)
    if vr in ("OB", "OW"):
        if not isinstance(value, bytes | bytearray):
            raise EncodingError(f"{keyword} ({vr}) needs bytes")
        return bytes(value) + (b"\x00" if len(value) % 2 else b"")
    raise EncodingError(f"{keyword}: the demo encoder does not write VR {vr}")


def _element(tag: int, vr: str, data: bytes) -> bytes:
    group, element = tag >> 16, tag & 0xFFFF
    if vr in _LONG_VRS:
        return struct.pack("<HH2sHI", group, element, vr.encode(), 0, len(data)) + data
    if len(data) > 0xFFFF:
        raise EncodingError(f"({group:04X},{element:04X}) {vr} value of {len(data)} bytes")
    return struct.pack("<HH2sH", group, element, vr.encode(), len(data)) + data


def encode_dataset(elements: Elements) -> bytes:
    """Encode ``elements`` (keyword -> value) as Explicit VR Little Endian, ascending tags.

    Raises
    ------
    EncodingError
        An unknown keyword, a value of the wrong type or too long for its VR.
    """
    encoded = []
    for keyword, value in elements.items():
        tag, vr = _tag_vr(keyword)
        encoded.append((tag, _element(tag, vr, _value(keyword, vr, value))))
    encoded.sort(key=lambda pair: pair[0])
    return b"".join(data for _, data in encoded)


def part10_file(elements: Elements) -> bytes:
    """A complete PS3.10 file of ``elements`` (which must hold SOPClassUID and SOPInstanceUID).

    Raises
    ------
    EncodingError
        As :func:`encode_dataset`, or the SOP identification is missing.
    """
    try:
        sop_class, sop_instance = elements["SOPClassUID"], elements["SOPInstanceUID"]
    except KeyError as exc:
        raise EncodingError(f"a Part 10 file needs {exc.args[0]}") from None
    meta_body = encode_dataset(
        {
            "FileMetaInformationVersion": b"\x00\x01",
            "MediaStorageSOPClassUID": sop_class,
            "MediaStorageSOPInstanceUID": sop_instance,
            "TransferSyntaxUID": str(ExplicitVRLittleEndian),
            "ImplementationClassUID": IMPLEMENTATION_CLASS_UID,
            "ImplementationVersionName": IMPLEMENTATION_VERSION_NAME,
        }
    )
    group_length = _element(0x00020000, "UL", struct.pack("<I", len(meta_body)))
    return b"\x00" * 128 + b"DICM" + group_length + meta_body + encode_dataset(elements)
