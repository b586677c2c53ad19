"""Fast, checked access to element values (private to ingest).

pydicom converts a raw element on first access, which costs ~10 µs per element
(value-representation lookups, validation hooks). For the numbers, UIDs and
code strings ingest reads from every header this module decodes the raw bytes
itself, by the VR the file declares (or PS3.6's VR for implicit-VR files and
``UN``). Text in a non-default character set is left to pydicom. Any value that
cannot be decoded for its VR raises :class:`~beamaudit.ingest.errors.IngestError`
with code ``bad_value``, naming the attribute.
"""

from __future__ import annotations

import re
import struct
from collections.abc import Sequence
from datetime import date, datetime, time, timedelta, timezone
from typing import Any

from pydicom.dataelem import RawDataElement
from pydicom.dataset import Dataset

from .errors import IngestError
from .mapping import FieldMapping

__all__ = ["ValueReader", "parse_da", "parse_dt", "parse_tm"]

_TEXT_NUMBER_VRS = frozenset({"DS", "IS"})
_BINARY_FORMATS = {"FD": "d", "FL": "f", "US": "H", "SS": "h", "UL": "L", "SL": "l", "SV": "q",
                   "UV": "Q"}  # fmt: skip
_NUMBER_VRS = _TEXT_NUMBER_VRS | frozenset(_BINARY_FORMATS)
_STRING_VRS = frozenset({"AE", "AS", "CS", "DA", "DT", "LO", "LT", "PN", "SH", "ST", "TM", "UC",
                         "UI", "UR", "UT"})  # fmt: skip
_ASCII_VRS = frozenset({"AE", "AS", "CS", "DA", "DT", "TM", "UI", "DS", "IS"})
# Specific Character Set values whose text our direct decoding gets right (PS3.3 C.12.1.1.2)
_PLAIN_CHARSETS = {
    "": "latin-1",  # default repertoire; latin-1 keeps undeclared 8-bit text readable
    "ISO_IR 6": "latin-1",
    "ISO 2022 IR 6": "latin-1",
    "ISO_IR 100": "latin-1",
    "ISO 2022 IR 100": "latin-1",
    "ISO_IR 192": "utf-8",
}
_STRIP = b" \x00"


class _Everything:
    """A container that holds every tag (for a dataset whose elements cannot be listed)."""

    def __contains__(self, tag: object) -> bool:
        return True


_EVERYTHING = _Everything()


def _tag_text(tag: int) -> str:
    return f"({tag >> 16:04X},{tag & 0xFFFF:04X})"


class ValueReader:
    """Decodes values of one dataset (and the items of its sequences).

    Parameters
    ----------
    ds
        The dataset.
    encoding
        Python codec for text, or ``None`` to let pydicom decode text (any
        character set other than the default, Latin-1 or UTF-8).
    """

    __slots__ = ("_elements", "ds", "encoding", "present")

    def __init__(self, ds: Dataset, encoding: str | None = "latin-1") -> None:
        self.ds = ds
        self.encoding = encoding
        # pydicom keeps a dataset's elements in the dict ``_dict`` (tag -> raw or decoded
        # element) since 1.0; reading it directly saves the Tag() conversion of
        # Dataset.get_item on the ~80 look-ups per header. Fall back if it ever goes.
        elements = getattr(ds, "_dict", None)
        self._elements: dict[int, Any] | None = elements if isinstance(elements, dict) else None
        #: the tags present (a container to test ``tag in``), so that callers trying many
        #: attributes in turn skip the absent ones without a call; everything if unknown
        self.present: Any = self._elements if self._elements is not None else _EVERYTHING

    def _get(self, tag: int) -> Any:
        if self._elements is not None:
            return self._elements.get(tag)
        return self.ds.get_item(tag)

    @classmethod
    def for_dataset(cls, ds: Dataset) -> ValueReader:
        """A reader whose text decoding follows ``ds``'s Specific Character Set."""
        raw = ds.get_item(0x00080005)
        if raw is None:
            return cls(ds, "latin-1")
        value = raw.value
        if isinstance(raw, RawDataElement):
            text = (value or b"").decode("ascii", "replace").strip(" \x00")
        elif isinstance(value, str):
            text = value.strip()
        else:  # several values: code extensions, left to pydicom
            return cls(ds, None)
        return cls(ds, _PLAIN_CHARSETS.get(text.split("\\")[-1].strip() if text else ""))

    def child(self, ds: Dataset) -> ValueReader:
        """A reader for a sequence item of this dataset (same character set)."""
        return ValueReader(ds, self.encoding)

    # -- numbers -------------------------------------------------------------------------
    def numbers(self, tag: int, keyword: str, vr: str) -> list[float] | None:
        """All values of a numeric element; ``None`` if absent or empty."""
        elem = self._get(tag)
        if elem is None:
            return None
        if isinstance(elem, RawDataElement):
            raw = elem.value
            if not raw:
                return None
            file_vr = elem.VR if elem.VR not in (None, "UN") else vr
            little = elem.is_little_endian
            return _decode_numbers(bytes(raw), file_vr, little, tag, keyword, vr)
        value = elem.value
        file_vr = elem.VR if elem.VR != "UN" else vr
        if value is None or value == "" or (isinstance(value, bytes) and not value):
            return None
        if file_vr not in _NUMBER_VRS:
            raise _wrong_vr(tag, keyword, file_vr, vr)
        items = (
            value if isinstance(value, Sequence) and not isinstance(value, str | bytes) else [value]
        )
        out: list[float] = []
        for item in items:
            if item is None or item == "":
                continue
            try:
                out.append(float(item))
            except (TypeError, ValueError):
                raise IngestError(
                    "bad_value", f"{_tag_text(tag)} {keyword} {item!r} is not a number"
                ) from None
        return out or None

    def number(self, row: FieldMapping) -> float | None:
        """The first value of a numeric header row."""
        assert row.tag is not None and row.keyword is not None and row.vr is not None
        values = self.numbers(row.tag, row.keyword, row.vr)
        return values[0] if values else None

    # -- strings -------------------------------------------------------------------------
    def strings(self, tag: int, keyword: str, vr: str) -> list[str] | None:
        """All values of a string element, blanks stripped; ``None`` if absent or empty."""
        elem = self._get(tag)
        if elem is None:
            return None
        if isinstance(elem, RawDataElement):
            raw = elem.value
            if not raw:
                return None
            file_vr = elem.VR if elem.VR not in (None, "UN") else vr
            if file_vr not in _STRING_VRS:
                raise _wrong_vr(tag, keyword, file_vr, vr)
            if file_vr in _ASCII_VRS:
                text = bytes(raw).decode("latin-1")
            elif self.encoding is not None:
                try:
                    text = bytes(raw).decode(self.encoding)
                except UnicodeDecodeError:
                    text = bytes(raw).decode(self.encoding, "replace")
            else:
                return _converted_strings(self.ds[tag].value)
            parts = [p.strip(" \x00") for p in text.split("\\")] if file_vr not in (
                "LT", "ST", "UT") else [text.rstrip(" \x00")]  # fmt: skip
            parts = [p for p in parts if p]
            return parts or None
        if elem.VR not in _STRING_VRS and elem.VR != "UN":
            raise _wrong_vr(tag, keyword, elem.VR, vr)
        return _converted_strings(elem.value)

    def string(self, row: FieldMapping) -> str | None:
        """The first value of a string header row."""
        assert row.tag is not None and row.keyword is not None and row.vr is not None
        values = self.strings(row.tag, row.keyword, row.vr)
        return values[0] if values else None

    def sequence(self, tag: int) -> list[Dataset]:
        """Items of a sequence element (empty list if absent)."""
        if self._get(tag) is None:
            return []
        value = self.ds[tag].value
        if value is None:
            return []
        if not isinstance(value, Sequence) or isinstance(value, str | bytes):
            raise IngestError("bad_value", f"{_tag_text(tag)} is not a sequence")
        return list(value)


def _converted_strings(value: Any) -> list[str] | None:
    if value is None:
        return None
    items = value if isinstance(value, Sequence) and not isinstance(value, str | bytes) else [value]
    out = [str(v).strip(" \x00") for v in items if v is not None]
    out = [v for v in out if v]
    return out or None


def _wrong_vr(tag: int, keyword: str, file_vr: str | None, vr: str) -> IngestError:
    return IngestError(
        "bad_value", f"{_tag_text(tag)} {keyword} is encoded with VR {file_vr}, PS3.6 gives {vr}"
    )


def _decode_numbers(
    raw: bytes, file_vr: str, little: bool, tag: int, keyword: str, vr: str
) -> list[float] | None:
    if file_vr in _TEXT_NUMBER_VRS:
        out: list[float] = []
        for part in raw.split(b"\\"):
            part = part.strip(_STRIP)
            if not part:
                continue
            try:
                number = float(part)
            except ValueError:
                shown = part.decode("latin-1", "replace")
                raise IngestError(
                    "bad_value", f"{_tag_text(tag)} {keyword} {shown!r} is not a number ({file_vr})"
                ) from None
            if number != number or number in (float("inf"), float("-inf")):
                raise IngestError("bad_value", f"{_tag_text(tag)} {keyword} is not finite")
            if file_vr == "IS" and not number.is_integer():
                raise IngestError(
                    "bad_value", f"{_tag_text(tag)} {keyword} {number:g} is not an integer (IS)"
                )
            out.append(number)
        return out or None
    fmt = _BINARY_FORMATS.get(file_vr)
    if fmt is None:
        raise _wrong_vr(tag, keyword, file_vr, vr)
    size = struct.calcsize(fmt)
    if len(raw) % size:
        raise IngestError(
            "bad_value",
            f"{_tag_text(tag)} {keyword}: {len(raw)} bytes is no whole number of {file_vr}",
        )
    values = struct.unpack(("<" if little else ">") + fmt * (len(raw) // size), raw)
    result = []
    for v in values:
        number = float(v)
        if number != number or number in (float("inf"), float("-inf")):
            raise IngestError("bad_value", f"{_tag_text(tag)} {keyword} is not finite")
        if file_vr == "FL":
            number = float(f"{number:.7g}")  # float32 carries ~7 significant digits
        result.append(number)
    return result


_DT = re.compile(r"^(\d{4})(\d{2})?(\d{2})?(\d{2})?(\d{2})?(\d{2})?(?:\.(\d{1,6}))?([+-]\d{4})?$")


def parse_da(text: str) -> date:
    """A DA value (``YYYYMMDD``; the ACR-NEMA ``YYYY.MM.DD`` also accepted).

    Raises ``ValueError`` if invalid.
    """
    digits = text.strip().replace(".", "")
    if len(digits) != 8 or not digits.isdigit():
        raise ValueError(f"{text!r} is not a DA value")
    return date(int(digits[:4]), int(digits[4:6]), int(digits[6:8]))


def parse_tm(text: str) -> time:
    """A TM value (``HH[MM[SS[.F{1-6}]]]``; ``HH:MM:SS`` also accepted).

    Raises ``ValueError`` if invalid.
    """
    t = text.strip().replace(":", "")
    main, _, frac = t.partition(".")
    if not main.isdigit() or len(main) not in (2, 4, 6) or (frac and not frac.isdigit()):
        raise ValueError(f"{text!r} is not a TM value")
    hour = int(main[:2])
    minute = int(main[2:4]) if len(main) >= 4 else 0
    second = int(main[4:6]) if len(main) >= 6 else 0
    micro = int((frac + "000000")[:6]) if frac else 0
    if second == 60:  # leap second allowed by PS3.5
        second = 59
    return time(hour, minute, second, micro)


def parse_dt(text: str) -> datetime:
    """A DT value (``YYYY[MM[DD[HH[MM[SS[.F]]]]]][&ZZXX]``), timezone-aware if an
    offset is given.

    Raises ``ValueError`` if invalid.
    """
    match = _DT.match(text.strip())
    if match is None:
        raise ValueError(f"{text!r} is not a DT value")
    year, month, day, hour, minute, second, frac, offset = match.groups()
    tz = None
    if offset:
        sign = -1 if offset[0] == "-" else 1
        tz = timezone(sign * timedelta(hours=int(offset[1:3]), minutes=int(offset[3:5])))
    sec = int(second or 0)
    return datetime(
        int(year), int(month or 1), int(day or 1), int(hour or 0), int(minute or 0),
        59 if sec == 60 else sec, int(((frac or "") + "000000")[:6]), tzinfo=tz,
    )  # fmt: skip
