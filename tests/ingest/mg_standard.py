"""A Digital Mammography X-Ray Image (For Presentation) built to the standard: the IOD of PS3.3
A.27, its mandatory modules with every Type 1 and Type 2 attribute, and the dose-relevant modules
the IOD allows (X-Ray Acquisition Dose, X-Ray Generation, X-Ray Filtration, X-Ray Grid: all their
attributes are Type 3) filled with the values a W/Rh unit writes.

**Standard-built, not a real file**: no MG object ships in pydicom, pydicom-data or highdicom's
wheel (checked: ``pydicom.data.get_testdata_files()``, pydicom-data 1.0.0 installed, lists 261
files of modalities CT, OT, MR, US, CR, RTDOSE, NM, RTPLAN, SEG, SR, RTSTRUCT and ECG, none of
MG; DICOM-NOTES section 4), so the object is written here, every value invented (an invented
hospital, patient and device). Its conformance is checked by
``tests/ingest/test_mg_standard_file.py`` against highdicom 0.28.2's tables of the standard and by
dciodvfy (dicom3tools).
"""

from __future__ import annotations

import numpy as np
from pydicom.dataset import Dataset, FileMetaDataset
from pydicom.sequence import Sequence
from pydicom.uid import ExplicitVRLittleEndian

__all__ = ["MG_FOR_PRESENTATION", "VALUES", "standard_mammogram"]

MG_FOR_PRESENTATION = "1.2.840.10008.5.1.4.1.1.1.2"
_ROOT = "1.2.826.0.1.3680043.10.1407"  # a UID root for these test objects

#: the dose-relevant values the object carries, as written (attribute keyword -> value)
VALUES: dict[str, object] = {
    "KVP": "29",
    "ExposureInuAs": 87500,
    "Exposure": 88,
    "ExposureTime": 1040,
    "XRayTubeCurrent": 84,
    "AnodeTargetMaterial": "TUNGSTEN",
    "FilterMaterial": "RHODIUM",
    "FilterThicknessMinimum": "0.05",
    "FilterThicknessMaximum": "0.05",
    "BodyPartThickness": "54",
    "CompressionForce": "112",
    "OrganDose": "0.0148",  # dGy (PS3.3 C.8.7.8): 1.48 mGy
    "EntranceDoseInmGy": "5.9",
    "HalfValueLayer": "0.53",
    "DistanceSourceToDetector": "650",
    "Grid": ["RECIPROCATING", "FOCUSED"],
    "PatientAge": "057Y",
    "ImageLaterality": "R",
    "BreastImplantPresent": "NO",
}


def _code(value: str, scheme: str, meaning: str) -> Dataset:
    item = Dataset()
    item.CodeValue, item.CodingSchemeDesignator, item.CodeMeaning = value, scheme, meaning
    return item


def standard_mammogram(*, instance: int = 1) -> Dataset:
    """The object (file meta included; 16 x 16 pixels of 12 bits)."""
    ds = Dataset()
    ds.SpecificCharacterSet = "ISO_IR 100"
    # SOP Common
    ds.SOPClassUID = MG_FOR_PRESENTATION
    ds.SOPInstanceUID = f"{_ROOT}.3.{instance}"
    # Patient (invented)
    ds.PatientName = "Invented^Patient"
    ds.PatientID = "MG-STD-0001"
    ds.PatientBirthDate = "19670301"
    ds.PatientSex = "F"
    # General Study
    ds.StudyDate, ds.StudyTime = "20240312", "101500"
    ds.AccessionNumber = "ACC-MG-1"
    ds.ReferringPhysicianName = ""
    ds.StudyInstanceUID = f"{_ROOT}.1"
    ds.StudyID = "1"
    ds.StudyDescription = "Screening mammography (invented)"
    # General Series, DX Series, Mammography Series
    ds.Modality = "MG"
    ds.SeriesInstanceUID = f"{_ROOT}.2"
    ds.SeriesNumber = 1
    ds.PresentationIntentType = "FOR PRESENTATION"
    # General Equipment (invented device)
    ds.Manufacturer = "Invented Imaging"
    ds.ManufacturerModelName = "MG-1"
    ds.StationName = "MAMMO1"
    ds.DeviceSerialNumber = "MG0001"
    ds.InstitutionName = "Fernmoor Infirmary (invented)"
    # General Acquisition, General Image
    ds.AcquisitionDate, ds.AcquisitionTime = "20240312", "101712"
    ds.ContentDate, ds.ContentTime = "20240312", "101712"
    ds.InstanceNumber = instance
    ds.PatientOrientation = ["P", "L"]  # right breast CC: posterior, left (PS3.3 C.8.11.7.1.4)
    # Image Pixel and DX Image
    ds.ImageType = ["ORIGINAL", "PRIMARY", ""]
    ds.SamplesPerPixel = 1
    ds.PhotometricInterpretation = "MONOCHROME2"
    ds.Rows = ds.Columns = 16
    ds.BitsAllocated, ds.BitsStored, ds.HighBit = 16, 12, 11
    ds.PixelRepresentation = 0
    ds.BurnedInAnnotation = "NO"
    ds.PixelIntensityRelationship = "LOG"
    ds.PixelIntensityRelationshipSign = -1
    ds.RescaleIntercept, ds.RescaleSlope, ds.RescaleType = "0", "1", "US"
    ds.WindowCenter, ds.WindowWidth = "2048", "4096"
    ds.LossyImageCompression = "00"
    ds.PresentationLUTShape = "IDENTITY"
    ds.PixelData = (np.arange(256, dtype=np.uint16) * 16).tobytes()
    # DX Anatomy Imaged, Mammography Image, DX Positioning
    ds.AnatomicRegionSequence = Sequence([_code("76752008", "SCT", "Breast")])  # CID 4013
    ds.PositionerType = "MAMMOGRAPHIC"
    ds.OrganExposed = "BREAST"
    view = _code("399162004", "SCT", "cranio-caudal")  # CID 4014
    view.ViewModifierCodeSequence = Sequence([])  # Type 2: no modifier
    ds.ViewCodeSequence = Sequence([view])  # (no View Position: its defined terms are DX's)
    # DX Detector
    ds.ImagerPixelSpacing = ["0.085", "0.085"]
    ds.DetectorType = "DIRECT"
    # Acquisition Context (Type 2: empty)
    ds.AcquisitionContextSequence = Sequence([])
    # X-Ray Acquisition Dose, X-Ray Generation, X-Ray Filtration, X-Ray Grid (all Type 3)
    # and Patient Age (Patient Study), Image Laterality (DX Anatomy Imaged, Type 1) and Breast
    # Implant Present (Mammography Image)
    for keyword, value in VALUES.items():
        setattr(ds, keyword, value)
    ds.ExposureControlMode = "AUTOMATIC"
    ds.file_meta = FileMetaDataset()  # the rest is written from the dataset on saving
    ds.file_meta.TransferSyntaxUID = ExplicitVRLittleEndian
    return ds
