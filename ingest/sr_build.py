"""A small builder for DICOM SR content trees, for test and demonstration data.

Dose reports that follow the PS3.16 templates can be written with these
helpers (``tests/ingest/rdsr_builders.py`` builds TID 10001 and TID 10011
reports with them; the demo reuses them). **What they build is synthetic
data for tests and demos, never a record of a real examination.**

Strict on what it writes: every item gets a coded concept name, a value type
and a relationship; NUM items need a UCUM unit; values are checked for their
type. Nothing here reads or guesses.

Examples
--------
>>> dap = num(("122130", "DCM", "Dose Area Product"), 1.2e-5, "Gy.m2")
>>> dap.ValueType
'NUM'
"""

from __future__ import annotations

from collections.abc import Iterable
from datetime import datetime

from pydicom.dataset import Dataset, FileMetaDataset
from pydicom.sequence import Sequence
from pydicom.uid import ExplicitVRLittleEndian, generate_uid

__all__ = [
    "Concept",
    "build_sr_document",
    "code",
    "code_item",
    "container",
    "datetime_item",
    "num",
    "text",
    "uidref",
]

Concept = tuple[str, str, str]  # (CodeValue, CodingSchemeDesignator, CodeMeaning)

_RELATIONSHIPS = frozenset(
    {"CONTAINS", "HAS OBS CONTEXT", "HAS CONCEPT MOD", "HAS PROPERTIES", "HAS ACQ CONTEXT",
     "INFERRED FROM", "SELECTED FROM"}
)  # fmt: skip
XRAY_RADIATION_DOSE_SR = "1.2.840.10008.5.1.4.1.1.88.67"
_UCUM_MEANINGS = {
    "Gy.m2": "Gy.m2",
    "Gy": "Gy",
    "mGy": "mGy",
    "mGy.cm": "mGy.cm",
    "s": "s",
    "ms": "ms",
    "uA.s": "uA.s",
    "mA": "mA",
    "kV": "kV",
    "mm": "mm",
    "m2": "m2",
    "1": "no units",
    "{ratio}": "ratio",
    "{pulse}/s": "pulse/s",
    "{events}": "events",
    "{X-Ray sources}": "X-Ray sources",
}


def code(concept: Concept) -> Dataset:
    """A code sequence item ``(CodeValue, CodingSchemeDesignator, CodeMeaning)``."""
    value, scheme, meaning = concept
    if not value or not scheme:
        raise ValueError(f"a code needs a value and a scheme: {concept!r}")
    item = Dataset()
    if len(value) > 16:
        item.LongCodeValue = value
    else:
        item.CodeValue = value
    item.CodingSchemeDesignator = scheme
    item.CodeMeaning = meaning
    return item


def _item(concept: Concept, value_type: str, relationship: str | None) -> Dataset:
    item = Dataset()
    if relationship is not None:
        if relationship not in _RELATIONSHIPS:
            raise ValueError(f"unknown relationship type {relationship!r}")
        item.RelationshipType = relationship
    item.ValueType = value_type
    item.ConceptNameCodeSequence = Sequence([code(concept)])
    return item


def container(
    concept: Concept, children: Iterable[Dataset] = (), *, relationship: str | None = "CONTAINS"
) -> Dataset:
    """A CONTAINER item (``relationship=None`` for a document root) with ``children``."""
    item = _item(concept, "CONTAINER", relationship)
    item.ContinuityOfContent = "SEPARATE"
    kids = list(children)
    if kids:
        item.ContentSequence = Sequence(kids)
    return item


def num(
    concept: Concept, value: float, unit: str, *, relationship: str = "CONTAINS",
    children: Iterable[Dataset] = (),
) -> Dataset:  # fmt: skip
    """A NUM item with its UCUM unit (e.g. ``"Gy.m2"``, ``"mGy"``, ``"uA.s"``), and the items
    that qualify it (``children``)."""
    if isinstance(value, bool) or not isinstance(value, int | float):
        raise TypeError(f"a NUM value must be a number, not {value!r}")
    if not unit:
        raise ValueError("a NUM item needs a unit")
    item = _item(concept, "NUM", relationship)
    measured = Dataset()
    measured.NumericValue = format(float(value), ".10g")[:16]
    measured.FloatingPointValue = float(value)
    measured.MeasurementUnitsCodeSequence = Sequence(
        [code((unit, "UCUM", _UCUM_MEANINGS.get(unit, unit)))]
    )
    item.MeasuredValueSequence = Sequence([measured])
    kids = list(children)
    if kids:
        item.ContentSequence = Sequence(kids)
    return item


def code_item(
    concept: Concept, value: Concept, *, relationship: str = "CONTAINS",
    children: Iterable[Dataset] = (),
) -> Dataset:  # fmt: skip
    """A CODE item whose value is the coded concept ``value``."""
    item = _item(concept, "CODE", relationship)
    item.ConceptCodeSequence = Sequence([code(value)])
    kids = list(children)
    if kids:
        item.ContentSequence = Sequence(kids)
    return item


def text(concept: Concept, value: str, *, relationship: str = "CONTAINS") -> Dataset:
    """A TEXT item."""
    if not isinstance(value, str) or not value:
        raise ValueError("a TEXT item needs a non-empty string")
    item = _item(concept, "TEXT", relationship)
    item.TextValue = value
    return item


def uidref(concept: Concept, uid: str, *, relationship: str = "CONTAINS") -> Dataset:
    """A UIDREF item."""
    if not uid or len(uid) > 64 or not all(c.isdigit() or c == "." for c in uid):
        raise ValueError(f"not a UID: {uid!r}")
    item = _item(concept, "UIDREF", relationship)
    item.UID = uid
    return item


def datetime_item(concept: Concept, value: datetime, *, relationship: str = "CONTAINS") -> Dataset:
    """A DATETIME item (DT, with the UTC offset when ``value`` is aware)."""
    item = _item(concept, "DATETIME", relationship)
    text_value = value.strftime("%Y%m%d%H%M%S")
    if value.utcoffset() is not None:
        text_value += value.strftime("%z")
    item.DateTime = text_value
    return item


def build_sr_document(
    root: Dataset,
    *,
    sop_class_uid: str = XRAY_RADIATION_DOSE_SR,
    study_instance_uid: str | None = None,
    series_instance_uid: str | None = None,
    sop_instance_uid: str | None = None,
    study_datetime: datetime = datetime(2024, 1, 15, 9, 30),
    patient_id: str = "DEMO-0001",
    patient_age: str | None = "054Y",
    patient_sex: str | None = "F",
    patient_weight_kg: float | None = 70.0,
    patient_height_m: float | None = 1.65,
    accession_number: str = "DEMO-ACC-1",
    manufacturer: str = "Demo Imaging",
    model_name: str = "Demo Model",
    device_serial_number: str = "SN-0001",
    station_name: str | None = "ROOM1",
    study_description: str | None = None,
    institution_name: str | None = "Demo Hospital",
) -> Dataset:
    """An SR document around the content tree ``root`` (a CONTAINER without
    relationship), with the modules an X-Ray Radiation Dose SR IOD needs
    (PS3.3 A.35.8) and a file meta group, ready for ``save_as``.

    The patient is invented (``patient_id`` defaults to a demo identifier);
    no name or birth date is written.
    """
    if root.get("ValueType") != "CONTAINER" or "RelationshipType" in root:
        raise ValueError("the root must be a CONTAINER without relationship type")
    ds = Dataset()
    ds.SpecificCharacterSet = "ISO_IR 192"
    ds.SOPClassUID = sop_class_uid
    ds.SOPInstanceUID = sop_instance_uid or generate_uid()
    ds.StudyInstanceUID = study_instance_uid or generate_uid()
    ds.SeriesInstanceUID = series_instance_uid or generate_uid()
    ds.Modality = "SR"
    ds.StudyDate = ds.ContentDate = study_datetime.strftime("%Y%m%d")
    ds.StudyTime = ds.ContentTime = study_datetime.strftime("%H%M%S")
    ds.AccessionNumber = accession_number
    ds.StudyID = "1"
    ds.SeriesNumber = 99
    ds.InstanceNumber = 1
    ds.ReferringPhysicianName = ""
    ds.PatientName = ""
    ds.PatientID = patient_id
    ds.PatientBirthDate = ""
    ds.PatientSex = patient_sex or ""
    if patient_age is not None:
        ds.PatientAge = patient_age
    if patient_weight_kg is not None:
        ds.PatientWeight = patient_weight_kg
    if patient_height_m is not None:
        ds.PatientSize = patient_height_m
    ds.Manufacturer = manufacturer
    ds.ManufacturerModelName = model_name
    ds.DeviceSerialNumber = device_serial_number
    ds.SoftwareVersions = "1.0"
    if station_name is not None:
        ds.StationName = station_name
    if institution_name is not None:
        ds.InstitutionName = institution_name
    if study_description is not None:
        ds.StudyDescription = study_description
    ds.CompletionFlag = "COMPLETE"
    ds.VerificationFlag = "UNVERIFIED"
    for keyword in (
        "ValueType",
        "ConceptNameCodeSequence",
        "ContinuityOfContent",
        "ContentSequence",
    ):
        if keyword in root:
            setattr(ds, keyword, root.get(keyword))
    meta = FileMetaDataset()
    meta.MediaStorageSOPClassUID = ds.SOPClassUID
    meta.MediaStorageSOPInstanceUID = ds.SOPInstanceUID
    meta.TransferSyntaxUID = ExplicitVRLittleEndian
    ds.file_meta = meta
    return ds
