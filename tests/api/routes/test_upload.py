"""Upload of DICOM files: raw and multipart, one result per file, the size limit, the roles."""

from __future__ import annotations

import io
from pathlib import Path

import pytest
from api_support import validation_only
from pydicom.data import get_testdata_file
from pydicom.dataset import Dataset, FileMetaDataset
from pydicom.uid import ExplicitVRLittleEndian, generate_uid

DX = "1.2.840.10008.5.1.4.1.1.1.1"  # Digital X-Ray Image Storage - For Presentation (PS3.4 B.5)


def dx_header(**values: object) -> bytes:
    """A synthetic DX image header without pixel data (invented values)."""
    ds = Dataset()
    ds.SOPClassUID = DX
    ds.SOPInstanceUID = generate_uid()
    ds.StudyInstanceUID = generate_uid()
    ds.SeriesInstanceUID = generate_uid()
    ds.Modality = "DX"
    ds.PatientID = "UPLOAD-1"
    ds.StudyDate = "20261103"
    ds.StudyTime = "093000"
    ds.StationName = "RAD1"
    ds.Manufacturer = "Invented Medical"
    ds.KVP = "81"
    ds.ExposureInuAs = 10000  # 10 mAs
    ds.DistanceSourceToDetector = "1800"
    for keyword, value in values.items():
        setattr(ds, keyword, value)
    meta = FileMetaDataset()
    meta.MediaStorageSOPClassUID = ds.SOPClassUID
    meta.MediaStorageSOPInstanceUID = ds.SOPInstanceUID
    meta.TransferSyntaxUID = ExplicitVRLittleEndian
    ds.file_meta = meta
    out = io.BytesIO()
    ds.save_as(out, enforce_file_format=True)
    return out.getvalue()


def installed(name: str) -> bytes:
    path = get_testdata_file(name, download=False)  # pydicom's bundled test files, never downloaded
    assert path is not None
    return Path(path).read_bytes()


def test_raw_upload_stores_then_reports_the_duplicate(api) -> None:
    data = dx_header()
    headers = {"Content-Type": "application/dicom"}
    first = api.post("/upload", content=data, headers=headers, as_="physicist")
    assert first.status_code == 200, first.text
    body = first.json()
    assert body["stored"] == 1 and body["errors"] == 0
    (result,) = body["files"]
    assert result["name"] == "body" and result["status"] == "stored" and result["events"] == 1
    event = api.get(f"/events/{result['event_ids'][0]}").json()
    assert event["technique"]["kvp_kv"] == 81.0
    assert event["patient"]["patient_pseudo_id"] not in (None, "UPLOAD-1")
    assert event["reconstructed"]["status"] is not None  # reconstruction ran after storing
    again = api.post("/upload", content=data, headers=headers).json()
    assert again["files"][0]["status"] == "duplicate" and again["duplicates"] == 1


def test_multipart_gives_one_result_per_file_and_records_errors(api) -> None:
    files = [
        ("files", ("a.dcm", dx_header(), "application/dicom")),
        ("files", ("notes.txt", b"not a DICOM file at all", "text/plain")),
        ("files", ("MR_small.dcm", installed("MR_small.dcm"), "application/dicom")),
        ("files", ("CT_small.dcm", installed("CT_small.dcm"), "application/dicom")),
    ]
    response = api.post("/upload", files=files, as_="physicist")
    assert response.status_code == 200, response.text
    body = response.json()
    assert [(f["name"], f["status"]) for f in body["files"]] == [
        ("a.dcm", "stored"),
        ("notes.txt", "error"),
        ("MR_small.dcm", "error"),
        ("CT_small.dcm", "stored"),
    ]
    assert body["files"][1]["code"] == "not_dicom"
    assert body["files"][2]["code"] == "unsupported_sop_class"
    assert (body["stored"], body["errors"]) == (2, 2)
    errors = api.get("/ingest-errors", params={"received_via": "upload"}).json()["items"]
    assert sorted(e["source"] for e in errors) == ["upload:MR_small.dcm", "upload:notes.txt"]


def test_same_uid_with_other_content_is_a_conflict(api) -> None:
    uid = generate_uid()
    first = dx_header(SOPInstanceUID=uid)
    other = dx_header(SOPInstanceUID=uid, KVP="90")
    api.post("/upload", content=first, headers={"Content-Type": "application/dicom"})
    body = api.post("/upload", content=other, headers={"Content-Type": "application/dicom"}).json()
    assert body["files"][0]["status"] == "conflict" and body["conflicts"] == 1
    assert "different content" in body["files"][0]["reason"]


def test_body_over_the_limit_is_413_by_its_declared_length(small_upload_api) -> None:
    data = b"\0" * 5000
    response = small_upload_api.post(
        "/upload", content=data, headers={"Content-Type": "application/dicom"}
    )
    assert response.status_code == 413
    assert "4096 bytes" in response.json()["detail"]


def test_body_over_the_limit_is_413_while_streaming(small_upload_api) -> None:
    def chunks():  # no Content-Length: the limit must be counted as the body arrives
        for _ in range(10):
            yield b"\0" * 1000

    response = small_upload_api.post(
        "/upload", content=chunks(), headers={"Content-Type": "application/dicom"}
    )
    assert response.status_code == 413
    part = (
        b'--b\r\nContent-Disposition: form-data; name="files"; filename="x.dcm"\r\n'
        b"Content-Type: application/dicom\r\n\r\n" + b"\0" * 1500 + b"\r\n"
    )
    multipart = (part for _ in range(4))  # streamed, no Content-Length
    response = small_upload_api.post(
        "/upload", content=multipart, headers={"Content-Type": "multipart/form-data; boundary=b"}
    )
    assert response.status_code == 413
    assert small_upload_api.get("/ingest-errors").json()["items"] == []  # nothing was processed


@validation_only
@pytest.mark.parametrize(
    ("kwargs", "code"),
    [
        ({"content": b"x", "headers": {"Content-Type": "text/plain"}}, 415),
        ({"content": b"x"}, 415),
        ({"data": {"note": "a form, not multipart"}}, 415),
        ({"content": b"--x\r\ngarbage", "headers": {"Content-Type": "multipart/form-data"}}, 400),
    ],
)
def test_bad_uploads(api, kwargs, code) -> None:
    response = api.post("/upload", **kwargs)
    assert response.status_code == code, response.text


def test_multipart_without_files_names_the_field(api) -> None:
    response = api.post(
        "/upload",
        content=b'--b\r\nContent-Disposition: form-data; name="note"\r\n\r\nx\r\n--b--\r\n',
        headers={"Content-Type": "multipart/form-data; boundary=b"},
    )
    assert response.status_code == 422
    assert response.json()["detail"][0]["loc"] == ["body", "files"]


def test_viewer_cannot_upload(api) -> None:
    response = api.post(
        "/upload", content=dx_header(), headers={"Content-Type": "application/dicom"}, as_="viewer"
    )
    assert response.status_code == 403
