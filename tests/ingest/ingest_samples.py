"""Shared helpers for the ingest tests: installed sample files and small builders.

Only files shipped in installed packages are used (pydicom's wheel and the
pydicom-data package); nothing is downloaded. Paths inside pydicom's
``dicomdirtests`` are built from the package location, as DICOM-NOTES section
4 describes.
"""

from __future__ import annotations

import io
import os
from pathlib import Path

import pydicom
from pydicom.data import get_testdata_file
from pydicom.dataset import Dataset, FileMetaDataset
from pydicom.uid import ExplicitVRLittleEndian, generate_uid

from beamaudit.ingest import Pseudonymiser

KEY = b"test-key-for-ingest-tests-32byte"
PSEUDONYMISER = Pseudonymiser(KEY)

DICOMDIR_TESTS = Path(os.path.dirname(pydicom.data.__file__)) / "test_files" / "dicomdirtests"


def sample(name: str) -> str:
    """Path of an installed pydicom / pydicom-data test file (never downloads)."""
    path = get_testdata_file(name, download=False)
    assert path is not None, f"{name} is not installed"
    return str(path)


def to_bytes(ds: Dataset) -> bytes:
    buffer = io.BytesIO()
    ds.save_as(buffer, enforce_file_format=True)
    return buffer.getvalue()


def header(
    sop_class: str = "1.2.840.10008.5.1.4.1.1.1.1", modality: str = "DX", **values: object
) -> Dataset:
    """A minimal synthetic image header (no pixel data) with the given attributes."""
    ds = Dataset()
    ds.SOPClassUID = sop_class
    ds.SOPInstanceUID = generate_uid()
    ds.StudyInstanceUID = generate_uid()
    ds.SeriesInstanceUID = generate_uid()
    ds.Modality = modality
    ds.PatientID = "TEST-1"
    ds.StudyDate = "20240101"
    for keyword, value in values.items():
        setattr(ds, keyword, value)
    meta = FileMetaDataset()
    meta.MediaStorageSOPClassUID = ds.SOPClassUID
    meta.MediaStorageSOPInstanceUID = ds.SOPInstanceUID
    meta.TransferSyntaxUID = ExplicitVRLittleEndian
    ds.file_meta = meta
    return ds
