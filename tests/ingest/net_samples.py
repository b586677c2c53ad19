"""Synthetic dose reports for the network tests (listener and DICOMweb pull).

No package ships a Radiation Dose SR (DICOM-NOTES section 4), so these are built here with
pydicom: clearly synthetic (manufacturer and patient say so), with just enough of TID 10001 /
TID 10002 to be a recognisable dose report. They test transport, not parsing: the parser tests
have their own, fuller fixtures.
"""

from __future__ import annotations

from io import BytesIO
from pathlib import Path

from pydicom import dcmwrite
from pydicom.dataset import Dataset, FileMetaDataset
from pydicom.sequence import Sequence
from pydicom.uid import ExplicitVRLittleEndian, generate_uid

__all__ = [
    "ENHANCED_XRAY_DOSE_SR",
    "PATIENT_DOSE_SR",
    "XRAY_DOSE_SR",
    "build_dose_sr",
    "dose_sr_bytes",
    "write_dose_sr",
]

# SOP Class UIDs, PS3.4 Table B.5-1 (pydicom's UID dictionary agrees).
XRAY_DOSE_SR = "1.2.840.10008.5.1.4.1.1.88.67"
ENHANCED_XRAY_DOSE_SR = "1.2.840.10008.5.1.4.1.1.88.76"
PATIENT_DOSE_SR = "1.2.840.10008.5.1.4.1.1.88.73"


def _code(value: str, scheme: str, meaning: str) -> Dataset:
    item = Dataset()
    item.CodeValue = value
    item.CodingSchemeDesignator = scheme
    item.CodeMeaning = meaning
    return item


def build_dose_sr(
    sop_class_uid: str = XRAY_DOSE_SR,
    *,
    study_date: str = "20240115",
    study_instance_uid: str | None = None,
    patient_id: str = "SYNTH-PATIENT-1",
    patient_name: str = "Synthetic^DoseReport",
    dap_total_gy_m2: float = 0.00123,
) -> Dataset:
    """A minimal synthetic dose report with file meta (Explicit VR Little Endian)."""
    ds = Dataset()
    ds.SpecificCharacterSet = "ISO_IR 100"
    ds.SOPClassUID = sop_class_uid
    ds.SOPInstanceUID = generate_uid()
    ds.StudyInstanceUID = study_instance_uid or generate_uid()
    ds.SeriesInstanceUID = generate_uid()
    ds.Modality = "SR"
    ds.StudyDate = study_date
    ds.StudyTime = "101500"
    ds.ContentDate = study_date
    ds.ContentTime = "101500"
    ds.AccessionNumber = "SYNTH0001"
    ds.StudyID = "1"
    ds.SeriesNumber = 900
    ds.InstanceNumber = 1
    ds.ReferringPhysicianName = ""
    ds.PatientName = patient_name
    ds.PatientID = patient_id
    ds.PatientBirthDate = ""
    ds.PatientSex = "O"
    ds.Manufacturer = "beamaudit test fixture (synthetic)"
    ds.ManufacturerModelName = "none"
    ds.DeviceSerialNumber = "0"
    ds.SoftwareVersions = "0"
    ds.CompletionFlag = "COMPLETE"
    ds.VerificationFlag = "UNVERIFIED"
    ds.ValueType = "CONTAINER"
    ds.ContinuityOfContent = "SEPARATE"
    # TID 10001 root concept, DCMR (DICOM-NOTES 2.1): (113701, DCM, "X-Ray Radiation Dose Report")
    ds.ConceptNameCodeSequence = Sequence([_code("113701", "DCM", "X-Ray Radiation Dose Report")])
    procedure = Dataset()
    procedure.RelationshipType = "HAS CONCEPT MOD"
    procedure.ValueType = "CODE"
    procedure.ConceptNameCodeSequence = Sequence([_code("121058", "DCM", "Procedure reported")])
    procedure.ConceptCodeSequence = Sequence([_code("113704", "DCM", "Projection X-Ray")])
    dap = Dataset()
    dap.RelationshipType = "CONTAINS"
    dap.ValueType = "NUM"
    dap.ConceptNameCodeSequence = Sequence([_code("113722", "DCM", "Dose Area Product Total")])
    measured = Dataset()
    measured.NumericValue = f"{dap_total_gy_m2:.6g}"
    # UCUM unit for Gy·m², as RDSRs record DAP (from memory: "Gy.m2")
    measured.MeasurementUnitsCodeSequence = Sequence([_code("Gy.m2", "UCUM", "Gy.m2")])
    dap.MeasuredValueSequence = Sequence([measured])
    accumulated = Dataset()
    accumulated.RelationshipType = "CONTAINS"
    accumulated.ValueType = "CONTAINER"
    accumulated.ContinuityOfContent = "SEPARATE"
    accumulated.ConceptNameCodeSequence = Sequence(
        [_code("113702", "DCM", "Accumulated X-Ray Dose Data")]
    )
    accumulated.ContentSequence = Sequence([dap])
    ds.ContentSequence = Sequence([procedure, accumulated])

    meta = FileMetaDataset()
    meta.MediaStorageSOPClassUID = ds.SOPClassUID
    meta.MediaStorageSOPInstanceUID = ds.SOPInstanceUID
    meta.TransferSyntaxUID = ExplicitVRLittleEndian
    ds.file_meta = meta
    return ds


def dose_sr_bytes(sop_class_uid: str = XRAY_DOSE_SR, **kwargs: object) -> tuple[bytes, Dataset]:
    """A synthetic dose report as Part 10 bytes, with the dataset it encodes."""
    ds = build_dose_sr(sop_class_uid, **kwargs)  # type: ignore[arg-type]
    buffer = BytesIO()
    dcmwrite(buffer, ds, enforce_file_format=True)
    return buffer.getvalue(), ds


def write_dose_sr(path: Path, sop_class_uid: str = XRAY_DOSE_SR, **kwargs: object) -> Dataset:
    """Write a synthetic dose report to ``path``; returns its dataset."""
    data, ds = dose_sr_bytes(sop_class_uid, **kwargs)
    path.write_bytes(data)
    return ds
