"""beamaudit.ingest: reading DICOM into normalised exposure events.

Image headers (CR, DX, MG, RF, XA, CT; classic and enhanced multi-frame) and
Radiation Dose Structured Reports become :class:`ExposureEvent` records with
units converted once and the provenance (tag or concept code) of every
value; patient identifiers are pseudonymised with a keyed hash before
anything leaves this package; pixel data is never read, except on request
by :mod:`beamaudit.ingest.ct_images` (the few CT images a patient's size
needs, chosen from their headers; imported on demand, it brings NumPy and
the pixel decoders). Unusable input raises :class:`IngestError` with its
source, code and reason.

Sources: files and folders (:func:`read_file`, :func:`scan`), in-memory
objects (:func:`read_bytes`, :func:`read_dataset`); the C-STORE listener and
the DICOMweb pull live in :mod:`beamaudit.ingest.listener` and
:mod:`beamaudit.ingest.dicomweb` (imported on demand, they bring the network
libraries).

Examples
--------
>>> from beamaudit.ingest import Pseudonymiser, read_file   # doctest: +SKIP
>>> result = read_file("CT_small.dcm", pseudonymiser=Pseudonymiser(key))  # doctest: +SKIP
>>> result.events[0].kvp_kv  # doctest: +SKIP
120.0
"""

from typing import TYPE_CHECKING

from beamaudit import lazy_exports

if TYPE_CHECKING:
    from .errors import ERROR_CODES, IngestError
    from .events import AccumulatedDose, ExposureEvent, FilterLayer, ParseResult, SourceObject
    from .folder import ScanOutcome, ScanSummary, classify, iter_candidate_files, scan
    from .linking import HeaderLink, link_header_events_to_reports
    from .mapping import FIELD_LIMITS, MAPPING, FieldLimit, FieldMapping
    from .pseudonym import Pseudonymiser, age_from_age_string, age_from_dates, load_or_create_key
    from .reader import (
        ACCEPTED_SOP_CLASSES,
        DICOMDIR_SOP_CLASS,
        DOSE_REPORT_SOP_CLASSES,
        IMAGE_SOP_CLASSES,
        is_dicom_file,
        read_bytes,
        read_dataset,
        read_file,
    )
    from .units import UnitError, convert

#: where each public name lives: imported on first use, so that importing the package (or one
#: of its light modules) does not import the heavy libraries its other modules need
_LAZY: dict[str, str] = {
    "ERROR_CODES": "beamaudit.ingest.errors",
    "IngestError": "beamaudit.ingest.errors",
    "AccumulatedDose": "beamaudit.ingest.events",
    "ExposureEvent": "beamaudit.ingest.events",
    "FilterLayer": "beamaudit.ingest.events",
    "ParseResult": "beamaudit.ingest.events",
    "SourceObject": "beamaudit.ingest.events",
    "ScanOutcome": "beamaudit.ingest.folder",
    "ScanSummary": "beamaudit.ingest.folder",
    "classify": "beamaudit.ingest.folder",
    "iter_candidate_files": "beamaudit.ingest.folder",
    "scan": "beamaudit.ingest.folder",
    "HeaderLink": "beamaudit.ingest.linking",
    "link_header_events_to_reports": "beamaudit.ingest.linking",
    "FIELD_LIMITS": "beamaudit.ingest.mapping",
    "MAPPING": "beamaudit.ingest.mapping",
    "FieldLimit": "beamaudit.ingest.mapping",
    "FieldMapping": "beamaudit.ingest.mapping",
    "Pseudonymiser": "beamaudit.ingest.pseudonym",
    "age_from_age_string": "beamaudit.ingest.pseudonym",
    "age_from_dates": "beamaudit.ingest.pseudonym",
    "load_or_create_key": "beamaudit.ingest.pseudonym",
    "ACCEPTED_SOP_CLASSES": "beamaudit.ingest.reader",
    "DICOMDIR_SOP_CLASS": "beamaudit.ingest.reader",
    "DOSE_REPORT_SOP_CLASSES": "beamaudit.ingest.reader",
    "IMAGE_SOP_CLASSES": "beamaudit.ingest.reader",
    "is_dicom_file": "beamaudit.ingest.reader",
    "read_bytes": "beamaudit.ingest.reader",
    "read_dataset": "beamaudit.ingest.reader",
    "read_file": "beamaudit.ingest.reader",
    "UnitError": "beamaudit.ingest.units",
    "convert": "beamaudit.ingest.units",
}

__all__ = [
    "ACCEPTED_SOP_CLASSES",
    "DICOMDIR_SOP_CLASS",
    "DOSE_REPORT_SOP_CLASSES",
    "ERROR_CODES",
    "FIELD_LIMITS",
    "IMAGE_SOP_CLASSES",
    "MAPPING",
    "AccumulatedDose",
    "ExposureEvent",
    "FieldLimit",
    "FieldMapping",
    "FilterLayer",
    "HeaderLink",
    "IngestError",
    "ParseResult",
    "Pseudonymiser",
    "ScanOutcome",
    "ScanSummary",
    "SourceObject",
    "UnitError",
    "age_from_age_string",
    "age_from_dates",
    "classify",
    "convert",
    "is_dicom_file",
    "iter_candidate_files",
    "link_header_events_to_reports",
    "load_or_create_key",
    "read_bytes",
    "read_dataset",
    "read_file",
    "scan",
]


__getattr__ = lazy_exports(__name__, _LAZY)
