"""Reading one DICOM object into a :class:`~beamaudit.ingest.events.ParseResult`.

One ``dcmread(..., stop_before_pixels=True)`` per file, no second read:
pixel data is never read. The SOP Class decides the parser: image headers
(:mod:`.headers`) or dose reports (:mod:`.rdsr`). Anything unusable raises
:class:`~beamaudit.ingest.errors.IngestError` with the source and reason; the
caller records it and goes on.

The patient is pseudonymised while reading (:mod:`.pseudonym`): the events
carry the keyed-hash pseudonym and the age, never the Patient ID, name or
birth date.
"""

from __future__ import annotations

import io
import os
import re
import struct
import zlib
from collections.abc import Iterator
from typing import IO, Any, BinaryIO, cast

from pydicom import dcmread
from pydicom.dataelem import DataElement, RawDataElement
from pydicom.dataset import Dataset, FileMetaDataset
from pydicom.errors import BytesLengthException, InvalidDicomError
from pydicom.filereader import read_dataset as read_pydicom_dataset
from pydicom.tag import BaseTag
from pydicom.uid import AllTransferSyntaxes, ExplicitVRLittleEndian, ImplicitVRLittleEndian
from pydicom.valuerep import EXPLICIT_VR_LENGTH_32

from ._context import FieldSink, read_context
from ._values import ValueReader
from .errors import IngestError
from .events import ParseResult, SourceObject
from .headers import header_events, procedure_intent
from .mapping import header_rows_by_field
from .pseudonym import Pseudonymiser
from .rdsr import is_dose_report_root, rdsr_events

__all__ = [
    "ACCEPTED_SOP_CLASSES",
    "CT_SOP_CLASSES",
    "DICOMDIR_SOP_CLASS",
    "DOSE_REPORT_SOP_CLASSES",
    "GENERIC_SR_SOP_CLASSES",
    "HEAD_BYTES",
    "IMAGE_SOP_CLASSES",
    "classify_head",
    "is_dicom_file",
    "read_bytes",
    "read_dataset",
    "read_file",
    "read_open_file",
]

# Storage SOP Class UIDs, PS3.4 Annex B.5 Table B.5-1 (names as in pydicom's UID dictionary)
IMAGE_SOP_CLASSES: dict[str, str] = {
    "1.2.840.10008.5.1.4.1.1.1": "Computed Radiography Image Storage",
    "1.2.840.10008.5.1.4.1.1.1.1": "Digital X-Ray Image Storage - For Presentation",
    "1.2.840.10008.5.1.4.1.1.1.1.1": "Digital X-Ray Image Storage - For Processing",
    "1.2.840.10008.5.1.4.1.1.1.2": "Digital Mammography X-Ray Image Storage - For Presentation",
    "1.2.840.10008.5.1.4.1.1.1.2.1": "Digital Mammography X-Ray Image Storage - For Processing",
    "1.2.840.10008.5.1.4.1.1.13.1.3": "Breast Tomosynthesis Image Storage",
    "1.2.840.10008.5.1.4.1.1.13.1.4": "Breast Projection X-Ray Image Storage - For Presentation",
    "1.2.840.10008.5.1.4.1.1.13.1.5": "Breast Projection X-Ray Image Storage - For Processing",
    "1.2.840.10008.5.1.4.1.1.12.1": "X-Ray Angiographic Image Storage",
    "1.2.840.10008.5.1.4.1.1.12.1.1": "Enhanced XA Image Storage",
    "1.2.840.10008.5.1.4.1.1.12.2": "X-Ray Radiofluoroscopic Image Storage",
    "1.2.840.10008.5.1.4.1.1.12.2.1": "Enhanced XRF Image Storage",
    "1.2.840.10008.5.1.4.1.1.2": "CT Image Storage",
    "1.2.840.10008.5.1.4.1.1.2.1": "Enhanced CT Image Storage",
    "1.2.840.10008.5.1.4.1.1.2.2": "Legacy Converted Enhanced CT Image Storage",
}
CT_SOP_CLASSES = frozenset(
    {"1.2.840.10008.5.1.4.1.1.2", "1.2.840.10008.5.1.4.1.1.2.1", "1.2.840.10008.5.1.4.1.1.2.2"}
)
DOSE_REPORT_SOP_CLASSES: dict[str, str] = {
    "1.2.840.10008.5.1.4.1.1.88.67": "X-Ray Radiation Dose SR Storage",
    "1.2.840.10008.5.1.4.1.1.88.76": "Enhanced X-Ray Radiation Dose SR Storage",
}
# accepted only when the root concept is (113701, DCM) X-Ray Radiation Dose Report
GENERIC_SR_SOP_CLASSES: dict[str, str] = {
    "1.2.840.10008.5.1.4.1.1.88.22": "Enhanced SR Storage",
    "1.2.840.10008.5.1.4.1.1.88.33": "Comprehensive SR Storage",
    "1.2.840.10008.5.1.4.1.1.88.34": "Comprehensive 3D SR Storage",
    "1.2.840.10008.5.1.4.1.1.88.35": "Extensible SR Storage",
}
#: Every SOP Class ingest reads (UID -> name); generic SR classes only with root (113701, DCM).
ACCEPTED_SOP_CLASSES: dict[str, str] = {
    **IMAGE_SOP_CLASSES,
    **DOSE_REPORT_SOP_CLASSES,
    **GENERIC_SR_SOP_CLASSES,
}
DICOMDIR_SOP_CLASS = "1.2.840.10008.1.3.10"  # Media Storage Directory Storage, PS3.4 Annex F

_DEFLATED = "1.2.840.10008.1.2.1.99"  # Deflated Explicit VR Little Endian, PS3.5 A.5
HEAD_BYTES = 4096  # enough for the preamble, "DICM" and any real file meta group


def _sop_name(uid: str) -> str:
    try:
        from pydicom.uid import UID

        name = UID(uid).name
    except (ValueError, TypeError):
        return uid
    return f"{name} ({uid})" if name and name != uid else uid


def _required_uid(reader: ValueReader, field: str, ds: Dataset) -> str:
    (row,) = [r for r in header_rows_by_field()[field] if r.rank == 0]
    value = reader.string(row)
    if value is None and field in ("sop_instance_uid", "sop_class_uid"):
        meta = getattr(ds, "file_meta", None)
        keyword = "MediaStorageSOPInstanceUID" if field == "sop_instance_uid" else (
            "MediaStorageSOPClassUID")  # fmt: skip
        if meta is not None and meta.get(keyword):
            value = str(meta.get(keyword)).strip()
    if value is None:
        raise IngestError("missing_attribute", f"{row.label} is missing or empty (Type 1)")
    if not _UID_TEXT.match(value):
        shown = value if len(value) <= 80 else f"{value[:40]}... ({len(value)} characters)"
        raise IngestError(
            "bad_value",
            f"{row.label} {shown!r} cannot be a UID (at most 64 printable characters, PS3.5 9.1)",
        )
    return value


# PS3.5 9.1: a UID is at most 64 characters of digits and dots. Read tolerantly (some devices
# write letters or leading zeros), but never store what cannot be a UID at all: over 64
# characters, spaces, control or non-ASCII characters, or a backslash (a second value).
_UID_TEXT = re.compile(r"^[\x21-\x5b\x5d-\x7e]{1,64}$")


def read_dataset(ds: Dataset, *, pseudonymiser: Pseudonymiser, source: str) -> ParseResult:
    """Parse a decoded dataset (from a file, a C-STORE, a DICOMweb pull).

    Parameters
    ----------
    ds
        The dataset; pixel data, if present, is not touched.
    pseudonymiser
        Turns the Patient ID into its pseudonym.
    source
        Where ``ds`` came from (path, ``"c-store:AE"``...), for errors.

    Returns
    -------
    ParseResult
        The object's identity, its events and (dose reports) accumulations.

    Raises
    ------
    IngestError
        ``missing_attribute``, ``unsupported_sop_class``, ``broken_template``,
        ``out_of_range`` or ``bad_value``, with ``source`` set.
    """
    try:
        return _parse(ds, pseudonymiser)
    except IngestError as exc:
        raise exc.with_source(source) from None


def _parse(ds: Dataset, pseudonymiser: Pseudonymiser) -> ParseResult:
    reader = ValueReader.for_dataset(ds)
    sop_class = _required_uid(reader, "sop_class_uid", ds)
    if sop_class == DICOMDIR_SOP_CLASS:
        raise IngestError("unsupported_sop_class", "a DICOMDIR is a media index, not an exposure")
    if sop_class not in ACCEPTED_SOP_CLASSES:
        raise IngestError(
            "unsupported_sop_class",
            f"SOP Class {_sop_name(sop_class)} carries no x-ray exposure beamaudit reads",
        )
    is_report = sop_class not in IMAGE_SOP_CLASSES
    if sop_class in GENERIC_SR_SOP_CLASSES and not is_dose_report_root(ds):
        raise IngestError(
            "unsupported_sop_class",
            f"{_sop_name(sop_class)} whose root concept is not (113701, DCM) "
            "X-Ray Radiation Dose Report: not a dose report",
        )
    sop_instance = _required_uid(reader, "sop_instance_uid", ds)
    study = _required_uid(reader, "study_instance_uid", ds)
    by_field = header_rows_by_field()
    series = reader.string(by_field["series_instance_uid"][0])
    modality = reader.string(by_field["modality"][0])
    warnings: list[str] = []
    context = FieldSink(warnings)
    read_context(reader, context, pseudonymiser=pseudonymiser)
    base: dict[str, Any] = {
        "sop_instance_uid": sop_instance,
        "sop_class_uid": sop_class,
        "source_kind": "rdsr" if is_report else "image_header",
        "modality": modality,
        "study_instance_uid": study,
        "series_instance_uid": series,
        **context.values,
    }
    provenance = dict(context.provenance)
    source = SourceObject(
        sop_instance_uid=sop_instance,
        sop_class_uid=sop_class,
        kind="rdsr" if is_report else "image_header",
        modality=modality,
        study_instance_uid=study,
        series_instance_uid=series,
    )
    if is_report:
        # screening or diagnostic from the report's own procedure codes (a mammography report's
        # events take it where their own view modifiers say nothing: ingest/rdsr.py)
        intent = procedure_intent([reader])
        if intent is not None:
            base["mammography_intent"], provenance["mammography_intent"] = intent
        events, accumulated = rdsr_events(
            ds, base=base, base_provenance=provenance, warnings=warnings
        )
        result = ParseResult(source, events, accumulated, warnings)
    else:
        family = "ct" if sop_class in CT_SOP_CLASSES else "projection"
        base["modality_family"] = family
        events = header_events(
            reader, base=base, base_provenance=provenance, family=family, warnings=warnings
        )
        result = ParseResult(source, events, [], warnings)
    for event in result.events:
        event.notes[:0] = context.notes
    return result


def classify_head(head: bytes) -> str:
    """``"dicom"``, ``"dicomdir"`` or ``"not_dicom"`` from a file's first bytes.

    DICOM when "DICM" sits at offset 128 (PS3.10 7.1), or when a file without
    preamble starts with a plausible element of group 0002 or 0008 (explicit
    or implicit VR little endian). A DICOMDIR is recognised by its Media
    Storage SOP Class UID 1.2.840.10008.1.3.10 in the file meta group.
    """
    if len(head) >= 132 and head[128:132] == b"DICM":
        return "dicomdir" if _meta_says_dicomdir(head[132:]) else "dicom"
    if _plausible_first_element(head):
        return "dicomdir" if _meta_says_dicomdir(head) else "dicom"
    return "not_dicom"


_VRS = frozenset(
    b"AE AS AT CS DA DS DT FD FL IS LO LT OB OD OF OL OV OW PN SH SL SQ SS ST SV TM UC UI UL UN "
    b"UR US UT UV".split()
)


def _plausible_first_element(head: bytes) -> bool:
    if len(head) < 8:
        return False
    group = int.from_bytes(head[0:2], "little")
    element = int.from_bytes(head[2:4], "little")
    if group not in (0x0002, 0x0008) or element > 0x3FFF:
        return False
    if head[4:6] in _VRS:
        return True
    length = int.from_bytes(head[4:8], "little")  # implicit VR: 4-byte length
    return length < 0x10000


def _meta_says_dicomdir(meta: bytes) -> bool:
    """Whether an explicit-VR little-endian group 0002 names the DICOMDIR class in (0002,0002)."""
    for element, _, start, length in _group_0002(meta, 0):
        if element == 0x0002:
            value = meta[start : start + length].rstrip(b"\x00 ")
            return value == DICOMDIR_SOP_CLASS.encode()
    return False


def _meta_cut_short(head: bytes, size: int | None) -> bool:
    """Whether a file with a preamble ends inside a value of its group 0002 (as the element
    headers in its first bytes declare it): a cut there, not a bad value, is what failed."""
    if size is None or len(head) < 132 or head[128:132] != b"DICM":
        return False
    for element, _, start, length in _group_0002(head, 132):
        if start + length > size:
            return True
        if element == 0x0000 and length == 4:  # (0002,0000) File Meta Information Group Length
            return size < start + 4 + int.from_bytes(head[start : start + 4], "little")
    return size <= 132 + 12  # not even the group length's whole element


def _group_0002(data: bytes, offset: int) -> Iterator[tuple[int, bytes, int, int]]:
    """Element number, VR, value offset and value length of each element of the explicit-VR
    little-endian group 0002 starting at ``offset`` of ``data``, as their headers say (values
    are not checked); stops at another group or at a header that ``data`` cuts short."""
    pos = offset
    end = len(data)
    while pos + 8 <= end:
        group, element, vr, length = _EXPLICIT_HEADER.unpack_from(data, pos)
        if group != 0x0002:
            return
        if vr in _LONG_VRS:  # 2 reserved bytes, then a 4-byte length (PS3.5 7.1.2)
            if pos + 12 > end:
                return
            (length,) = _LONG_LENGTH.unpack_from(data, pos + 8)
            value_at = pos + 12
        else:
            value_at = pos + 8
        yield element, vr, value_at, length
        pos = value_at + length


def _check_complete(ds: Dataset, fh: IO[bytes], size: int | None) -> None:
    """Raise ``truncated`` if the object ends inside an element.

    pydicom stops quietly at the end of the data: a last value shorter than
    its declared length, or a partial element header left over, means the
    file was cut. (A cut inside the pixel data is not seen: it is never read.)
    """
    elements = getattr(ds, "_dict", None)  # pydicom's element dict, in reading order
    if isinstance(elements, dict):
        if not elements:
            raise IngestError("truncated", "the object ends before its first data element")
        last_tag = int(next(reversed(elements)))
    else:
        keys = [int(k) for k in ds.keys()]  # noqa: SIM118 - iterating a Dataset yields elements
        if not keys:
            raise IngestError("truncated", "the object ends before its first data element")
        last_tag = max(keys)
    raw = ds.get_item(last_tag)
    length = getattr(raw, "length", None)
    value = getattr(raw, "value", None)
    value_tell = getattr(raw, "value_tell", None)
    if isinstance(value, bytes) and length is not None and length != 0xFFFFFFFF:
        if len(value) < length:
            raise IngestError(
                "truncated",
                f"the object ends inside ({last_tag >> 16:04X},{last_tag & 0xFFFF:04X}): "
                f"{len(value)} of {length} bytes",
            )
        meta = getattr(ds, "file_meta", None)
        deflated = meta is not None and _raw_uid(meta.get_item(0x00020010)) == _DEFLATED
        # positions of a deflated object are in the inflated stream, not in the file
        if size is not None and value_tell is not None and not deflated:
            end = value_tell + length
            position = fh.tell()
            if position >= size and size > end:
                raise IngestError(
                    "truncated",
                    f"the object ends inside an element header ({size - end} stray bytes)",
                )


def read_open_file(
    fh: IO[bytes],
    *,
    pseudonymiser: Pseudonymiser,
    source: str,
    head: bytes | None = None,
    classification: str | None = None,
) -> ParseResult:
    """Parse an open binary file positioned at its start (one read, no pixels).

    ``head``, if given, is the file's first bytes already read by the caller,
    and ``classification`` what :func:`classify_head` said of them; the handle
    is rewound before reading.
    """
    if head is None:
        head = fh.read(HEAD_BYTES)
    fh.seek(0)
    kind = classify_head(head) if classification is None else classification
    if kind == "not_dicom":
        raise IngestError(
            "not_dicom", "no 'DICM' marker at byte 128 and no DICOM element at the start", source
        )
    if kind == "dicomdir":
        raise IngestError(
            "unsupported_sop_class", "a DICOMDIR is a media index, not an exposure", source
        )
    has_preamble = len(head) >= 132 and head[128:132] == b"DICM"
    size: int | None
    try:
        size = os.fstat(fh.fileno()).st_size
    except (AttributeError, OSError, io.UnsupportedOperation):
        size = len(fh.getbuffer()) if isinstance(fh, io.BytesIO) else None
    ds: Dataset
    try:
        common = _read_common(fh, head, size) if has_preamble else None
        if common is None:
            ds = dcmread(fh, stop_before_pixels=True, force=not has_preamble)
        else:
            ds, fh = common
    except InvalidDicomError as exc:
        raise IngestError("not_dicom", f"not a DICOM object: {exc}", source) from None
    except EOFError as exc:
        raise IngestError("truncated", f"the object ends early: {exc}", source) from None
    except (ValueError, TypeError, KeyError, NotImplementedError, OverflowError) as exc:
        raise IngestError("bad_value", f"cannot decode the object: {exc}", source) from None
    except OSError as exc:
        if exc.errno is not None:
            raise  # a real I/O error: the caller reports the file as unreadable
        # pydicom's "No tag to read at file position ...": a sequence or item never closed
        raise IngestError("truncated", f"the object ends early: {exc}", source) from None
    except _UNDECODABLE as exc:
        if _meta_cut_short(head, size):
            raise IngestError(
                "truncated", "the object ends inside its file meta group", source
            ) from None
        raise IngestError("bad_value", _undecodable_reason(exc), source) from None
    try:
        _check_complete(ds, fh, size)
    except IngestError as exc:
        raise exc.with_source(source) from None
    return _decode_guard(ds, pseudonymiser, source)


#: transfer syntaxes whose data set is read as it stands (PS3.5 Annex A: implicit VR little
#: endian; explicit VR little endian, which every encapsulated syntax uses outside the pixels);
#: the rest (big endian, deflated, private, unknown) go through ``dcmread``
_PLAIN_SYNTAXES = frozenset(
    str(uid)
    for uid in AllTransferSyntaxes
    if uid in (ImplicitVRLittleEndian, ExplicitVRLittleEndian)
    or (uid.is_encapsulated and uid.is_little_endian and not uid.is_deflated)
)


def _raw_uid(element: Any) -> str | None:
    """A UI value as written (trailing NUL or space padding removed), without decoding the
    element (pydicom's UID validation is for values we keep, not for this look-up)."""
    value = getattr(element, "value", None)
    if isinstance(value, bytes):
        return value.rstrip(b"\x00 ").decode("ascii", "replace")
    return str(value).rstrip("\x00 ") if isinstance(value, str) else None


#: pydicom's own stop_before_pixels test: Pixel Data, Float and Double Float Pixel Data
_PIXEL_TAGS = frozenset({0x7FE00010, 0x7FE00009, 0x7FE00008})


def _at_pixels(tag: int, vr: str | None, length: int) -> bool:
    return tag >> 16 == 0x7FE0 and int(tag) in _PIXEL_TAGS


#: files up to this size are read into memory in one call before parsing (pydicom's many small
#: reads cost less from memory); larger ones, which hold pixel data, are read from the handle
_IN_MEMORY_BYTES = 1 << 20


def _read_common(fh: IO[bytes], head: bytes, size: int | None) -> tuple[Dataset, IO[bytes]] | None:
    """The data set of a Part 10 file in the common case, read with pydicom's ``read_dataset``.

    ``dcmread`` reads the same elements with the same element parser, plus a command-set
    group, a second copy of the file meta and a ``FileDataset`` wrapper: about twice the work
    for a header. This path takes a file with preamble and "DICM", a well-formed explicit-VR
    file meta group within ``head`` (the file's first bytes, already read) and a plain
    transfer syntax (:data:`_PLAIN_SYNTAXES`) whose data set starts after group 0002 with a
    group above 0000; for anything else it returns ``None`` with the handle rewound, and the
    caller uses ``dcmread``, which then reads (or refuses) the file as it always did. Pixel
    data is never read.

    Returns the data set (its ``file_meta`` set, from the same raw elements pydicom would
    make) and the handle it was read from (positions as in the file: a small file is read
    from a copy in memory).
    """
    found = _meta_elements(head, 132)
    if found is None:
        return None
    elements, start = found
    syntax = _raw_uid(elements.get(BaseTag(0x00020010)))  # Transfer Syntax UID
    command_group = head[start : start + 2] == b"\x00\x00"  # (0000,eeee): dcmread's business
    if syntax not in _PLAIN_SYNTAXES or start + 2 > len(head) or command_group:
        return None
    source: IO[bytes]
    if size is not None and size <= len(head):
        source = io.BytesIO(head)
    elif size is not None and size <= _IN_MEMORY_BYTES and not isinstance(fh, io.BytesIO):
        fh.seek(0)
        source = io.BytesIO(fh.read())
    else:
        source = fh
    source.seek(start)
    ds = read_pydicom_dataset(
        cast(BinaryIO, source),
        is_implicit_VR=syntax == str(ImplicitVRLittleEndian),
        is_little_endian=True,
        stop_when=_at_pixels,
    )
    ds.file_meta = FileMetaDataset(cast(dict[BaseTag, DataElement | RawDataElement], elements))
    return ds, source


#: explicit-VR value representations whose length takes 4 bytes after 2 reserved (PS3.5 7.1.2)
_LONG_VRS = frozenset(v.encode("ascii") for v in EXPLICIT_VR_LENGTH_32)


def _meta_elements(data: bytes, offset: int) -> tuple[dict[BaseTag, RawDataElement], int] | None:
    """The explicit-VR little-endian group 0002 starting at ``offset`` of ``data``.

    Returns its elements as pydicom's raw elements (what ``read_dataset`` makes of them) and
    the offset just past the group, or ``None`` when the group is not plainly readable within
    ``data``: an unknown VR (an implicit-VR meta group, say), an undefined length, a value
    running past the end of ``data``, no element at all.
    """
    elements: dict[BaseTag, RawDataElement] = {}
    pos = offset
    end = len(data)
    for element, vr, value_at, length in _group_0002(data, offset):
        if vr not in _VRS or length == 0xFFFFFFFF or value_at + length > end:
            return None
        tag = BaseTag(0x00020000 | element)
        elements[tag] = RawDataElement(
            tag, vr.decode("ascii"), length, data[value_at : value_at + length], value_at,
            False, True,
        )  # fmt: skip
        pos = value_at + length
    # the group ended at the header of another group, not at the end of ``data``
    if not elements or pos + 8 > end or data[pos : pos + 2] == b"\x02\x00":
        return None
    return elements, pos


_EXPLICIT_HEADER = struct.Struct("<HH2sH")
_LONG_LENGTH = struct.Struct("<L")


def _decode_guard(ds: Dataset, pseudonymiser: Pseudonymiser, source: str) -> ParseResult:
    try:
        return read_dataset(ds, pseudonymiser=pseudonymiser, source=source)
    except IngestError:
        raise
    except (ValueError, TypeError, KeyError, AttributeError, EOFError, NotImplementedError) as exc:
        # pydicom decoding a malformed nested element (a bad sequence, a wrong VR length)
        raise IngestError(
            "bad_value", f"cannot decode an element: {type(exc).__name__}: {exc}", source
        ) from None
    except _UNDECODABLE as exc:
        raise IngestError("bad_value", _undecodable_reason(exc), source) from None
    except OSError as exc:
        if exc.errno is not None:
            raise
        # a sequence parsed on first use that runs past the end of its bytes
        raise IngestError("truncated", f"a sequence ends early: {exc}", source) from None


#: failures of pydicom on hostile structure: a "deflated" body that is not a deflate stream,
#: sequences nested past Python's recursion limit, a binary value whose length is no multiple
#: of its VR's value size, or too short to unpack
_UNDECODABLE: tuple[type[BaseException], ...] = (
    zlib.error,
    RecursionError,
    BytesLengthException,
    struct.error,
)


def _undecodable_reason(exc: BaseException) -> str:
    if isinstance(exc, struct.error):
        return f"a binary value is shorter than its VR needs: {exc}"
    if isinstance(exc, BytesLengthException):
        return f"a value's length does not fit its VR: {exc}".split(". To replace")[0]
    if isinstance(exc, RecursionError):
        return "sequences nest too deeply to be read (PS3.16 templates nest fewer than 10 levels)"
    return f"the deflated data set cannot be inflated: {exc}"


def read_file(path: str | os.PathLike[str], *, pseudonymiser: Pseudonymiser) -> ParseResult:
    """Parse the DICOM file at ``path`` (content decides, not the extension).

    Raises
    ------
    IngestError
        ``unreadable`` if the file cannot be opened, otherwise as
        :func:`read_dataset`, plus ``not_dicom`` and ``truncated``.
    """
    source = str(path)
    try:
        fh = open(path, "rb")  # noqa: SIM115 - closed below, around one read
    except OSError as exc:
        raise IngestError("unreadable", f"cannot open: {exc.strerror}", source) from None
    with fh:
        try:
            return read_open_file(fh, pseudonymiser=pseudonymiser, source=source)
        except OSError as exc:
            raise IngestError("unreadable", f"read failed: {exc.strerror}", source) from None


def read_bytes(data: bytes, *, pseudonymiser: Pseudonymiser, source: str) -> ParseResult:
    """Parse a DICOM object held in memory (a Part 10 file's bytes, or a
    preamble-less encoding that starts with group 0002 or 0008)."""
    return read_open_file(io.BytesIO(data), pseudonymiser=pseudonymiser, source=source)


def is_dicom_file(path: str | os.PathLike[str]) -> bool | None:
    """A fast content sniff: ``True`` for DICOM (DICOMDIR included), ``False``
    if not, ``None`` if the file cannot be read."""
    try:
        with open(path, "rb") as fh:
            head = fh.read(HEAD_BYTES)
    except OSError:
        return None
    return classify_head(head) != "not_dicom"
