"""The C-STORE listener against senders no one here wrote.

Peers: dcmtk's ``storescu``, ``dcmsend`` and ``echoscu`` (Debian package dcmtk) over loopback;
pynetdicom's SCU in-process for what the dcmtk tools cannot send (a data set that cannot be
decoded, a data set that contradicts its request). Inputs: pydicom's bundled ``CT_small.dcm``
(NEMA WG04 CT), pydicom-data's ``RG1_UNCI.dcm`` / ``RG1_J2KR.dcm`` (NEMA WG04 CR, uncompressed and
JPEG 2000 lossless) and synthetic dose reports (``net_samples``).

Statuses checked are those of PS3.4 Annex B.2.3 (Table B.2-1). dcmtk 3.6.7's storescu exits with
the high byte of a failure status (0xA7 = 167 for 0xA7xx, 0xC0 = 192 for 0xC0xx), which the
tests use to read what the sender saw.
"""

from __future__ import annotations

import logging
import os
import signal
import subprocess
import sys
import threading
from collections.abc import Iterator
from dataclasses import dataclass, field
from pathlib import Path

import pytest
from net_samples import (
    ENHANCED_XRAY_DOSE_SR,
    PATIENT_DOSE_SR,
    XRAY_DOSE_SR,
    build_dose_sr,
    write_dose_sr,
)
from peers import free_port, require_peer, wait_for_tcp, which_or_none
from pydicom import dcmread
from pydicom.data import get_testdata_file
from pydicom.dataset import FileMetaDataset
from pydicom.filebase import DicomBytesIO
from pydicom.filewriter import write_dataset, write_file_meta_info
from pydicom.uid import UID, DeflatedExplicitVRLittleEndian, ExplicitVRLittleEndian, generate_uid
from pynetdicom import AE
from pynetdicom.association import Association

from beamaudit.ingest.errors import IngestError
from beamaudit.ingest.listener import (
    DOSE_REPORT_STORAGE_SOP_CLASSES,
    IMAGE_STORAGE_SOP_CLASSES,
    Listener,
    ListenerConfig,
    ListenerConfigError,
    ReceivedObject,
    StoreOutcome,
    StoreStatus,
    start_listener,
    storage_contexts,
)
from beamaudit.ingest.sender import open_association

CT_IMAGE_STORAGE = "1.2.840.10008.5.1.4.1.1.2"  # PS3.4 Table B.5-1
CR_IMAGE_STORAGE = "1.2.840.10008.5.1.4.1.1.1"
JPEG2000_LOSSLESS = "1.2.840.10008.1.2.4.90"  # PS3.5 Table A-1 / pydicom.uid.JPEG2000Lossless
SENDER_AET = "STORESCU"  # dcmtk's default calling AE title


def _testdata(name: str) -> str:
    path = get_testdata_file(name)
    assert isinstance(path, str), f"{name} not found in pydicom / pydicom-data"
    return path


# --------------------------------------------------------------------------- handler under test


@dataclass
class DiskHandler:
    """Stores each received object durably in a folder (write, fsync, rename), or fails as told."""

    folder: Path
    mode: str = "store"  # "store" | "raise" | "unusable" | "ingest_error"
    received: list[ReceivedObject] = field(default_factory=list)
    lock: threading.Lock = field(default_factory=threading.Lock)

    def __call__(self, obj: ReceivedObject) -> StoreOutcome:
        with self.lock:
            self.received.append(obj)
        if self.mode == "raise":
            # the message carries a value a real database error might quote: it must not be logged
            raise OSError(28, "No space left on device while writing Synthetic^DoseReport")
        if self.mode == "unusable":
            return StoreOutcome.cannot_understand("no x-ray exposure attributes in this object")
        if self.mode == "ingest_error":
            raise IngestError("out_of_range", "(0018,0060) KVP 0 kV is outside 20-150 kV")
        target = self.folder / f"{obj.sop_instance_uid}.dcm"
        partial = target.with_suffix(".part")
        with partial.open("wb") as fh:
            fh.write(obj.encoded)
            fh.flush()
            os.fsync(fh.fileno())
        partial.replace(target)
        return StoreOutcome.stored()

    def stored_files(self) -> list[Path]:
        return sorted(self.folder.glob("*.dcm"))


@pytest.fixture
def handler(tmp_path: Path) -> DiskHandler:
    folder = tmp_path / "received"
    folder.mkdir()
    return DiskHandler(folder)


@pytest.fixture
def listener(handler: DiskHandler) -> Iterator[Listener]:
    running = start_listener(ListenerConfig(port=0), handler)
    try:
        yield running
    finally:
        running.stop()


@pytest.fixture
def dcmtk() -> dict[str, str]:
    tools = {name: which_or_none(name) for name in ("storescu", "dcmsend", "echoscu")}
    missing = [name for name, path in tools.items() if path is None]
    require_peer(
        "dcmtk", not missing, f"{', '.join(missing)} not on PATH (apt-get install -y dcmtk)"
    )
    return {name: path for name, path in tools.items() if path is not None}


def _run(argv: list[str]) -> subprocess.CompletedProcess[str]:
    return subprocess.run(argv, capture_output=True, text=True, timeout=30, check=False)


def _storescu(
    tools: dict[str, str], port: int, *files: str, options: tuple[str, ...] = ()
) -> subprocess.CompletedProcess[str]:
    return _run([tools["storescu"], "-aec", "BEAMAUDIT", *options, "127.0.0.1", str(port), *files])


# --------------------------------------------------------------------------- configuration


def test_contexts_include_the_dose_reports_pynetdicom_presets_lack() -> None:
    # pynetdicom's StoragePresentationContexts lack 88.76 and 88.73 (DICOM-NOTES 3.1)
    uids = {cx.abstract_syntax for cx in storage_contexts(ListenerConfig().sop_classes)}
    assert set(DOSE_REPORT_STORAGE_SOP_CLASSES) <= uids
    assert set(IMAGE_STORAGE_SOP_CLASSES) <= uids
    assert "1.2.840.10008.1.1" in uids  # Verification, PS3.4 Annex A


def test_default_classes_cover_everything_the_reader_accepts() -> None:
    # the listener keeps its own list (it must not depend on the parsers); this catches drift
    from beamaudit.ingest.reader import ACCEPTED_SOP_CLASSES

    assert set(ACCEPTED_SOP_CLASSES) <= set(ListenerConfig().sop_classes)


def test_storage_contexts_accept_compressed_transfer_syntaxes() -> None:
    ct = next(
        cx for cx in storage_contexts([CT_IMAGE_STORAGE]) if cx.abstract_syntax == CT_IMAGE_STORAGE
    )
    assert JPEG2000_LOSSLESS in ct.transfer_syntax
    assert ExplicitVRLittleEndian in ct.transfer_syntax


@pytest.mark.parametrize(
    ("kwargs", "match"),
    [
        ({"ae_title": ""}, "not a valid AE title"),
        ({"ae_title": "A" * 17}, "not a valid AE title"),
        ({"ae_title": "BACK\\SLASH"}, "not a valid AE title"),
        ({"allowed_calling_aets": frozenset()}, "allowed_calling_aets is empty"),
        ({"allowed_calling_aets": frozenset({"OK", "x" * 20})}, "allowed_calling_aets"),
        ({"port": 70000}, "port must be 0-65535"),
        ({"max_associations": 0}, "max_associations"),
        ({"sop_classes": ()}, "sop_classes is empty"),
    ],
)
def test_bad_settings_are_refused(kwargs: dict[str, object], match: str) -> None:
    with pytest.raises(ListenerConfigError, match=match):
        ListenerConfig(**kwargs)


def test_outcome_needs_consistent_status_and_reason() -> None:
    assert StoreOutcome.stored().status == StoreStatus.SUCCESS
    assert StoreOutcome.refused("db down").status == 0xA700
    assert StoreOutcome.cannot_understand("no kVp").status == 0xC000
    with pytest.raises(ValueError, match="failure status"):
        StoreOutcome(ok=False, reason="x", status=0x0000)
    with pytest.raises(ValueError, match="needs a reason"):
        StoreOutcome(ok=False, reason=None, status=0xA700)
    with pytest.raises(ValueError, match="success or warning"):
        StoreOutcome(ok=True, status=0xC000)


def test_port_in_use_is_a_clear_error(handler: DiskHandler) -> None:
    with start_listener(ListenerConfig(port=0), handler) as first:
        taken = ListenerConfig(port=first.port)
        with pytest.raises(ListenerConfigError, match=f"cannot listen on 127.0.0.1:{first.port}"):
            start_listener(taken, handler)


# --------------------------------------------------------------------------- dcmtk peers


@pytest.mark.peer
def test_storescu_ct_image_is_stored_then_acknowledged(
    dcmtk: dict[str, str], listener: Listener, handler: DiskHandler
) -> None:
    source = _testdata("CT_small.dcm")
    result = _storescu(dcmtk, listener.port, source)
    assert result.returncode == 0, result.stderr
    (stored,) = handler.stored_files()
    original = dcmread(source)
    copy = dcmread(stored)
    assert copy.SOPInstanceUID == original.SOPInstanceUID
    assert copy.KVP == original.KVP  # "120" in NEMA WG04 CT_small (DICOM-NOTES 4)
    (obj,) = handler.received
    assert obj.sop_class_uid == CT_IMAGE_STORAGE
    assert obj.calling_ae_title == SENDER_AET
    assert obj.called_ae_title == "BEAMAUDIT"
    assert obj.peer_address[0] == "127.0.0.1"
    assert obj.dataset.file_meta.TransferSyntaxUID == obj.transfer_syntax_uid
    assert obj.dataset.file_meta.MediaStorageSOPInstanceUID == original.SOPInstanceUID
    # the Part 10 bytes kept: pynetdicom's own encoding of the file meta, then the data set
    # as sent
    from pynetdicom.dsutils import encode_file_meta

    meta = encode_file_meta(obj.dataset.file_meta)
    assert obj.encoded[:132] == b"\x00" * 128 + b"DICM"
    assert obj.encoded[132 : 132 + len(meta)] == meta


@pytest.mark.peer
def test_storescu_compressed_cr_arrives_still_compressed(
    dcmtk: dict[str, str], listener: Listener, handler: DiskHandler
) -> None:
    # -xv: propose JPEG 2000 lossless; storescu cannot transcode it to an uncompressed syntax
    result = _storescu(dcmtk, listener.port, _testdata("RG1_J2KR.dcm"), options=("-xv",))
    assert result.returncode == 0, result.stderr
    (obj,) = handler.received
    assert obj.sop_class_uid == CR_IMAGE_STORAGE
    assert obj.transfer_syntax_uid == JPEG2000_LOSSLESS
    # NEMA WG04 RG1: ImageAndFluoroscopyAreaDoseProduct "1.200" dGy·cm² (DICOM-NOTES 4)
    assert float(obj.dataset.ImageAndFluoroscopyAreaDoseProduct) == pytest.approx(1.2)


@pytest.mark.peer
def test_storescu_dose_reports_of_all_three_classes(
    dcmtk: dict[str, str], listener: Listener, handler: DiskHandler, tmp_path: Path
) -> None:
    files = []
    for uid in (XRAY_DOSE_SR, ENHANCED_XRAY_DOSE_SR, PATIENT_DOSE_SR):
        path = tmp_path / f"{uid}.dcm"
        write_dose_sr(path, uid)
        files.append(str(path))
    # storescu's default proposal lacks Enhanced XRDSR (88.76); -R proposes what the files need
    result = _storescu(dcmtk, listener.port, *files, options=("-R",))
    assert result.returncode == 0, result.stderr
    assert sorted(obj.sop_class_uid for obj in handler.received) == sorted(
        DOSE_REPORT_STORAGE_SOP_CLASSES
    )
    assert len(handler.stored_files()) == 3


@pytest.mark.peer
def test_dcmsend_negotiates_from_the_files(
    dcmtk: dict[str, str], listener: Listener, handler: DiskHandler, tmp_path: Path
) -> None:
    sr = tmp_path / "enhanced.dcm"
    write_dose_sr(sr, ENHANCED_XRAY_DOSE_SR)
    files = [str(sr), _testdata("RG1_UNCI.dcm"), _testdata("RG1_J2KR.dcm")]
    result = _run([dcmtk["dcmsend"], "-aec", "BEAMAUDIT", "127.0.0.1", str(listener.port), *files])
    assert result.returncode == 0, result.stderr
    assert len(handler.stored_files()) == 3


@pytest.mark.peer
def test_echoscu_verification(dcmtk: dict[str, str], listener: Listener) -> None:
    result = _run([dcmtk["echoscu"], "-aec", "BEAMAUDIT", "127.0.0.1", str(listener.port)])
    assert result.returncode == 0, result.stderr


@pytest.mark.peer
def test_handler_failure_is_a_refusal_at_the_sender_and_the_listener_goes_on(
    dcmtk: dict[str, str],
    listener: Listener,
    handler: DiskHandler,
    caplog: pytest.LogCaptureFixture,
) -> None:
    handler.mode = "raise"
    with caplog.at_level(logging.INFO, logger="beamaudit.ingest.listener"):
        failed = _storescu(dcmtk, listener.port, _testdata("CT_small.dcm"))
    assert failed.returncode == 0xA7, failed.stdout + failed.stderr  # Refused: Out of Resources
    assert handler.stored_files() == []
    assert "OSError" in caplog.text
    # no patient data and no exception message in the log (PS3.15-style minimum disclosure)
    assert "Synthetic^DoseReport" not in caplog.text
    assert "No space left" not in caplog.text
    assert "CompressedSamples" not in caplog.text  # CT_small's Patient's Name
    handler.mode = "store"
    again = _storescu(dcmtk, listener.port, _testdata("CT_small.dcm"))
    assert again.returncode == 0, again.stderr
    assert len(handler.stored_files()) == 1


@pytest.mark.peer
def test_unusable_object_is_cannot_understand_at_the_sender(
    dcmtk: dict[str, str], listener: Listener, handler: DiskHandler
) -> None:
    handler.mode = "unusable"
    result = _storescu(dcmtk, listener.port, _testdata("CT_small.dcm"), options=("-v",))
    assert result.returncode == 0xC0, result.stdout + result.stderr  # Error: Cannot understand
    assert handler.stored_files() == []


@pytest.mark.peer
def test_unsupported_sop_class_is_not_negotiated(
    dcmtk: dict[str, str], listener: Listener, handler: DiskHandler
) -> None:
    result = _storescu(dcmtk, listener.port, _testdata("MR_small.dcm"))  # MR: no x-ray dose
    assert result.returncode != 0
    assert "No presentation context" in result.stderr
    assert handler.received == []


@pytest.mark.peer
def test_only_allowed_calling_ae_titles_are_accepted(
    dcmtk: dict[str, str], handler: DiskHandler
) -> None:
    config = ListenerConfig(port=0, allowed_calling_aets=frozenset({"MODALITY1"}))
    with start_listener(config, handler) as running:
        refused = _storescu(dcmtk, running.port, _testdata("CT_small.dcm"))
        assert refused.returncode != 0
        assert "Calling AE Title Not Recognized" in refused.stderr
        assert handler.received == []
        allowed = _storescu(
            dcmtk, running.port, _testdata("CT_small.dcm"), options=("-aet", "MODALITY1")
        )
        assert allowed.returncode == 0, allowed.stderr
        assert [obj.calling_ae_title for obj in handler.received] == ["MODALITY1"]


@pytest.mark.peer
def test_listener_on_a_fixed_port(dcmtk: dict[str, str], handler: DiskHandler) -> None:
    port = free_port()
    with start_listener(ListenerConfig(port=port, ae_title="AUDIT2"), handler) as running:
        assert running.port == port
        result = _run(
            [dcmtk["storescu"], "-aec", "AUDIT2", "127.0.0.1", str(port), _testdata("CT_small.dcm")]
        )
        assert result.returncode == 0, result.stderr
    assert running.stopped


_BLOCKING_SERVICE = """
import logging, sys
from pathlib import Path
from beamaudit.ingest.listener import ListenerConfig, StoreOutcome, start_listener

logging.basicConfig(level=logging.INFO, stream=sys.stderr)
folder = Path(sys.argv[2])

def handler(obj):
    (folder / (obj.sop_instance_uid + ".dcm")).write_bytes(obj.encoded)
    return StoreOutcome.stored()

listener = start_listener(ListenerConfig(port=int(sys.argv[1])), handler, block=True)
print("stopped" if listener.stopped else "running", flush=True)
"""


@pytest.mark.peer
def test_blocking_listener_serves_until_sigterm(dcmtk: dict[str, str], tmp_path: Path) -> None:
    port = free_port()
    service = subprocess.Popen(
        [sys.executable, "-c", _BLOCKING_SERVICE, str(port), str(tmp_path)],
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
        text=True,
    )
    try:
        assert wait_for_tcp(port, timeout_s=20), "the listener did not start"
        result = _storescu(dcmtk, port, _testdata("CT_small.dcm"))
        assert result.returncode == 0, result.stderr
        service.send_signal(signal.SIGTERM)
        out, err = service.communicate(timeout=20)
    finally:
        if service.poll() is None:
            service.kill()
            service.communicate()
    assert service.returncode == 0, err
    assert out.strip() == "stopped"
    assert "listener BEAMAUDIT on 127.0.0.1" in err and "stopped" in err
    assert len(list(tmp_path.glob("*.dcm"))) == 1


# --------------------------------------------------------------------------- pynetdicom SCU


def _associate(listener: Listener, *contexts: tuple[str, str]) -> Association:
    ae = AE("TESTSCU")
    for sop_class, syntax in contexts:
        ae.add_requested_context(sop_class, syntax)
    assoc = open_association(ae, "127.0.0.1", listener.port, ae_title="BEAMAUDIT")
    assert assoc.is_established
    return assoc


def test_handler_ingest_error_becomes_cannot_understand_with_its_reason(
    listener: Listener, handler: DiskHandler
) -> None:
    handler.mode = "ingest_error"
    assoc = _associate(listener, (PATIENT_DOSE_SR, ExplicitVRLittleEndian))
    try:
        status = assoc.send_c_store(build_dose_sr(PATIENT_DOSE_SR))
    finally:
        assoc.release()
    assert status.Status == StoreStatus.CANNOT_UNDERSTAND
    assert status.ErrorComment.startswith("out_of_range: (0018,0060) KVP 0 kV")
    assert len(status.ErrorComment) <= 64  # LO, PS3.5 Table 6.2-1


def test_handler_refusal_carries_an_error_comment(listener: Listener, handler: DiskHandler) -> None:
    handler.mode = "raise"
    assoc = _associate(listener, (XRAY_DOSE_SR, ExplicitVRLittleEndian))
    try:
        status = assoc.send_c_store(build_dose_sr(XRAY_DOSE_SR))
    finally:
        assoc.release()
    assert status.Status == StoreStatus.OUT_OF_RESOURCES
    assert status.ErrorComment == "storage failed (OSError)"


def _raw_part10(
    meta_class: str, syntax: str, body: bytes, tmp_path: Path, instance_uid: str | None = None
) -> Path:
    """A Part 10 file whose file meta says ``meta_class`` / ``syntax`` and whose data set is
    ``body`` as given (pynetdicom's chunked send takes the request's UIDs from the meta)."""
    meta = FileMetaDataset()
    meta.MediaStorageSOPClassUID = UID(meta_class)
    meta.MediaStorageSOPInstanceUID = UID(instance_uid or generate_uid())
    meta.TransferSyntaxUID = UID(syntax)
    buffer = DicomBytesIO()
    buffer.is_little_endian = True
    buffer.is_implicit_VR = False
    buffer.write(b"\x00" * 128 + b"DICM")
    write_file_meta_info(buffer, meta)
    path = tmp_path / "raw.dcm"
    path.write_bytes(buffer.getvalue() + body)
    return path


def test_undecodable_data_set_is_cannot_understand(
    listener: Listener, handler: DiskHandler, tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    from pynetdicom import _config

    # send the file's bytes as they are (pynetdicom would otherwise decode and re-encode them)
    monkeypatch.setattr(_config, "STORE_SEND_CHUNKED_DATASET", True)
    path = _raw_part10(
        CT_IMAGE_STORAGE, DeflatedExplicitVRLittleEndian, b"not a deflate stream", tmp_path
    )
    assoc = _associate(listener, (CT_IMAGE_STORAGE, DeflatedExplicitVRLittleEndian))
    try:
        status = assoc.send_c_store(path)
    finally:
        assoc.release()
    assert status.Status == StoreStatus.CANNOT_UNDERSTAND
    assert status.ErrorComment == "data set cannot be decoded (zlib.error)"
    assert handler.received == []


def test_data_set_of_another_class_than_requested_is_refused(
    listener: Listener, handler: DiskHandler, tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    from pynetdicom import _config

    monkeypatch.setattr(_config, "STORE_SEND_CHUNKED_DATASET", True)
    body = DicomBytesIO()
    body.is_little_endian = True
    body.is_implicit_VR = False
    sr = build_dose_sr(XRAY_DOSE_SR)
    write_dataset(body, sr)
    # the request says CT Image (from the file meta), the data set says X-Ray Radiation Dose SR
    path = _raw_part10(
        CT_IMAGE_STORAGE, ExplicitVRLittleEndian, body.getvalue(), tmp_path, sr.SOPInstanceUID
    )
    assoc = _associate(listener, (CT_IMAGE_STORAGE, ExplicitVRLittleEndian))
    try:
        status = assoc.send_c_store(path)
    finally:
        assoc.release()
    assert status.Status == StoreStatus.DATA_SET_DOES_NOT_MATCH_SOP_CLASS
    assert handler.received == []


def test_concurrent_senders_each_get_their_answer(listener: Listener, handler: DiskHandler) -> None:
    results: list[int] = []

    def send() -> None:
        assoc = _associate(listener, (XRAY_DOSE_SR, ExplicitVRLittleEndian))
        try:
            for _ in range(3):
                results.append(int(assoc.send_c_store(build_dose_sr(XRAY_DOSE_SR)).Status))
        finally:
            assoc.release()

    threads = [threading.Thread(target=send) for _ in range(4)]
    for thread in threads:
        thread.start()
    for thread in threads:
        thread.join(timeout=30)
    assert results == [0x0000] * 12
    assert len(handler.stored_files()) == 12


@pytest.mark.parametrize("transfer_syntax", [ExplicitVRLittleEndian, DeflatedExplicitVRLittleEndian,
                                             UID("1.2.840.10008.1.2.4.50")])  # fmt: skip
@pytest.mark.parametrize("extra", ["", "1", "12"])
def test_the_received_file_meta_is_encoded_as_pynetdicom_encodes_it(
    transfer_syntax: UID, extra: str
) -> None:
    """PS3.10 7.1 File Meta Information (UIDs of odd and even length, padded with NUL; the
    version name padded with a space), byte for byte pynetdicom's ``encode_file_meta``; a file
    meta of other elements goes through pynetdicom."""
    from pynetdicom.dsutils import create_file_meta, encode_file_meta

    from beamaudit.ingest.listener import part10_preamble_and_meta

    for sop_class in ("1.2.840.10008.5.1.4.1.1.88.67", "1.2.840.10008.5.1.4.1.1.1.1"):
        meta = create_file_meta(
            sop_class_uid=UID(sop_class),
            sop_instance_uid=UID("1.2.826.0.1.3680043.10.1." + extra),
            transfer_syntax=transfer_syntax,
        )
        expected = b"\x00" * 128 + b"DICM" + encode_file_meta(meta)
        assert part10_preamble_and_meta(meta) == expected
        meta.SourceApplicationEntityTitle = "ROOM1"  # another element: pynetdicom encodes it
        assert part10_preamble_and_meta(meta) == b"\x00" * 128 + b"DICM" + encode_file_meta(meta)
