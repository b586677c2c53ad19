"""The DICOMweb pull against Orthanc (Debian packages orthanc 1.10.1, orthanc-dicomweb 1.7).

Orthanc runs with its own configuration in a temporary folder, HTTP on a free loopback port, no
DICOM port, no remote access (``peers.start_orthanc``), and is stopped at the end. Studies are
loaded through its REST API (``POST /instances``): pydicom's ``CT_small.dcm`` and ``MR_small.dcm``,
pydicom-data's ``RG1_UNCI.dcm`` and ``RG1_J2KR.dcm`` (NEMA WG04), and synthetic dose reports.
Values checked are those of the NEMA files (DICOM-NOTES section 4).

A small scripted HTTP server on loopback plays the server behaviours Orthanc cannot be made to
show (a ``Warning`` header asking for further pages, PS3.18 6.7.1.2; a server ignoring a
matching key); it is marked as such where used.
"""

from __future__ import annotations

import json
import threading
from collections.abc import Callable, Iterator
from dataclasses import dataclass
from datetime import date
from http.server import BaseHTTPRequestHandler, ThreadingHTTPServer
from pathlib import Path
from typing import Any
from urllib.parse import parse_qs, urlsplit

import pytest
import requests
from net_samples import XRAY_DOSE_SR, dose_sr_bytes
from peers import OrthancPeer, free_port, orthanc_missing, require_peer, start_orthanc
from pydicom import dcmread
from pydicom.data import get_testdata_file
from pydicom.dataset import Dataset
from requests.adapters import BaseAdapter

from beamaudit.ingest.dicomweb import (
    DicomwebSource,
    PullError,
    PullReport,
    next_watermark,
    parse_study_date,
    pull,
    resolve_since,
)
from beamaudit.ingest.errors import IngestError

CT_IMAGE = "1.2.840.10008.5.1.4.1.1.2"  # PS3.4 Table B.5-1
CR_IMAGE = "1.2.840.10008.5.1.4.1.1.1"
MR_IMAGE = "1.2.840.10008.5.1.4.1.1.4"
FAR_FUTURE = date(2100, 1, 1)  # "today" for watermark checks that must not be capped


def _testdata(name: str) -> bytes:
    path = get_testdata_file(name)
    assert isinstance(path, str), f"{name} not found in pydicom / pydicom-data"
    return Path(path).read_bytes()


@dataclass
class Loaded:
    """What the Orthanc fixture holds."""

    orthanc: OrthancPeer
    ct_study: str
    cr_study: str
    dose_only_study: str
    uids: dict[str, str]  # label -> SOP Instance UID


def _load(orthanc: OrthancPeer) -> Loaded:
    uids: dict[str, str] = {}
    for label, name in (
        ("ct", "CT_small.dcm"),
        ("mr", "MR_small.dcm"),
        ("cr", "RG1_UNCI.dcm"),
        ("cr_j2k", "RG1_J2KR.dcm"),
    ):
        data = _testdata(name)
        orthanc.upload(data)
        uids[label] = str(dcmread(Path(get_testdata_file(name) or "")).SOPInstanceUID)
    ct = dcmread(Path(get_testdata_file("CT_small.dcm") or ""))
    cr = dcmread(Path(get_testdata_file("RG1_UNCI.dcm") or ""))
    # a dose report inside the CT study (same patient, as a scanner sends it)...
    data, sr_in_ct = dose_sr_bytes(
        study_date=ct.StudyDate,
        study_instance_uid=ct.StudyInstanceUID,
        patient_id=ct.PatientID,
        patient_name=str(ct.PatientName),
    )
    orthanc.upload(data)
    uids["sr_ct"] = sr_in_ct.SOPInstanceUID
    # ...and one in a study of its own (as some vendors file them)
    data, sr_alone = dose_sr_bytes(study_date="20240115")
    orthanc.upload(data)
    uids["sr_alone"] = sr_alone.SOPInstanceUID
    return Loaded(
        orthanc, ct.StudyInstanceUID, cr.StudyInstanceUID, sr_alone.StudyInstanceUID, uids
    )


def _require_orthanc() -> None:
    missing = orthanc_missing()
    require_peer("Orthanc with DICOMweb", missing is None, missing or "")


@pytest.fixture(scope="module")
def loaded(tmp_path_factory: pytest.TempPathFactory) -> Iterator[Loaded]:
    _require_orthanc()
    orthanc = start_orthanc(tmp_path_factory.mktemp("orthanc"))
    try:
        yield _load(orthanc)
    finally:
        orthanc.stop()


@pytest.fixture
def fresh_orthanc(tmp_path: Path) -> Iterator[Loaded]:
    """An Orthanc of one's own, for tests that add studies."""
    _require_orthanc()
    orthanc = start_orthanc(tmp_path / "orthanc")
    try:
        yield _load(orthanc)
    finally:
        orthanc.stop()


class Collector:
    """An on_instance callback that keeps what it is given."""

    def __init__(self) -> None:
        self.datasets: dict[str, Dataset] = {}
        self.sources: dict[str, str] = {}

    def __call__(self, ds: Dataset, source: str) -> None:
        uid = str(ds.SOPInstanceUID)
        self.datasets[uid] = ds
        self.sources[uid] = source


def _source(loaded: Loaded, **kwargs: Any) -> DicomwebSource:
    return DicomwebSource(loaded.orthanc.dicomweb_url, retry_attempts=1, **kwargs)


# --------------------------------------------------------------------------- Orthanc


@pytest.mark.peer
def test_pull_all_studies_since_a_date(loaded: Loaded) -> None:
    got = Collector()
    report = pull(_source(loaded), since=date(2004, 1, 1), on_instance=got)
    assert report.errors == []
    assert report.studies == 4  # CT (+ its dose report), CR, MR, the lone dose report
    assert set(got.datasets) == set(loaded.uids.values())
    assert report.instances == 6
    assert report.newest_study_date == date(2024, 1, 15)
    for uid, ds in got.datasets.items():
        assert "PixelData" not in ds  # metadata only, never pixel data
        assert got.sources[uid].startswith(f"{loaded.orthanc.dicomweb_url}/studies/")
        assert got.sources[uid].endswith(f"/instances/{uid}")
    ct = got.datasets[loaded.uids["ct"]]
    assert ct.SOPClassUID == CT_IMAGE
    assert float(ct.KVP) == 120.0  # NEMA WG04 CT_small: KVP "120"
    assert float(ct.DistanceSourceToDetector) == pytest.approx(1099.3100585938)
    cr = got.datasets[loaded.uids["cr"]]
    # NEMA WG04 RG1: ImageAndFluoroscopyAreaDoseProduct "1.200" dGy·cm²; Orthanc sends 1.2
    assert float(cr.ImageAndFluoroscopyAreaDoseProduct) == pytest.approx(1.2)
    assert float(cr.KVP) == 150.0
    sr = got.datasets[loaded.uids["sr_alone"]]
    assert sr.SOPClassUID == XRAY_DOSE_SR
    dap = sr.ContentSequence[1].ContentSequence[0].MeasuredValueSequence[0]
    assert float(dap.NumericValue) == pytest.approx(0.00123)


@pytest.mark.peer
def test_modality_search_takes_the_dose_report_series_of_found_studies(loaded: Loaded) -> None:
    got = Collector()
    report = pull(_source(loaded), since=date(2004, 1, 1), modalities=["ct"], on_instance=got)
    assert report.errors == []
    assert report.studies == 1
    assert set(got.datasets) == {loaded.uids["ct"], loaded.uids["sr_ct"]}


@pytest.mark.peer
def test_several_modalities_one_search_each(loaded: Loaded) -> None:
    got = Collector()
    report = pull(_source(loaded), since=date(2004, 1, 1), modalities=["CR", "SR"], on_instance=got)
    assert report.studies == 3  # CR study; the CT study holds an SR series; the lone report
    assert loaded.uids["mr"] not in got.datasets
    assert loaded.uids["ct"] not in got.datasets  # CT series are not asked for
    assert {loaded.uids["cr"], loaded.uids["cr_j2k"], loaded.uids["sr_ct"]} <= set(got.datasets)


@pytest.mark.peer
def test_date_range_is_inclusive(loaded: Loaded) -> None:
    got = Collector()
    day = date(2004, 8, 26)  # RG1 and MR_small share this study date
    report = pull(_source(loaded), since=day, until=day, on_instance=got)
    assert report.studies == 2
    assert set(got.datasets) == {loaded.uids["cr"], loaded.uids["cr_j2k"], loaded.uids["mr"]}
    assert report.newest_study_date == day


@pytest.mark.peer
def test_sop_class_filter_skips_before_fetching(loaded: Loaded) -> None:
    got = Collector()
    report = pull(
        _source(loaded), since=date(2004, 1, 1), on_instance=got, sop_classes={XRAY_DOSE_SR}
    )
    assert set(got.datasets) == {loaded.uids["sr_ct"], loaded.uids["sr_alone"]}
    assert report.skipped_sop_class == 4


@pytest.mark.peer
def test_known_instances_are_not_fetched(loaded: Loaded) -> None:
    got = Collector()
    known = {loaded.uids["cr"]}  # one of the two CR instances: the other is fetched on its own
    report = pull(
        _source(loaded),
        since=date(2004, 8, 26),
        until=date(2004, 8, 26),
        modalities=["CR"],
        on_instance=got,
        known_sop_instance_uids=known,
    )
    assert set(got.datasets) == {loaded.uids["cr_j2k"]}
    assert report.skipped_known == 1


@pytest.mark.peer
def test_second_pull_from_the_watermark_brings_nothing_new_then_a_late_arrival(
    fresh_orthanc: Loaded,
) -> None:
    stored: set[str] = set()

    def store(ds: Dataset, source: str) -> None:
        stored.add(str(ds.SOPInstanceUID))

    source = _source(fresh_orthanc)
    first = pull(source, since=date(2004, 1, 1), on_instance=store)
    watermark = next_watermark(None, first, today=FAR_FUTURE)
    assert watermark == date(2024, 1, 15)
    assert len(stored) == 6

    since = resolve_since("last", watermark)
    assert since == watermark  # the watermark date itself is asked again
    second = pull(
        source, since=since, on_instance=store, known_sop_instance_uids=stored.__contains__
    )
    assert second.instances == 0
    assert second.skipped_known == 1  # the lone dose report of 2024-01-15, seen before
    assert next_watermark(watermark, second, today=FAR_FUTURE) == watermark

    # a dose report of the watermark date reaches the PACS after the pull
    late, late_ds = dose_sr_bytes(study_date="20240115")
    fresh_orthanc.orthanc.upload(late)
    third = pull(
        source,
        since=resolve_since("last", watermark),
        on_instance=store,
        known_sop_instance_uids=stored.__contains__,
    )
    assert third.instances == 1
    assert late_ds.SOPInstanceUID in stored


@pytest.mark.peer
def test_on_instance_refusal_is_recorded_and_the_pull_goes_on(loaded: Loaded) -> None:
    got = Collector()
    ct_uid = loaded.uids["ct"]

    def picky(ds: Dataset, source: str) -> None:
        if ds.SOPInstanceUID == ct_uid:
            raise IngestError("out_of_range", "(0018,0060) KVP 120 kV refused for the test")
        got(ds, source)

    report = pull(_source(loaded), since=date(2004, 1, 1), on_instance=picky)
    assert len(report.errors) == 1
    assert report.errors[0].source.endswith(f"/instances/{ct_uid}")
    assert report.errors[0].reason.endswith("[out_of_range]")
    assert report.instances == 5
    # an unusable instance does not hold the watermark back: it will not get better
    assert report.oldest_incomplete_study_date is None


@pytest.mark.peer
def test_store_failure_in_on_instance_ends_the_pull(loaded: Loaded) -> None:
    def broken(ds: Dataset, source: str) -> None:
        raise OSError("store unavailable")

    with pytest.raises(OSError, match="store unavailable"):
        pull(_source(loaded), since=date(2004, 1, 1), on_instance=broken)


class _Fails(BaseAdapter):
    """A transport that answers 500 for everything under the prefix it is mounted on."""

    def send(
        self, request: requests.PreparedRequest, *args: Any, **kwargs: Any
    ) -> requests.Response:
        response = requests.Response()
        response.status_code = 500
        response.url = request.url or ""
        response.request = request
        response._content = b"{}"
        return response

    def close(self) -> None:
        pass


@pytest.mark.peer
def test_server_failure_in_one_study_holds_the_watermark_there(loaded: Loaded) -> None:
    session = requests.Session()
    broken_prefix = f"{loaded.orthanc.dicomweb_url}/studies/{loaded.cr_study}/"
    session.mount(broken_prefix, _Fails())
    got = Collector()
    report = pull(_source(loaded, session=session), since=date(2004, 1, 1), on_instance=got)
    assert [p.source for p in report.errors] == [broken_prefix.rstrip("/")]
    assert "series search failed (HTTPError)" in report.errors[0].reason
    assert report.oldest_incomplete_study_date == date(2004, 8, 26)
    assert report.newest_study_date == date(2024, 1, 15)
    # the next --since last starts at the failed study's date, not after the newest
    assert next_watermark(None, report, today=FAR_FUTURE) == date(2004, 8, 26)
    assert loaded.uids["mr"] in got.datasets  # the other study of that day came through


def test_unreachable_server_is_a_pull_error() -> None:
    source = DicomwebSource(f"http://127.0.0.1:{free_port()}/dicom-web", retry_attempts=1)
    with pytest.raises(PullError, match="study search failed"):
        pull(source, since=date(2024, 1, 1), on_instance=lambda ds, src: None)


# --------------------------------------------------------------------------- scripted server

Route = Callable[[str, dict[str, list[str]]], tuple[int, dict[str, str], Any]]


@dataclass
class Scripted:
    """A scripted DICOMweb stand-in on loopback (not a real PACS): ``route(path, query)``."""

    url: str
    requests: list[tuple[str, dict[str, list[str]]]]


@pytest.fixture
def scripted() -> Iterator[Callable[[Route], Scripted]]:
    servers: list[ThreadingHTTPServer] = []

    def start(route: Route) -> Scripted:
        seen: list[tuple[str, dict[str, list[str]]]] = []

        class Handler(BaseHTTPRequestHandler):
            def do_GET(self) -> None:
                parts = urlsplit(self.path)
                query = parse_qs(parts.query)
                seen.append((parts.path, query))
                status, headers, body = route(parts.path, query)
                payload = b"" if body is None else json.dumps(body).encode()
                self.send_response(status)
                self.send_header("Content-Type", "application/dicom+json")
                self.send_header("Content-Length", str(len(payload)))
                for key, value in headers.items():
                    self.send_header(key, value)
                self.end_headers()
                self.wfile.write(payload)

            def log_message(self, format: str, *args: Any) -> None:
                pass

        server = ThreadingHTTPServer(("127.0.0.1", 0), Handler)
        servers.append(server)
        threading.Thread(target=server.serve_forever, daemon=True).start()
        return Scripted(f"http://127.0.0.1:{server.server_address[1]}/dicom-web", seen)

    yield start
    for server in servers:
        server.shutdown()
        server.server_close()


def _study(uid: str, study_date: str, modalities: list[str]) -> dict[str, Any]:
    return {
        "0020000D": {"vr": "UI", "Value": [uid]},
        "00080020": {"vr": "DA", "Value": [study_date]},
        "00080061": {"vr": "CS", "Value": modalities},
    }


MORE = {
    "Warning": "299 test: The number of results exceeded the maximum supported by the "
    "server. Additional results can be requested."
}  # PS3.18 6.7.1.2 wording, from memory


def test_further_pages_only_when_the_server_says_more(
    scripted: Callable[[Route], Scripted],
) -> None:
    pages = {
        None: [_study("1.1", "20240102", ["DX"]), _study("1.2", "20240102", ["DX"])],
        "2": [_study("1.3", "20240103", ["DX"])],
    }

    def route(path: str, query: dict[str, list[str]]) -> tuple[int, dict[str, str], Any]:
        if path.endswith("/studies"):
            offset = query.get("offset", [None])[0]
            return 200, (MORE if offset is None else {}), pages[offset]
        return 204, {}, None  # no series in any study

    server = scripted(route)
    report = pull(
        DicomwebSource(server.url, retry_attempts=1),
        since=date(2024, 1, 1),
        modalities=["DX"],
        on_instance=lambda ds, src: None,
    )
    assert report.errors == []
    assert report.studies == 3
    study_queries = [q for p, q in server.requests if p.endswith("/studies")]
    assert [q.get("offset") for q in study_queries] == [None, ["2"]]
    assert study_queries[0]["StudyDate"] == ["20240101-"]
    assert study_queries[0]["ModalitiesInStudy"] == ["DX"]
    assert report.newest_study_date == date(2024, 1, 3)


def test_server_that_says_more_but_repeats_itself_is_an_incomplete_pull(
    scripted: Callable[[Route], Scripted],
) -> None:
    def route(path: str, query: dict[str, list[str]]) -> tuple[int, dict[str, str], Any]:
        if path.endswith("/studies"):
            return 200, MORE, [_study("1.1", "20240105", ["CT"])]
        return 204, {}, None

    server = scripted(route)
    report = pull(
        DicomwebSource(server.url, retry_attempts=1),
        since=date(2024, 1, 1),
        on_instance=lambda ds, src: None,
    )
    assert "held back studies" in report.errors[0].reason
    assert report.oldest_incomplete_study_date == date(2024, 1, 1)
    assert next_watermark(date(2024, 1, 1), report, today=FAR_FUTURE) == date(2024, 1, 1)
    assert len(server.requests) < 10  # stopped as soon as a page brought nothing new


def test_results_outside_the_asked_range_are_ignored(
    scripted: Callable[[Route], Scripted],
) -> None:
    def route(path: str, query: dict[str, list[str]]) -> tuple[int, dict[str, str], Any]:
        if path.endswith("/studies"):  # a server ignoring both matching keys
            return 200, {}, [_study("1.1", "19990101", ["CT"]), _study("1.2", "20240105", ["MR"])]
        return 204, {}, None

    server = scripted(route)
    report = pull(
        DicomwebSource(server.url, retry_attempts=1),
        since=date(2024, 1, 1),
        modalities=["CT"],
        on_instance=lambda ds, src: None,
    )
    assert report.studies == 0
    assert "2 studies outside the asked dates or modalities" in report.warnings[0].reason


# --------------------------------------------------------------------------- watermark logic


def _report(newest: date | None, failed: date | None = None) -> PullReport:
    report = PullReport(source="http://127.0.0.1:1/dicom-web", since=date(2024, 1, 1), until=None)
    report.newest_study_date = newest
    report.oldest_incomplete_study_date = failed
    return report


@pytest.mark.parametrize(
    ("previous", "newest", "failed", "today", "expected"),
    [
        (None, date(2024, 3, 5), None, FAR_FUTURE, date(2024, 3, 5)),
        (date(2024, 3, 1), date(2024, 3, 5), None, FAR_FUTURE, date(2024, 3, 5)),
        (date(2024, 3, 1), None, None, FAR_FUTURE, date(2024, 3, 1)),  # nothing found
        (None, None, None, FAR_FUTURE, None),
        (date(2024, 3, 1), date(2024, 3, 5), date(2024, 3, 3), FAR_FUTURE, date(2024, 3, 3)),
        (date(2024, 3, 4), date(2024, 3, 5), date(2024, 3, 3), FAR_FUTURE, date(2024, 3, 4)),
        (date(2024, 3, 1), date(2030, 1, 1), None, date(2024, 3, 6), date(2024, 3, 6)),  # clock
        (date(2024, 3, 1), date(2023, 1, 1), None, FAR_FUTURE, date(2024, 3, 1)),  # backfill
        (None, None, date(2024, 3, 3), FAR_FUTURE, date(2024, 3, 3)),
    ],
)
def test_next_watermark(
    previous: date | None,
    newest: date | None,
    failed: date | None,
    today: date,
    expected: date | None,
) -> None:
    assert next_watermark(previous, _report(newest, failed), today=today) == expected


def test_resolve_since() -> None:
    assert resolve_since("2024-02-29", None) == date(2024, 2, 29)
    assert resolve_since("20240229", date(2025, 1, 1)) == date(2024, 2, 29)
    assert resolve_since("last", date(2024, 3, 5)) == date(2024, 3, 5)
    assert resolve_since(" LAST ", date(2024, 3, 5)) == date(2024, 3, 5)
    with pytest.raises(PullError, match="nothing was pulled from this source yet"):
        resolve_since("last", None)
    with pytest.raises(PullError, match="is not a date"):
        resolve_since("yesterday", None)
    with pytest.raises(PullError, match="is not a date"):
        parse_study_date("20240230")


def test_bad_source_settings() -> None:
    with pytest.raises(PullError, match="http:// or https://"):
        DicomwebSource("ftp://127.0.0.1/dicom-web")
    with pytest.raises(PullError, match="timeout_s"):
        DicomwebSource("http://127.0.0.1:1/dicom-web", timeout_s=0)
    source = DicomwebSource("http://127.0.0.1:1/dicom-web/")
    assert source.url == "http://127.0.0.1:1/dicom-web"
    with pytest.raises(PullError, match="before since"):
        pull(source, since=date(2024, 2, 1), until=date(2024, 1, 1), on_instance=lambda d, s: None)
