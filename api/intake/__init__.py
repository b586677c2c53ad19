"""Intake: parsed DICOM objects become stored events (folder scan, C-STORE, DICOMweb pull)."""
