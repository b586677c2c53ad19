"""A generated corpus of malformed inputs, each with the ingest error it must give.

Every case is bytes as a file (or a network peer) would hand them over, built here with pydicom
and by hand where pydicom refuses to write the damage. Each has an ``id``, a sentence on what is
wrong, and the ingest error codes it may give (``"conflict"`` for a SOP Instance UID reused with
other content; that one needs its ``first`` object stored before). The patient in every case is
the invented :data:`PATIENT`, so that the privacy tests can look for it wherever errors and
events end up.

The structure rules quoted are PS3.5 (data elements section 7.1, sequences 7.5, VRs Table 6.2-1,
UIDs 9.1), PS3.10 section 7.1 (preamble, "DICM", file meta) and PS3.16 (dose report templates
TID 10001 / 10011). :func:`tolerated` lists deviations a tolerant reader accepts (strict on what
it writes, tolerant on what it reads): those must be stored, not rejected.
"""

from __future__ import annotations

import gzip
import io
import random
import struct
from collections.abc import Callable
from dataclasses import dataclass
from functools import cache

from pydicom.datadict import dictionary_VR, tag_for_keyword
from pydicom.dataelem import RawDataElement
from pydicom.dataset import Dataset, FileMetaDataset
from pydicom.filebase import DicomBytesIO
from pydicom.filewriter import write_dataset, write_file_meta_info
from pydicom.sequence import Sequence
from pydicom.tag import Tag
from pydicom.uid import (
    DeflatedExplicitVRLittleEndian,
    ExplicitVRBigEndian,
    ExplicitVRLittleEndian,
    ImplicitVRLittleEndian,
    generate_uid,
)

__all__ = [
    "COMPREHENSIVE_SR",
    "DX_PRESENTATION",
    "MR_IMAGE",
    "PATIENT",
    "Case",
    "cases",
    "dx_header",
    "encode",
    "part10",
    "split_part10",
    "tolerated",
]

# SOP Class UIDs, PS3.4 Table B.5-1
DX_PRESENTATION = "1.2.840.10008.5.1.4.1.1.1.1"
MR_IMAGE = "1.2.840.10008.5.1.4.1.1.4"
COMPREHENSIVE_SR = "1.2.840.10008.5.1.4.1.1.88.33"

#: The invented patient every case carries (no real person; the privacy tests search for these).
PATIENT = {
    "PatientName": "Quillfeather^Zephyrine^Odalys",
    "PatientID": "MRN-88412-QX",
    "PatientBirthDate": "19370412",
    "OtherPatientIDs": "ALT-55190-ZR",
}


@dataclass(frozen=True)
class Case:
    """One malformed input.

    Attributes
    ----------
    id : str
        Stable name (used as file name and test id).
    what : str
        What is wrong with it.
    data : bytes
        The bytes, as a file holds them.
    expected : tuple of str
        The ingest error codes it may give (one, unless the damage has two honest readings).
    first : bytes or None
        An object that must be stored before ``data`` (duplicate-UID cases).
    """

    id: str
    what: str
    data: bytes
    expected: tuple[str, ...]
    first: bytes | None = None


def _uid(name: str) -> str:
    """A UID derived from ``name`` (the same in every run, distinct per name)."""
    return generate_uid(entropy_srcs=["beamaudit reliability corpus", name])


def dx_header(name: str, **values: object) -> Dataset:
    """A complete DX For Presentation header (no pixel data) with the invented patient."""
    ds = Dataset()
    ds.SpecificCharacterSet = "ISO_IR 100"
    ds.SOPClassUID = DX_PRESENTATION
    ds.SOPInstanceUID = _uid(name + "/sop")
    ds.StudyDate = "20240305"
    ds.StudyTime = "101500"
    ds.AccessionNumber = "ACC-" + name[:10]
    ds.Modality = "DX"
    ds.Manufacturer = "Corpus Imaging (invented)"
    ds.InstitutionName = "Kestrel Bay General (invented)"
    ds.StationName = "ROOM-DR1"
    ds.StudyDescription = "XR CHEST"
    ds.ManufacturerModelName = "CorpusDR"
    for keyword, value in PATIENT.items():
        setattr(ds, keyword, value)
    ds.PatientSex = "F"
    ds.PatientAge = "086Y"
    ds.BodyPartExamined = "CHEST"
    ds.KVP = "125"
    ds.DistanceSourceToDetector = "1800"
    ds.ExposureTime = 6
    ds.XRayTubeCurrent = 400
    ds.ExposureInuAs = 2500
    ds.ImageAndFluoroscopyAreaDoseProduct = "0.11"
    ds.ProtocolName = "Chest PA"
    ds.StudyInstanceUID = _uid(name + "/study")
    ds.SeriesInstanceUID = _uid(name + "/series")
    ds.ViewPosition = "PA"
    for keyword, value in values.items():
        setattr(ds, keyword, value)
    _meta(ds)
    return ds


def _meta(ds: Dataset, transfer_syntax: str = ExplicitVRLittleEndian) -> Dataset:
    meta = FileMetaDataset()
    meta.MediaStorageSOPClassUID = ds.SOPClassUID
    meta.MediaStorageSOPInstanceUID = ds.SOPInstanceUID
    meta.TransferSyntaxUID = transfer_syntax
    ds.file_meta = meta
    return ds


def encode(ds: Dataset) -> bytes:
    """A Part 10 file's bytes (preamble, "DICM", file meta, data set)."""
    buffer = io.BytesIO()
    ds.save_as(buffer, enforce_file_format=True)
    return buffer.getvalue()


def _body(ds: Dataset, *, implicit: bool = False, little: bool = True) -> bytes:
    buffer = DicomBytesIO()
    buffer.is_little_endian = little
    buffer.is_implicit_VR = implicit
    write_dataset(buffer, ds)
    return buffer.getvalue()


def part10(body: bytes, *, sop_class: str, sop_instance: str, transfer_syntax: str) -> bytes:
    """Preamble, "DICM" and a valid file meta group in front of ``body`` (any bytes)."""
    meta = FileMetaDataset()
    meta.MediaStorageSOPClassUID = sop_class
    if sop_instance:  # empty: the meta group lacks it (a damaged file)
        meta.MediaStorageSOPInstanceUID = sop_instance
    meta.TransferSyntaxUID = transfer_syntax
    buffer = DicomBytesIO()
    buffer.is_little_endian = True
    buffer.is_implicit_VR = False
    buffer.write(b"\x00" * 128 + b"DICM")
    write_file_meta_info(buffer, meta, enforce_standard=bool(sop_instance))
    return buffer.getvalue() + body


def split_part10(data: bytes) -> tuple[int, str, str, str] | None:
    """``(body offset, SOP Class, SOP Instance, Transfer Syntax)`` of a Part 10 file whose file
    meta is intact, else None (the corpus's junk: it has no meta a sender could use)."""
    if len(data) < 144 or data[128:132] != b"DICM":
        return None
    pos = 132
    found: dict[int, str] = {}
    while pos + 8 <= len(data) and data[pos : pos + 2] == b"\x02\x00":
        element = int.from_bytes(data[pos + 2 : pos + 4], "little")
        vr = data[pos + 4 : pos + 6]
        if vr in (b"OB", b"OW", b"UN", b"UT", b"SQ", b"UC", b"UR", b"OV", b"OL"):
            length = int.from_bytes(data[pos + 8 : pos + 12], "little")
            start = pos + 12
        else:
            length = int.from_bytes(data[pos + 6 : pos + 8], "little")
            start = pos + 8
        found[element] = data[start : start + length].rstrip(b"\x00 ").decode("ascii", "replace")
        pos = start + length
    try:
        return pos, found[0x0002], found[0x0003], found[0x0010]
    except KeyError:
        return None


def _raw(ds: Dataset, keyword: str, value: bytes, vr: str | None = None) -> Dataset:
    """Set ``keyword`` to undecoded ``value`` bytes (pydicom would refuse to encode the damage)."""
    tag = Tag(tag_for_keyword(keyword))
    vr = vr or dictionary_VR(tag)
    if len(value) % 2:
        value += b"\x00" if vr == "UI" else b" "
    ds._dict[tag] = RawDataElement(tag, vr, len(value), value, 0, False, True)
    return ds


def _dx_raw(name: str, **raw_values: bytes) -> bytes:
    ds = dx_header(name)
    for keyword, value in raw_values.items():
        _raw(ds, keyword, value)
    return encode(ds)


def _value_offset(data: bytes, keyword: str) -> int:
    """Offset of ``keyword``'s value in an explicit-VR little-endian encoding (short VRs)."""
    tag = Tag(tag_for_keyword(keyword))
    marker = struct.pack("<HH", tag.group, tag.element) + dictionary_VR(tag).encode()
    pos = data.find(marker, 132)
    assert pos > 0, keyword
    return pos + 8


def _replace_vr(data: bytes, keyword: str, new_vr: bytes) -> bytes:
    pos = _value_offset(data, keyword) - 4
    return data[:pos] + new_vr + data[pos + 2 :]


def _nested(depth: int) -> bytes:
    """``depth`` sequences of undefined length, each holding one item holding the next."""
    seq = b"\x08\x00\x40\x11SQ\x00\x00\xff\xff\xff\xff"  # (0008,1140) Referenced Image Sequence
    item = b"\xfe\xff\x00\xe0\xff\xff\xff\xff"
    item_end = b"\xfe\xff\x0d\xe0\x00\x00\x00\x00"
    seq_end = b"\xfe\xff\xdd\xe0\x00\x00\x00\x00"
    return (seq + item) * depth + (item_end + seq_end) * depth


def _with_body(ds: Dataset, body: bytes, transfer_syntax: str = ExplicitVRLittleEndian) -> bytes:
    """``body`` (any bytes) behind the file meta of ``ds`` (its SOP Class and Instance UIDs)."""
    return part10(
        body, sop_class=ds.SOPClassUID, sop_instance=ds.SOPInstanceUID,
        transfer_syntax=transfer_syntax,
    )  # fmt: skip


# ---------------------------------------------------------------- dose reports


def _report(name: str, kind: str = "radiography", **document: object) -> Dataset:
    import rdsr_builders as rb  # tests/ingest, on sys.path through tests/conftest.py

    document.setdefault("patient_id", PATIENT["PatientID"])
    document.setdefault("sop_instance_uid", _uid(name + "/sop"))
    study = _uid(name + "/study")
    if kind == "ct":
        ds = rb.ct_report(study_uid=study, **document)
    elif kind == "fluoro":
        ds = rb.fluoroscopy_report(study_uid=study, **document)
    else:
        ds = rb.radiography_report(study_uid=study, event_uid=_uid(name + "/event"), **document)
    ds.PatientName = PATIENT["PatientName"]
    ds.PatientBirthDate = PATIENT["PatientBirthDate"]
    return ds


def _items(ds: Dataset, code_value: str) -> list[Dataset]:
    """Every content item below ``ds`` whose concept name has ``code_value``."""
    found = []
    for item in ds.get("ContentSequence") or ():
        names = item.get("ConceptNameCodeSequence")
        if names and names[0].get("CodeValue") == code_value:
            found.append(item)
        found.extend(_items(item, code_value))
    return found


def _measured(ds: Dataset, code_value: str) -> Dataset:
    return _items(ds, code_value)[0].MeasuredValueSequence[0]


def _mutated_report(name: str, mutate: Callable[[Dataset], object], kind: str = "radiography"):
    ds = _report(name, kind)
    mutate(ds)
    return encode(ds)


def _nest_content(ds: Dataset, depth: int) -> None:
    leaf = ds.ContentSequence[-1]
    for _ in range(depth):
        wrapper = Dataset()
        wrapper.RelationshipType = "CONTAINS"
        wrapper.ValueType = "CONTAINER"
        wrapper.ContinuityOfContent = "SEPARATE"
        code = Dataset()
        code.CodeValue, code.CodingSchemeDesignator, code.CodeMeaning = "113706", "DCM", "x"
        wrapper.ConceptNameCodeSequence = Sequence([code])
        wrapper.ContentSequence = Sequence([leaf])
        leaf = wrapper
    ds.ContentSequence[-1] = leaf


def _set_unit(item: Dataset, unit: str) -> None:
    item.MeasurementUnitsCodeSequence[0].CodeValue = unit


def _fp_value(measured: Dataset, value: float) -> None:
    measured.FloatingPointValue = value


def _numeric_text(measured: Dataset, value: bytes) -> None:
    """The NUM item's value as Numeric Value text only (no Floating Point Value beside it)."""
    if "FloatingPointValue" in measured:
        del measured.FloatingPointValue
    _raw(measured, "NumericValue", value, "DS")


# ---------------------------------------------------------------- the corpus


def _truncations() -> list[Case]:
    good = encode(dx_header("trunc"))
    report = encode(_report("trunc-report", "fluoro"))
    cases = [
        Case(f"truncated-at-{n}", f"a DX header cut after {n} bytes (inside the file meta)",
             good[:n], ("truncated",))
        for n in (132, 140, 170, 220, 300)
    ]  # fmt: skip
    for keyword in ("PatientID", "KVP", "StationName", "ProtocolName", "SeriesInstanceUID"):
        cut = _value_offset(good, keyword) + 1
        cases.append(
            Case(f"truncated-in-{keyword}", f"a DX header cut inside the value of {keyword}",
                 good[:cut], ("truncated",))
        )  # fmt: skip
    cut = _value_offset(good, "KVP") - 5  # inside the element header of KVP
    cases.append(
        Case("truncated-in-element-header", "cut inside an element header (tag, VR, length)",
             good[:cut], ("truncated",))
    )  # fmt: skip
    for fraction in (0.5, 0.8):
        cut = int(len(report) * fraction)
        cases.append(
            Case(f"truncated-report-{int(fraction * 100)}pc",
                 f"a fluoroscopy dose report cut at {int(fraction * 100)} % of its length "
                 "(inside its content tree)", report[:cut], ("truncated",))
        )  # fmt: skip
    return cases


def _not_dicom() -> list[Case]:
    rnd = random.Random(20240305)
    good = encode(dx_header("not-dicom"))
    return [
        Case("empty-file", "zero bytes", b"", ("not_dicom",)),
        Case("text-file", "a text file", b"kVp 80, mAs 10, DAP 0.1\n" * 40, ("not_dicom",)),
        Case("html-error-page", "a PACS's HTML error page saved as .dcm",
             b"<html><body><h1>500 Internal Server Error</h1></body></html>\n", ("not_dicom",)),
        Case("png-signature", "a PNG file", b"\x89PNG\r\n\x1a\n" + bytes(2000), ("not_dicom",)),
        Case("gzip-of-dicom", "a gzip-compressed DICOM file", gzip.compress(good),
             ("not_dicom",)),
        Case("random-4k", "4 KiB of random bytes", rnd.randbytes(4096), ("not_dicom",)),
        Case("zeros-4k", "4 KiB of zero bytes", bytes(4096), ("not_dicom",)),
        Case("dicm-at-offset-0", "'DICM' at the start instead of at byte 128 (no preamble)",
             b"DICM" + good[132:], ("not_dicom",)),
        Case("preamble-cut-in-dicm", "the preamble and half of 'DICM'", good[:130],
             ("not_dicom",)),
        Case("preamble-then-random", "preamble and 'DICM' followed by random bytes",
             good[:132] + rnd.randbytes(2000), ("truncated", "bad_value", "not_dicom")),
    ]  # fmt: skip


def _structure() -> list[Case]:
    ds = dx_header("structure")
    body = _body(ds)
    kvp = _value_offset(encode(ds), "KVP")
    no_sop_class = dx_header("no-meta-no-class")
    del no_sop_class.SOPClassUID
    undefined_seq = b"\x08\x00\x40\x11SQ\x00\x00\xff\xff\xff\xff\xfe\xff\x00\xe0\xff\xff\xff\xff"
    referenced = b"\x08\x00\x50\x11UI\x04\x001.2\x00"  # (0008,1150) inside the item
    many_items = (
        b"\x08\x00\x40\x11SQ\x00\x00\xff\xff\xff\xff"
        + (b"\xfe\xff\x00\xe0\x0c\x00\x00\x00" + referenced) * 100_000
    )
    return [
        Case("no-meta-no-sop-class", "preamble and 'DICM', no file meta group, no SOP Class UID",
             b"\x00" * 128 + b"DICM" + _body(no_sop_class), ("missing_attribute",)),
        Case("meta-big-endian-body-little", "file meta says Explicit VR Big Endian, the data set "
             "is little endian", _with_body(ds, body, ExplicitVRBigEndian),
             ("truncated", "bad_value")),
        Case("meta-little-body-big", "file meta says Explicit VR Little Endian, the data set is "
             "big endian", _with_body(ds, _body(ds, little=False)),
             ("truncated", "bad_value")),
        Case("meta-deflated-body-plain", "file meta says Deflated Explicit VR Little Endian, the "
             "data set is not deflated", _with_body(ds, body,
                                                    DeflatedExplicitVRLittleEndian),
             ("bad_value",)),
        Case("mixed-little-then-big-endian", "the data set switches from little to big endian "
             "at the technique (group 0018)", _with_body(ds, _body(
                 _part(ds, below=0x00180000)) + _body(_part(ds, at_or_above=0x00180000),
                                                      little=False)),
             ("truncated", "bad_value")),
        Case("meta-implicit-body-big-endian", "file meta says Implicit VR Little Endian, the "
             "data set is explicit VR big endian", _with_body(ds, _body(ds, little=False),
                                                          ImplicitVRLittleEndian),
             ("truncated", "bad_value")),
        Case("vr-unknown-on-kvp", "KVP (0018,0060) with the VR 'ZZ', which PS3.5 does not know",
             _replace_vr(encode(ds), "KVP", b"ZZ"), ("bad_value",)),
        Case("vr-lowercase-on-kvp", "KVP with the VR 'ds' (VRs are upper case)",
             _replace_vr(encode(ds), "KVP", b"ds"), ("truncated", "bad_value")),
        Case("vr-binary-on-kvp", "KVP with two binary bytes for a VR",
             _replace_vr(encode(ds), "KVP", b"\x00\x01"), ("truncated", "bad_value")),
        Case("length-past-end", "KVP declares 32767 bytes; the file ends long before",
             (lambda d: d[: kvp - 2] + b"\xff\x7f" + d[kvp:])(encode(ds)), ("truncated",)),
        Case("nested-300", "sequences nested 300 deep (undefined lengths)",
             _with_body(ds, body + _nested(300)), ("bad_value",)),
        Case("nested-5000", "sequences nested 5000 deep",
             _with_body(ds, body + _nested(5000)), ("bad_value",)),
        Case("sequence-never-closed", "a sequence of undefined length whose item and sequence "
             "are never delimited", _with_body(ds, body + undefined_seq + referenced),
             ("truncated",)),
        Case("huge-sequence-never-closed", "a sequence of 100,000 items that is never closed",
             _with_body(ds, body + many_items), ("truncated",)),
        Case("junk-after-data-set", "300 random bytes after the last element",
             _with_body(ds, body + random.Random(7).randbytes(300)),
             ("truncated", "bad_value")),
    ]  # fmt: skip


def _part(ds: Dataset, *, below: int = 1 << 32, at_or_above: int = 0) -> Dataset:
    part = Dataset()
    for element in ds:
        if at_or_above <= int(element.tag) < below:
            part.add(element)
    return part


def _values() -> list[Case]:
    raw = _dx_raw
    return [
        Case("kvp-1000", "KVP 1000 kV (outside 20-150 kV)", raw("kvp-1000", KVP=b"1000"),
             ("out_of_range",)),
        Case("kvp-negative", "KVP -80 kV", raw("kvp-neg", KVP=b"-80"), ("out_of_range",)),
        Case("kvp-nan", "KVP 'NaN'", raw("kvp-nan", KVP=b"NaN"), ("bad_value",)),
        Case("kvp-infinite", "KVP 'inf'", raw("kvp-inf", KVP=b"inf"), ("bad_value",)),
        Case("kvp-text", "KVP 'abc' (not a decimal string)", raw("kvp-text", KVP=b"abc"),
             ("bad_value",)),
        Case("mas-negative", "Exposure in uAs -5", raw("mas-neg", ExposureInuAs=b"-5"),
             ("out_of_range",)),
        Case("mas-text", "Exposure in uAs 'lots' (not an integer string)",
             raw("mas-text", ExposureInuAs=b"lots"), ("bad_value",)),
        Case("exposure-time-negative", "Exposure Time -10 ms",
             raw("time-neg", ExposureTime=b"-10"), ("out_of_range",)),
        Case("tube-current-negative", "X-Ray Tube Current -1 mA",
             raw("ma-neg", XRayTubeCurrent=b"-1"), ("out_of_range",)),
        Case("sid-zero", "Distance Source to Detector 0 mm",
             raw("sid-0", DistanceSourceToDetector=b"0"), ("out_of_range",)),
        Case("sid-negative", "Distance Source to Detector -1800 mm",
             raw("sid-neg", DistanceSourceToDetector=b"-1800"), ("out_of_range",)),
        Case("dap-negative", "Image and Fluoroscopy Area Dose Product -1.2 dGy cm2",
             raw("dap-neg", ImageAndFluoroscopyAreaDoseProduct=b"-1.2"), ("out_of_range",)),
        Case("dap-nan", "Area Dose Product 'nan'",
             raw("dap-nan", ImageAndFluoroscopyAreaDoseProduct=b"nan"), ("bad_value",)),
        Case("dap-overflow", "Area Dose Product 1e999 (overflows to infinity)",
             raw("dap-inf", ImageAndFluoroscopyAreaDoseProduct=b"1e999"), ("bad_value",)),
        Case("kvp-70000-digits", "a 70,000-character KVP",
             raw("kvp-long", KVP=b"8" * 70_000), ("bad_value", "out_of_range")),
    ]  # fmt: skip


def _identity() -> list[Case]:
    no_uid = dx_header("no-uid")
    del no_uid.SOPInstanceUID
    no_uid_file = part10(
        _body(no_uid), sop_class=DX_PRESENTATION, sop_instance="",
        transfer_syntax=ExplicitVRLittleEndian,
    )  # fmt: skip
    no_study = dx_header("no-study")
    del no_study.StudyInstanceUID
    return [
        Case("sop-instance-uid-missing", "no SOP Instance UID, in the data set or the file meta",
             no_uid_file, ("missing_attribute",)),
        Case("study-uid-missing", "no Study Instance UID", encode(no_study),
             ("missing_attribute",)),
        Case("study-uid-empty", "an empty Study Instance UID",
             _dx_raw("study-empty", StudyInstanceUID=b""), ("missing_attribute",)),
        Case("sop-class-mr", "an MR image (no x-ray exposure)",
             encode(_meta(dx_header("mr", SOPClassUID=MR_IMAGE, Modality="MR"))),
             ("unsupported_sop_class",)),
        Case("sop-class-junk", "SOP Class UID 'junk'",
             _dx_raw("class-junk", SOPClassUID=b"junk"), ("unsupported_sop_class",)),
        Case("sop-instance-uid-5000", "a SOP Instance UID of 5000 characters (UIDs have at most "
             "64, PS3.5 9.1)", _dx_raw("uid-long", SOPInstanceUID=b"1." + b"2" * 4998),
             ("bad_value",)),
    ]  # fmt: skip


def _reports() -> list[Case]:
    def root_other(ds: Dataset) -> None:
        ds.ConceptNameCodeSequence[0].CodeValue = "121070"
        ds.ConceptNameCodeSequence[0].CodeMeaning = "Findings"

    def no_root_concept(ds: Dataset) -> None:
        del ds.ConceptNameCodeSequence

    def empty_content(ds: Dataset) -> None:
        ds.ContentSequence = Sequence([])

    def unit_missing(ds: Dataset) -> None:
        del _measured(ds, "122130").MeasurementUnitsCodeSequence  # DAP

    def value_text(ds: Dataset) -> None:
        _numeric_text(_measured(ds, "122130"), b"abc")

    def dap_nan(ds: Dataset) -> None:
        _fp_value(_measured(ds, "122130"), float("nan"))

    def dap_unit_mm(ds: Dataset) -> None:
        _set_unit(_measured(ds, "122130"), "mm")

    def dap_negative(ds: Dataset) -> None:
        _numeric_text(_measured(ds, "122130"), b"-0.5")

    def concept_without_code(ds: Dataset) -> None:
        del _items(ds, "122130")[0].ConceptNameCodeSequence[0].CodeValue

    def ctdi_negative(ds: Dataset) -> None:
        _numeric_text(_measured(ds, "113830"), b"-12.4")

    def ctdi_infinite(ds: Dataset) -> None:
        _fp_value(_measured(ds, "113830"), float("inf"))

    def nested(ds: Dataset) -> None:
        _nest_content(ds, 100)

    not_dose = _report("comprehensive")
    not_dose.SOPClassUID = COMPREHENSIVE_SR
    not_dose.file_meta.MediaStorageSOPClassUID = COMPREHENSIVE_SR
    root_other(not_dose)
    m = _mutated_report
    return [
        Case("report-root-not-dose-report", "an X-Ray Radiation Dose SR whose root concept is "
             "(121070, DCM) Findings", m("root-other", root_other), ("broken_template",)),
        Case("report-root-without-concept", "a dose report whose root has no concept name",
             m("root-none", no_root_concept), ("broken_template",)),
        Case("report-empty-content", "a dose report with an empty content sequence",
             m("empty", empty_content), ("broken_template",)),
        Case("report-dap-without-unit", "a DAP NUM item without measurement units",
             m("no-unit", unit_missing), ("broken_template",)),
        Case("report-dap-text", "a DAP NUM item whose value is 'abc'", m("text", value_text),
             ("bad_value",)),
        Case("report-dap-nan", "a DAP given as floating point NaN", m("nan", dap_nan),
             ("bad_value",)),
        Case("report-dap-in-mm", "a DAP in millimetres (a unit of another dimension)",
             m("mm", dap_unit_mm), ("bad_value",)),
        Case("report-dap-negative", "a DAP of -0.5 Gy m2", m("neg", dap_negative),
             ("out_of_range",)),
        Case("report-concept-without-code", "a content item's concept name has no code value",
             m("no-code", concept_without_code), ("broken_template",)),
        Case("report-ctdivol-negative", "a CT report with Mean CTDIvol -12.4 mGy",
             m("ct-neg", ctdi_negative, "ct"), ("out_of_range",)),
        Case("report-ctdivol-infinite", "a CT report with Mean CTDIvol +inf",
             m("ct-inf", ctdi_infinite, "ct"), ("bad_value",)),
        Case("report-nested-100", "a dose report whose content tree nests 100 containers deep",
             m("nested", nested), ("broken_template",)),
        Case("comprehensive-sr-not-dose", "a Comprehensive SR that is not a dose report",
             encode(not_dose), ("unsupported_sop_class",)),
    ]  # fmt: skip


def _duplicates() -> list[Case]:
    first = dx_header("dup-header")
    other = dx_header("dup-header", KVP="90", ExposureInuAs=4000)
    report = _report("dup-report")
    report_other = _report("dup-report")
    _numeric_text(_measured(report_other, "122130"), b"0.00033")
    return [
        Case("same-uid-other-technique", "a header reusing a stored SOP Instance UID with "
             "another kVp and mAs", encode(other), ("conflict",), first=encode(first)),
        Case("same-uid-other-dose", "a dose report reusing a stored SOP Instance UID with "
             "another DAP", encode(report_other), ("conflict",), first=encode(report)),
    ]  # fmt: skip


@cache
def cases() -> tuple[Case, ...]:
    """Every malformed case (built once per process)."""
    built = (
        *_not_dicom(),
        *_truncations(),
        *_structure(),
        *_values(),
        *_identity(),
        *_reports(),
        *_duplicates(),
    )
    ids = [c.id for c in built]
    assert len(ids) == len(set(ids)), "case ids must be unique"
    return built


@cache
def tolerated() -> tuple[Case, ...]:
    """Deviations a tolerant reader accepts: each must be stored (``expected`` is empty)."""
    ds = dx_header("tolerated")
    odd = _dx_raw
    # groups 0008-0010 in explicit VR, then group 0018 on (the technique) in implicit VR
    mixed_ds = dx_header("mixed")
    mixed = _body(_part(mixed_ds, below=0x00180000)) + _body(
        _part(mixed_ds, at_or_above=0x00180000), implicit=True
    )

    return (
        Case("charset-unknown", "Specific Character Set 'ISO_IR 999'",
             odd("cs-unknown", SpecificCharacterSet=b"ISO_IR 999"), ()),
        Case("charset-utf8-invalid-bytes", "ISO_IR 192 (UTF-8) with invalid bytes in Station "
             "Name", odd("cs-utf8", SpecificCharacterSet=b"ISO_IR 192",
                         StationName=b"DR\xff\xfe\xc3"), ()),
        Case("charset-iso2022-broken-escape", "ISO 2022 IR 87 with a broken escape sequence",
             odd("cs-2022", SpecificCharacterSet=b"ISO 2022 IR 87",
                 StationName=b"\x1b$B\xff\xff\x1b(B"), ()),
        Case("nul-in-station-name", "NUL bytes inside Station Name (PostgreSQL refuses NUL in "
             "text)", odd("nul", StationName=b"DR\x00\x001"), ()),
        Case("protocol-name-10k", "a 10,000-character Protocol Name",
             odd("long-protocol", ProtocolName=b"P" * 10_000), ()),
        Case("meta-explicit-body-implicit", "file meta says explicit VR, the data set is "
             "implicit VR", _with_body(ds, _body(ds, implicit=True)), ()),
        Case("vr-fd-on-kvp", "KVP written as FD (binary double 80.0) where PS3.6 gives DS",
             encode(_raw(dx_header("fd-kvp"), "KVP", struct.pack("<d", 80.0), "FD")), ()),
        Case("mixed-explicit-then-implicit", "the data set switches from explicit to implicit VR "
             "half way", _with_body(mixed_ds, mixed), ()),
        Case("preamble-less", "no preamble and no file meta (a bare data set)",
             _body(dx_header("bare")), ()),
    )  # fmt: skip
