"""A small builder for DICOM SR content trees, for test and demonstration data.

Dose reports that follow the PS3.16 templates can be written with these
helpers (``tests/ingest/rdsr_builders.py`` builds TID 10001 and TID 10011
reports with them; the demo's reports, :mod:`beamaudit.api.demo.sr`, are
built from the same items as plain data, ``*_content``, which the demo
encodes itself). Each item is made once, as plain data (:data:`Item`);
the functions that return pydicom datasets convert it (:func:`as_dataset`).
**What they build is synthetic data for tests and demos, never a record of
a real examination.**

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
from typing import Any

from pydicom.dataset import Dataset, FileMetaDataset
from pydicom.sequence import Sequence
from pydicom.uid import ExplicitVRLittleEndian, generate_uid

__all__ = [
    "Concept",
    "Item",
    "as_dataset",
    "build_sr_document",
    "code",
    "code_content",
    "code_entry",
    "code_item",
    "container",
    "container_content",
    "datetime_content",
    "datetime_item",
    "decimal_string",
    "num",
    "num_content",
    "text",
    "text_content",
    "uidref",
    "uidref_content",
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


#: One content item as plain data: DICOM keyword -> value, a sequence as a list of items (plain
#: ``Item`` dicts or :class:`~pydicom.dataset.Dataset` objects). Writers that encode many
#: reports themselves (the demo) take these; :func:`as_dataset` makes a pydicom dataset of one.
Item = dict[str, Any]


def decimal_string(value: float) -> str:
    """``value`` as a Decimal String of at most 16 characters (PS3.5 6.2, DS): the most
    significant digits, 12 at most, that fit.

    Examples
    --------
    >>> decimal_string(0.000123456789)
    '0.000123456789'
    >>> decimal_string(2.5)
    '2.5'
    """
    for digits in range(12, 2, -1):
        out = f"{value:.{digits}g}"
        if len(out) <= 16:
            return out
    raise ValueError(f"cannot write {value!r} as a DS")


def code_entry(concept: Concept) -> Item:
    """A code sequence item ``(CodeValue, CodingSchemeDesignator, CodeMeaning)``, as plain data."""
    value, scheme, meaning = concept
    if not value or not scheme:
        raise ValueError(f"a code needs a value and a scheme: {concept!r}")
    key = "LongCodeValue" if len(value) > 16 else "CodeValue"
    return {key: value, "CodingSchemeDesignator": scheme, "CodeMeaning": meaning}


def _content(concept: Concept, value_type: str, relationship: str | None) -> Item:
    item: Item = {"ValueType": value_type, "ConceptNameCodeSequence": [code_entry(concept)]}
    if relationship is not None:
        if relationship not in _RELATIONSHIPS:
            raise ValueError(f"unknown relationship type {relationship!r}")
        item["RelationshipType"] = relationship
    return item


def _children(item: Item, children: Iterable[Item | Dataset]) -> Item:
    kids = list(children)
    if kids:
        item["ContentSequence"] = kids
    return item


def container_content(
    concept: Concept,
    children: Iterable[Item | Dataset] = (),
    *,
    relationship: str | None = "CONTAINS",
    template: str | None = None,
) -> Item:
    """A CONTAINER item (continuity SEPARATE; ``relationship=None`` for a document root) with
    ``children``, and the DCMR template it follows (``"10001"``) when given."""
    item = _content(concept, "CONTAINER", relationship)
    item["ContinuityOfContent"] = "SEPARATE"
    if template is not None:
        item["ContentTemplateSequence"] = [
            {"MappingResource": "DCMR", "TemplateIdentifier": template}
        ]
    return _children(item, children)


def num_content(
    concept: Concept,
    value: float,
    unit: str | Concept,
    *,
    relationship: str = "CONTAINS",
    children: Iterable[Item | Dataset] = (),
    floating_point: bool = True,
) -> Item:
    """A NUM item: the value as a Decimal String (and, with ``floating_point``, as the Floating
    Point Value beside it) with its UCUM unit: a code (``"Gy.m2"``, ``"uA.s"``; its meaning from
    the UCUM table here) or a whole concept ``(code, "UCUM", meaning)``."""
    if isinstance(value, bool) or not isinstance(value, int | float):
        raise TypeError(f"a NUM value must be a number, not {value!r}")
    if not unit:
        raise ValueError("a NUM item needs a unit")
    units = (unit, "UCUM", _UCUM_MEANINGS.get(unit, unit)) if isinstance(unit, str) else unit
    item = _content(concept, "NUM", relationship)
    measured: Item = {"NumericValue": decimal_string(float(value))}
    if floating_point:
        measured["FloatingPointValue"] = float(value)
    measured["MeasurementUnitsCodeSequence"] = [code_entry(units)]
    item["MeasuredValueSequence"] = [measured]
    return _children(item, children)


def code_content(
    concept: Concept,
    value: Concept,
    *,
    relationship: str = "CONTAINS",
    children: Iterable[Item | Dataset] = (),
) -> Item:
    """A CODE item whose value is the coded concept ``value``."""
    item = _content(concept, "CODE", relationship)
    item["ConceptCodeSequence"] = [code_entry(value)]
    return _children(item, children)


def text_content(concept: Concept, value: str, *, relationship: str = "CONTAINS") -> Item:
    """A TEXT item."""
    if not isinstance(value, str) or not value:
        raise ValueError("a TEXT item needs a non-empty string")
    item = _content(concept, "TEXT", relationship)
    item["TextValue"] = value
    return item


def uidref_content(concept: Concept, uid: str, *, relationship: str = "CONTAINS") -> Item:
    """A UIDREF item."""
    if not uid or len(uid) > 64 or not all(c.isdigit() or c == "." for c in uid):
        raise ValueError(f"not a UID: {uid!r}")
    item = _content(concept, "UIDREF", relationship)
    item["UID"] = uid
    return item


def datetime_content(concept: Concept, value: datetime, *, relationship: str = "CONTAINS") -> Item:
    """A DATETIME item (DT, with the UTC offset when ``value`` is aware)."""
    item = _content(concept, "DATETIME", relationship)
    text_value = value.strftime("%Y%m%d%H%M%S")
    if value.utcoffset() is not None:
        text_value += value.strftime("%z")
    item["DateTime"] = text_value
    return item


def as_dataset(item: Item | Dataset) -> Dataset:
    """A pydicom dataset of a plain ``item`` (its sequences too); a dataset as it is."""
    if isinstance(item, Dataset):
        return item
    ds = Dataset()
    for keyword, value in item.items():
        if isinstance(value, list):
            value = Sequence([as_dataset(v) for v in value])
        setattr(ds, keyword, value)
    return ds


def code(concept: Concept) -> Dataset:
    """A code sequence item ``(CodeValue, CodingSchemeDesignator, CodeMeaning)``."""
    return as_dataset(code_entry(concept))


def container(
    concept: Concept, children: Iterable[Dataset] = (), *, relationship: str | None = "CONTAINS"
) -> Dataset:
    """A CONTAINER item (``relationship=None`` for a document root) with ``children``."""
    return as_dataset(container_content(concept, children, relationship=relationship))


def num(
    concept: Concept, value: float, unit: str, *, relationship: str = "CONTAINS",
    children: Iterable[Dataset] = (),
) -> Dataset:  # fmt: skip
    """A NUM item with its UCUM unit (e.g. ``"Gy.m2"``, ``"mGy"``, ``"uA.s"``), and the items
    that qualify it (``children``)."""
    return as_dataset(
        num_content(concept, value, unit, relationship=relationship, children=children)
    )


def code_item(
    concept: Concept, value: Concept, *, relationship: str = "CONTAINS",
    children: Iterable[Dataset] = (),
) -> Dataset:  # fmt: skip
    """A CODE item whose value is the coded concept ``value``."""
    return as_dataset(code_content(concept, value, relationship=relationship, children=children))


def text(concept: Concept, value: str, *, relationship: str = "CONTAINS") -> Dataset:
    """A TEXT item."""
    return as_dataset(text_content(concept, value, relationship=relationship))


def uidref(concept: Concept, uid: str, *, relationship: str = "CONTAINS") -> Dataset:
    """A UIDREF item."""
    return as_dataset(uidref_content(concept, uid, relationship=relationship))


def datetime_item(concept: Concept, value: datetime, *, relationship: str = "CONTAINS") -> Dataset:
    """A DATETIME item (DT, with the UTC offset when ``value`` is aware)."""
    return as_dataset(datetime_content(concept, value, relationship=relationship))


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
