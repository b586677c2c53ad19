"""Reading objects: SOP class gate, bad files, pixel data never read, privacy."""

from __future__ import annotations

import json
from pathlib import Path

import data_store
import pydicom
import pytest
from ingest_samples import DICOMDIR_TESTS, PSEUDONYMISER, header, sample, to_bytes
from pydicom import dcmread
from pydicom.filebase import DicomBytesIO
from pydicom.filewriter import write_dataset
from pydicom.uid import UID

from beamaudit.ingest import (
    ACCEPTED_SOP_CLASSES,
    IngestError,
    is_dicom_file,
    read_bytes,
    read_dataset,
    read_file,
)


def test_accepted_sop_classes_cover_the_issue_list() -> None:
    # PS3.4 Table B.5-1: CR, DX for processing, MG, breast tomosynthesis, enhanced XRF,
    # legacy converted enhanced CT, X-Ray and Enhanced X-Ray Radiation Dose SR, Extensible SR
    for uid in (
        "1.2.840.10008.5.1.4.1.1.1",
        "1.2.840.10008.5.1.4.1.1.1.1.1",
        "1.2.840.10008.5.1.4.1.1.1.2",
        "1.2.840.10008.5.1.4.1.1.13.1.3",
        "1.2.840.10008.5.1.4.1.1.12.2.1",
        "1.2.840.10008.5.1.4.1.1.2.2",
        "1.2.840.10008.5.1.4.1.1.88.67",
        "1.2.840.10008.5.1.4.1.1.88.76",
        "1.2.840.10008.5.1.4.1.1.88.35",
    ):
        assert uid in ACCEPTED_SOP_CLASSES
    assert "1.2.840.10008.5.1.4.1.1.4" not in ACCEPTED_SOP_CLASSES  # MR


@pytest.mark.parametrize("name", ["MR_small.dcm", "reportsi.dcm"])
def test_other_classes_are_unsupported(name: str) -> None:
    with pytest.raises(IngestError, match="carries no x-ray exposure") as info:
        read_file(sample(name), pseudonymiser=PSEUDONYMISER)
    assert info.value.code == "unsupported_sop_class"
    assert info.value.source == sample(name)


def test_not_dicom(tmp_path: Path) -> None:
    path = tmp_path / "notes.txt"
    path.write_text("kVp 80, mAs 10\n" * 20)
    with pytest.raises(IngestError, match="no 'DICM' marker") as info:
        read_file(path, pseudonymiser=PSEUDONYMISER)
    assert info.value.code == "not_dicom"
    assert is_dicom_file(path) is False


def test_missing_file_is_unreadable(tmp_path: Path) -> None:
    with pytest.raises(IngestError) as info:
        read_file(tmp_path / "absent.dcm", pseudonymiser=PSEUDONYMISER)
    assert info.value.code == "unreadable"
    assert is_dicom_file(tmp_path / "absent.dcm") is None


@pytest.mark.parametrize("keep", [0.3, 0.6, 0.9])
def test_truncated_header_is_reported(tmp_path: Path, keep: float) -> None:
    # fixed UIDs: generated ones vary in length, and a cut that happens to land on an element
    # boundary after the required attributes leaves a readable (shorter) header
    ds = header(KVP="80", StationName="ROOM-1", ProtocolName="Chest PA erect, 180 cm",
                SOPInstanceUID="2.25.101", StudyInstanceUID="2.25.102",
                SeriesInstanceUID="2.25.103")  # fmt: skip
    ds.file_meta.MediaStorageSOPInstanceUID = ds.SOPInstanceUID
    data = to_bytes(ds)
    path = tmp_path / "cut"
    path.write_bytes(data[: int(len(data) * keep)])
    with pytest.raises(IngestError) as info:
        read_file(path, pseudonymiser=PSEUDONYMISER)
    assert info.value.code in ("truncated", "missing_attribute")


def test_cut_inside_a_value_is_truncated(tmp_path: Path) -> None:
    data = to_bytes(header(KVP="80", ProtocolName="X" * 60))
    cut = data.index(b"X" * 60) + 20
    with pytest.raises(IngestError, match="ends inside") as info:
        read_bytes(data[:cut], pseudonymiser=PSEUDONYMISER, source="mem")
    assert info.value.code == "truncated"


def test_missing_required_uid() -> None:
    ds = header(KVP="80")
    del ds.StudyInstanceUID
    with pytest.raises(IngestError, match=r"\(0020,000D\) StudyInstanceUID is missing") as info:
        read_bytes(to_bytes(ds), pseudonymiser=PSEUDONYMISER, source="mem")
    assert info.value.code == "missing_attribute"


def test_dicomdir_is_not_an_event() -> None:
    with pytest.raises(IngestError, match="DICOMDIR is a media index") as info:
        read_file(DICOMDIR_TESTS / "DICOMDIR", pseudonymiser=PSEUDONYMISER)
    assert info.value.code == "unsupported_sop_class"


def test_preamble_less_file_is_read() -> None:
    ds = header(KVP="90")
    buffer = DicomBytesIO()
    buffer.is_little_endian, buffer.is_implicit_VR = True, False
    write_dataset(buffer, ds)  # group 0008 first, no preamble and no meta
    result = read_bytes(buffer.getvalue(), pseudonymiser=PSEUDONYMISER, source="raw")
    assert result.events[0].kvp_kv == 90.0


def test_pixel_data_is_never_read() -> None:
    ds = header(KVP="70")
    ds.add_new(0x7FE00010, "OB", b"\x00" * 64)
    data = to_bytes(ds)
    # declare far more pixel bytes than are present: decoding them would fail
    broken = data.replace(
        b"\xe0\x7f\x10\x00OB\x00\x00@\x00\x00\x00", b"\xe0\x7f\x10\x00OB\x00\x00\x00\x00\x10\x00"
    )
    assert broken != data
    assert read_bytes(broken, pseudonymiser=PSEUDONYMISER, source="px").events[0].kvp_kv == 70.0


def test_bytes_file_and_dataset_give_the_same_events(tmp_path: Path) -> None:
    path = sample("CT_small.dcm")
    from_file = read_file(path, pseudonymiser=PSEUDONYMISER)
    from_bytes = read_bytes(Path(path).read_bytes(), pseudonymiser=PSEUDONYMISER, source="b")
    from_ds = read_dataset(dcmread(path), pseudonymiser=PSEUDONYMISER, source="d")
    assert (
        from_file.events[0].as_dict()
        == from_bytes.events[0].as_dict()
        == from_ds.events[0].as_dict()
    )


def test_no_patient_identifier_name_or_birth_date_leaves_ingest() -> None:
    ds = dcmread(sample("RG1_UNCI.dcm"), stop_before_pixels=True)
    text = json.dumps(
        [e.as_dict() for e in read_dataset(ds, pseudonymiser=PSEUDONYMISER, source="s").events]
    )
    for secret in (str(ds.PatientID), str(ds.PatientName), str(ds.PatientBirthDate)):
        if secret.strip():
            assert secret not in text
    event = read_dataset(ds, pseudonymiser=PSEUDONYMISER, source="s").events[0]
    assert event.patient_pseudo_id == PSEUDONYMISER.pseudonymise(str(ds.PatientID))
    assert event.patient_age_years is not None  # computed from the birth date, which is dropped
    assert "birth date discarded" in event.provenance["patient_age_years"]


def test_deflated_transfer_syntax_is_read() -> None:
    ds = header(KVP="66")
    ds.file_meta.TransferSyntaxUID = UID("1.2.840.10008.1.2.1.99")  # Deflated Explicit VR LE
    result = read_bytes(to_bytes(ds), pseudonymiser=PSEUDONYMISER, source="deflated")
    assert result.events[0].kvp_kv == 66.0


def _installed_sample_files() -> list[Path]:
    roots = [
        Path(pydicom.data.__file__).parent / "test_files",
        Path(data_store.__file__).parent / "data",
    ]
    return sorted(p for root in roots for p in root.rglob("*") if p.is_file())


def test_every_installed_sample_file_parses_or_gives_an_ingest_error() -> None:
    # robustness over all files of pydicom's wheel and pydicom-data: never a crash
    counts: dict[str, int] = {}
    for path in _installed_sample_files():
        try:
            read_file(path, pseudonymiser=PSEUDONYMISER)
            counts["parsed"] = counts.get("parsed", 0) + 1
        except IngestError as exc:
            counts[exc.code] = counts.get(exc.code, 0) + 1
    assert counts["parsed"] >= 50
    assert counts["unsupported_sop_class"] >= 50  # MR, US, RT, SC...
    assert counts.get("truncated", 0) >= 1  # rtplan_truncated.dcm


def test_every_cut_inside_the_file_meta_group_is_truncated(tmp_path: Path) -> None:
    # DICOM PS3.10 7.1: the preamble, "DICM", then group 0002 (explicit VR little endian); a
    # file cut anywhere in it is a cut file, whatever the element its end falls in
    ds = header(KVP="80", SOPInstanceUID="2.25.101")
    ds.file_meta.MediaStorageSOPInstanceUID = ds.SOPInstanceUID
    data = to_bytes(ds)
    meta_end = data.index(b"\x08\x00", 132)  # the first element of group 0008
    path = tmp_path / "cut"
    for cut in range(133, meta_end):
        path.write_bytes(data[:cut])
        with pytest.raises(IngestError) as info:
            read_file(path, pseudonymiser=PSEUDONYMISER)
        assert info.value.code == "truncated", (cut, info.value)
