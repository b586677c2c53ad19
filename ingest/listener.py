"""A C-STORE listener: the DICOM storage SCP through which modalities and PACS push objects.

The listener is network plumbing only. It negotiates the storage classes beamaudit reads, turns
each C-STORE request into a :class:`ReceivedObject` and hands it to a *handler* supplied by the
caller (the application binds the parser and the store there). The C-STORE response reports what
the handler said, mapped onto the Storage Service Class statuses of the standard:

- success (0x0000) only after the handler returned ``ok``; the handler must return only once the
  object (or the events read from it) is durably stored, because a sender that sees success may
  delete its copy;
- a handler that raises (other than an ``IngestError``), or reports a storage failure, gives
  0xA700 "Refused: Out of Resources" with an Error Comment (the sender keeps the object and may
  retry later);
- a data set that cannot be decoded, or that the handler finds unusable (it returns
  :meth:`StoreOutcome.cannot_understand` or raises ``IngestError``), gives a 0xC000-range
  "Error: Cannot understand" with an Error Comment carrying the reason (retrying will not help).

A failing handler never stops the listener: every association runs in its own thread and every
failure is answered and logged. Logs name SOP Instance UIDs and AE titles, never patient names
or IDs, and never an exception's message (a database error's text may quote data values).

Examples
--------
>>> def handler(received: ReceivedObject) -> StoreOutcome:  # doctest: +SKIP
...     store_durably(received.encoded)
...     return StoreOutcome.stored()
>>> with start_listener(ListenerConfig(port=11112), handler) as listener:  # doctest: +SKIP
...     listener.wait()
"""

from __future__ import annotations

import logging
import re
import signal
import struct
import threading
import traceback
from collections.abc import Callable, Iterable
from dataclasses import dataclass, field
from enum import IntEnum
from types import TracebackType
from typing import Any

from pydicom.dataset import Dataset, FileMetaDataset
from pynetdicom import AE, ALL_TRANSFER_SYNTAXES, build_context, evt
from pynetdicom.dsutils import encode_file_meta
from pynetdicom.events import EventHandlerType
from pynetdicom.presentation import PresentationContext

from .errors import IngestError

__all__ = [
    "DOSE_REPORT_STORAGE_SOP_CLASSES",
    "GENERIC_SR_STORAGE_SOP_CLASSES",
    "IMAGE_STORAGE_SOP_CLASSES",
    "Listener",
    "ListenerConfig",
    "ListenerConfigError",
    "ReceivedObject",
    "RejectHandler",
    "RejectedObject",
    "StoreHandler",
    "StoreOutcome",
    "StoreStatus",
    "start_listener",
    "storage_contexts",
]

_LOG = logging.getLogger(__name__)

# Storage SOP Class UIDs, PS3.4 Annex B.5 (Table B.5-1); names as in pydicom's UID dictionary.
IMAGE_STORAGE_SOP_CLASSES: dict[str, str] = {
    "1.2.840.10008.5.1.4.1.1.1": "Computed Radiography Image Storage",
    "1.2.840.10008.5.1.4.1.1.1.1": "Digital X-Ray Image Storage - For Presentation",
    "1.2.840.10008.5.1.4.1.1.1.1.1": "Digital X-Ray Image Storage - For Processing",
    "1.2.840.10008.5.1.4.1.1.1.2": "Digital Mammography X-Ray Image Storage - For Presentation",
    "1.2.840.10008.5.1.4.1.1.1.2.1": "Digital Mammography X-Ray Image Storage - For Processing",
    "1.2.840.10008.5.1.4.1.1.13.1.3": "Breast Tomosynthesis Image Storage",
    "1.2.840.10008.5.1.4.1.1.13.1.4": "Breast Projection X-Ray Image Storage - For Presentation",
    "1.2.840.10008.5.1.4.1.1.13.1.5": "Breast Projection X-Ray Image Storage - For Processing",
    "1.2.840.10008.5.1.4.1.1.12.1": "X-Ray Angiographic Image Storage",
    "1.2.840.10008.5.1.4.1.1.12.1.1": "Enhanced XA Image Storage",
    "1.2.840.10008.5.1.4.1.1.12.2": "X-Ray Radiofluoroscopic Image Storage",
    "1.2.840.10008.5.1.4.1.1.12.2.1": "Enhanced XRF Image Storage",
    "1.2.840.10008.5.1.4.1.1.2": "CT Image Storage",
    "1.2.840.10008.5.1.4.1.1.2.1": "Enhanced CT Image Storage",
    "1.2.840.10008.5.1.4.1.1.2.2": "Legacy Converted Enhanced CT Image Storage",
}

# The dose reports. pynetdicom's default StoragePresentationContexts lack the last two.
DOSE_REPORT_STORAGE_SOP_CLASSES: dict[str, str] = {
    "1.2.840.10008.5.1.4.1.1.88.67": "X-Ray Radiation Dose SR Storage",
    "1.2.840.10008.5.1.4.1.1.88.76": "Enhanced X-Ray Radiation Dose SR Storage",
    "1.2.840.10008.5.1.4.1.1.88.73": "Patient Radiation Dose SR Storage",
}

# Verification SOP Class (C-ECHO), PS3.4 Annex A.
_VERIFICATION_SOP_CLASS = "1.2.840.10008.1.1"

# Legacy devices send dose reports (root concept (113701, DCM)) in these general SR classes
# (DICOM-NOTES 2.1); the handler decides by content and answers 0xC000 for any other report.
GENERIC_SR_STORAGE_SOP_CLASSES: dict[str, str] = {
    "1.2.840.10008.5.1.4.1.1.88.22": "Enhanced SR Storage",
    "1.2.840.10008.5.1.4.1.1.88.33": "Comprehensive SR Storage",
    "1.2.840.10008.5.1.4.1.1.88.34": "Comprehensive 3D SR Storage",
    "1.2.840.10008.5.1.4.1.1.88.35": "Extensible SR Storage",
}

# AE Title (VR AE, PS3.5 Table 6.2-1): at most 16 characters of the default repertoire, no
# backslash, no control characters; leading and trailing spaces are not significant.
_AE_TITLE = re.compile(r"^[\x20-\x5B\x5D-\x7E]{1,16}$")
# Error Comment (0000,0902) is LO: at most 64 characters (PS3.7 Annex C, PS3.5 Table 6.2-1).
_ERROR_COMMENT_MAX = 64


class StoreStatus(IntEnum):
    """C-STORE response statuses used here (PS3.4 Annex B.2.3, Table B.2-1 "C-STORE Response
    Status Values"; the same table as pynetdicom's ``STORAGE_SERVICE_CLASS_STATUS``).

    ========  ========  ==============================================================
    code      category  meaning
    ========  ========  ==============================================================
    0x0000    Success   stored
    0xB000    Warning   Coercion of Data Elements
    0xB006    Warning   Elements Discarded
    0xB007    Warning   Data Set Does Not Match SOP Class
    0xA7xx    Failure   Refused: Out of Resources
    0xA9xx    Failure   Error: Data Set Does Not Match SOP Class
    0xCxxx    Failure   Error: Cannot understand
    ========  ========  ==============================================================
    """

    SUCCESS = 0x0000
    COERCION_OF_DATA_ELEMENTS = 0xB000
    ELEMENTS_DISCARDED = 0xB006
    DATA_SET_DOES_NOT_MATCH_SOP_CLASS_WARNING = 0xB007
    OUT_OF_RESOURCES = 0xA700
    DATA_SET_DOES_NOT_MATCH_SOP_CLASS = 0xA900
    CANNOT_UNDERSTAND = 0xC000


_WARNING_STATUSES = frozenset({0xB000, 0xB006, 0xB007})


def _is_failure_status(status: int) -> bool:
    """True for the failure ranges of Table B.2-1 (A7xx, A9xx, Cxxx)."""
    return 0xA700 <= status <= 0xA7FF or 0xA900 <= status <= 0xA9FF or 0xC000 <= status <= 0xCFFF


class ListenerConfigError(IngestError):
    """A listener setting that cannot work (an invalid AE title, a port out of range)."""

    def __init__(self, reason: str) -> None:
        super().__init__("bad_value", reason, "listener settings")

    def __reduce__(self) -> tuple[Any, ...]:
        return (type(self), (self.reason,))


@dataclass(frozen=True, slots=True)
class ReceivedObject:
    """One object received by C-STORE, as the handler sees it.

    Attributes
    ----------
    dataset : pydicom.dataset.Dataset
        The decoded data set, with ``file_meta`` set from the negotiated presentation context.
        Pixel Data is present as received (still encapsulated when compressed) and never decoded.
    encoded : bytes
        The object as a DICOM Part 10 file (preamble, file meta, data set exactly as the sender
        encoded it): what an archive of received objects should write.
    sop_class_uid, sop_instance_uid : str
        From the data set (checked to agree with the C-STORE request).
    transfer_syntax_uid : str
        The transfer syntax of the presentation context the object came on.
    calling_ae_title, called_ae_title : str
        The sender's AE title and the one it called us by.
    peer_address : tuple[str, int]
        The sender's IP address and TCP port.
    received_path : str or None
        The received object's temporary file (pixel data included) while the handler runs,
        when pynetdicom received it to a file; None when it came in memory.
    """

    dataset: Dataset
    encoded: bytes
    sop_class_uid: str
    sop_instance_uid: str
    transfer_syntax_uid: str
    calling_ae_title: str
    called_ae_title: str
    peer_address: tuple[str, int]
    #: the whole object as pynetdicom received it to a file (pixel data included), when it did;
    #: the file exists only while the handler runs (``encoded`` then stops before Pixel Data)
    received_path: str | None = None


@dataclass(frozen=True, slots=True)
class StoreOutcome:
    """What the handler reports for one received object.

    Use the constructors: :meth:`stored` once the object is durably stored,
    :meth:`refused` when storing failed for a reason that may pass (database down, disk full),
    :meth:`cannot_understand` when the object itself is unusable (retrying will not help).

    Attributes
    ----------
    ok : bool
        True when the object is durably stored.
    reason : str or None
        Why it was not stored (required when ``ok`` is False). Sent to the sender as the Error
        Comment (first 64 characters), so it must not carry patient data.
    status : int
        The C-STORE status to answer, from :class:`StoreStatus` or its ranges.
    """

    ok: bool
    reason: str | None = None
    status: int = StoreStatus.SUCCESS

    def __post_init__(self) -> None:
        if self.ok:
            if self.status != StoreStatus.SUCCESS and self.status not in _WARNING_STATUSES:
                raise ValueError(
                    f"a stored object needs a success or warning status, not 0x{self.status:04X}"
                )
        else:
            if not _is_failure_status(self.status):
                raise ValueError(
                    "a failed store needs a failure status (0xA7xx, 0xA9xx, 0xCxxx), "
                    f"not 0x{self.status:04X}"
                )
            if not self.reason:
                raise ValueError("a failed store needs a reason")

    @classmethod
    def stored(cls) -> StoreOutcome:
        """The object is durably stored: answer 0x0000."""
        return cls(ok=True)

    @classmethod
    def refused(cls, reason: str) -> StoreOutcome:
        """Storing failed for a reason that may pass: answer 0xA700 Refused: Out of Resources."""
        return cls(ok=False, reason=reason, status=StoreStatus.OUT_OF_RESOURCES)

    @classmethod
    def cannot_understand(cls, reason: str) -> StoreOutcome:
        """The object is unusable (malformed, not a dose-bearing object): answer 0xC000."""
        return cls(ok=False, reason=reason, status=StoreStatus.CANNOT_UNDERSTAND)


StoreHandler = Callable[[ReceivedObject], StoreOutcome]
"""Called once per C-STORE request, from the association's thread; must be thread-safe."""


@dataclass(frozen=True, slots=True)
class RejectedObject:
    """A C-STORE request the listener answered with a failure before any handler saw it: a data
    set that cannot be decoded, has no SOP Instance UID, or is of another class than requested.

    Attributes
    ----------
    sop_instance_uid, sop_class_uid : str
        As the C-STORE request names them ("" when absent).
    calling_ae_title : str
        The sender's AE title.
    peer_address : tuple of (str, int)
        The sender's address and port.
    reason : str
        Why it was refused (no patient data: names of exceptions and attributes only).
    status : int
        The status answered.
    """

    sop_instance_uid: str
    sop_class_uid: str
    calling_ae_title: str
    peer_address: tuple[str, int]
    reason: str
    status: int


RejectHandler = Callable[[RejectedObject], object]
"""Told of every request refused before the handler ran (to record it); must be thread-safe."""


@dataclass(frozen=True, slots=True)
class ListenerConfig:
    """Settings of the C-STORE listener.

    Attributes
    ----------
    ae_title : str
        Our AE title (at most 16 characters).
    host : str
        The address to bind; the default answers only this machine.
    port : int
        TCP port; 0 lets the operating system choose (see :attr:`Listener.port`).
    allowed_calling_aets : frozenset of str or None
        When set, associations from any other calling AE title are rejected.
    require_called_aet : bool
        Reject associations that do not call us by ``ae_title``.
    max_associations : int
        Concurrent associations accepted.
    sop_classes : tuple of str
        The storage SOP Class UIDs accepted; by default the x-ray image classes, the dose
        reports and the general SR classes legacy devices send dose reports in. Verification
        (C-ECHO) is always accepted.
    network_timeout_s : float
        Seconds an established association may stay silent before it is closed.
    request_timeout_s : float
        Seconds a new TCP connection has to ask for an association (A-ASSOCIATE-RQ) before it
        is closed: a connection that never asks holds no place for long.
    association_timeout_s : float
        Seconds an association may last in all; a sender dripping data is cut off then.
    max_associations_per_ae : int
        Concurrent associations from one calling AE title: one sender holding associations
        idle leaves room for the others.
    max_connections : int
        TCP connections handled at once, associated or not yet (the hard cap; pynetdicom's
        ``maximum_associations``). Connections that have not asked for an association do not
        count against ``max_associations``.
    max_objects_in_flight : int
        Received objects decoded and stored at once (the others wait, then are refused with
        0xA700 "out of resources" after half of ``network_timeout_s``).
    max_object_bytes : int
        Largest object accepted; a sender that sends more in one object has its association
        aborted as soon as it passes the limit. Objects are received into temporary files
        (pynetdicom's chunked receiving), never whole into memory, and only the header before
        Pixel Data is read.
    decode_values : bool
        Decode every element's value before the handler runs, and answer 0xC000 for a value
        that cannot be decoded. False leaves the values to the handler (which must then record
        such an object itself): a handler that answers once the object is spooled and parses
        it later saves the decoding, about as long as pynetdicom's own work on a small header.
        The data set is always read to Pixel Data (a truncated or misframed one is refused)
        and its UIDs checked.
    """

    ae_title: str = "BEAMAUDIT"
    host: str = "127.0.0.1"
    port: int = 11112
    allowed_calling_aets: frozenset[str] | None = None
    require_called_aet: bool = False
    max_associations: int = 10
    sop_classes: tuple[str, ...] = field(
        default_factory=lambda: (
            *IMAGE_STORAGE_SOP_CLASSES,
            *DOSE_REPORT_STORAGE_SOP_CLASSES,
            *GENERIC_SR_STORAGE_SOP_CLASSES,
        )
    )
    network_timeout_s: float = 30.0
    request_timeout_s: float = 10.0
    association_timeout_s: float = 3600.0
    max_associations_per_ae: int = 4
    max_connections: int = 64
    max_objects_in_flight: int = 4
    max_object_bytes: int = 1024 * 1024 * 1024
    decode_values: bool = True

    def __post_init__(self) -> None:
        _check_ae_title(self.ae_title, "ae_title")
        if self.allowed_calling_aets is not None:
            if not self.allowed_calling_aets:
                raise ListenerConfigError(
                    "allowed_calling_aets is empty, so every sender would be refused; "
                    "give at least one AE title, or None to accept any"
                )
            for title in self.allowed_calling_aets:
                _check_ae_title(title, "allowed_calling_aets")
        if not 0 <= self.port <= 65535:
            raise ListenerConfigError(f"port must be 0-65535, not {self.port}")
        if self.max_associations < 1:
            raise ListenerConfigError(
                f"max_associations must be at least 1, not {self.max_associations}"
            )
        if not self.sop_classes:
            raise ListenerConfigError("sop_classes is empty: the listener would accept nothing")
        for name in ("network_timeout_s", "request_timeout_s", "association_timeout_s"):
            if getattr(self, name) <= 0:
                raise ListenerConfigError(f"{name} must be positive, not {getattr(self, name)}")
        for name in (
            "max_associations_per_ae",
            "max_connections",
            "max_objects_in_flight",
            "max_object_bytes",
        ):
            if getattr(self, name) < 1:
                raise ListenerConfigError(f"{name} must be at least 1, not {getattr(self, name)}")


def _check_ae_title(title: str, what: str) -> None:
    if not isinstance(title, str) or not _AE_TITLE.match(title) or not title.strip():
        raise ListenerConfigError(
            f"{what}: {title!r} is not a valid AE title "
            "(1-16 printable ASCII characters, no backslash)"
        )


def storage_contexts(sop_classes: Iterable[str]) -> list[PresentationContext]:
    """The presentation contexts the listener supports: each storage class with every transfer
    syntax pynetdicom knows (compressed ones included: pixel data is never decoded), plus
    Verification (C-ECHO) with its default uncompressed syntaxes."""
    contexts = [build_context(uid, ALL_TRANSFER_SYNTAXES) for uid in dict.fromkeys(sop_classes)]
    contexts.append(build_context(_VERIFICATION_SOP_CLASS))
    return contexts


def _error_comment(reason: str) -> str:
    """A reason as an Error Comment: printable ASCII without backslash, at most 64 characters."""
    text = "".join(ch if " " <= ch <= "~" and ch != "\\" else "?" for ch in reason).strip()
    if len(text) > _ERROR_COMMENT_MAX:
        text = text[: _ERROR_COMMENT_MAX - 3] + "..."
    return text or "failed"


def _status_dataset(outcome: StoreOutcome) -> Dataset:
    status = Dataset()
    status.Status = int(outcome.status)
    if not outcome.ok and outcome.reason:
        status.ErrorComment = _error_comment(outcome.reason)
    return status


def _exception_name(exc: BaseException) -> str:
    """``zlib.error``, ``ValueError``: the exception's class, qualified unless built in."""
    module = type(exc).__module__
    name = type(exc).__qualname__
    return name if module == "builtins" else f"{module.rsplit('.', 1)[-1]}.{name}"


def _where(exc: BaseException) -> str:
    """Where an exception was raised (file:line in function), without its message."""
    frames = traceback.extract_tb(exc.__traceback__)
    if not frames:
        return _exception_name(exc)
    last = frames[-1]
    filename = last.filename.rsplit("/", 1)[-1]
    return f"{_exception_name(exc)} at {filename}:{last.lineno} in {last.name}"


def _read_received(event: evt.Event) -> tuple[Dataset, bytes]:
    """The received data set (with its file meta) and its Part 10 bytes, up to Pixel Data when
    received to a file.

    With pynetdicom's chunked receiving the object sits in a temporary file: only the part
    before Pixel Data (7FE0,0010) is read, so an image of hundreds of megabytes costs the
    header's memory. Otherwise the object came in memory and is taken whole, its file meta
    made once (pynetdicom's ``event.file_meta`` makes a new one at each use) and encoded by
    :func:`part10_preamble_and_meta`.
    """
    path = getattr(event.request, "_dataset_path", None)
    if path is None:
        meta = event.file_meta
        dataset = event.dataset
        dataset.file_meta = meta
        stream = event.encoded_dataset(include_meta=False)
        return dataset, part10_preamble_and_meta(meta) + stream
    from pydicom import dcmread

    with open(path, "rb") as fh:
        dataset = dcmread(fh, stop_before_pixels=True)
        end = fh.tell()
        fh.seek(0)
        encoded = fh.read(end)
    return dataset, encoded


#: the File Meta Information elements pynetdicom gives a received object (PS3.10 7.1), in tag
#: order, with their VR and the byte a value of odd length is padded with (PS3.5 6.2)
_META_ELEMENTS = (
    (0x0002, 0x0002, b"UI", b"\0", "MediaStorageSOPClassUID"),
    (0x0002, 0x0003, b"UI", b"\0", "MediaStorageSOPInstanceUID"),
    (0x0002, 0x0010, b"UI", b"\0", "TransferSyntaxUID"),
    (0x0002, 0x0012, b"UI", b"\0", "ImplementationClassUID"),
    (0x0002, 0x0013, b"SH", b" ", "ImplementationVersionName"),
)
#: the tags of pynetdicom's file meta: the group length, the version and the five above
_META_TAGS = frozenset({0x00020000, 0x00020001, *((g << 16) | e for g, e, *_ in _META_ELEMENTS)})


def part10_preamble_and_meta(meta: FileMetaDataset) -> bytes:
    """The 128-byte preamble, ``DICM`` and the File Meta Information ``meta`` encoded as PS3.10
    7.1 says: Explicit VR Little Endian, the group length first.

    pynetdicom's file meta for a received object (the version and the five texts of
    :data:`_META_ELEMENTS`) is written directly: the same bytes as pynetdicom's
    ``encode_file_meta`` (held so in the tests), which went through pydicom's writer and its
    checks of every value, a twentieth of the listener's time for a small header. Any other
    file meta goes through ``encode_file_meta``."""
    start = b"\x00" * 128 + b"DICM"
    if set(meta.keys()) != _META_TAGS or meta.get("FileMetaInformationVersion") != b"\x00\x01":
        return start + encode_file_meta(meta)
    body = [b"\x02\x00\x01\x00OB\x00\x00" + struct.pack("<I", 2) + b"\x00\x01"]
    for group, element, vr, pad, keyword in _META_ELEMENTS:
        try:
            value = str(meta.get(keyword) or "").encode("ascii")
        except UnicodeEncodeError:
            return start + encode_file_meta(meta)
        if len(value) % 2:
            value += pad
        body.append(struct.pack("<HH", group, element) + vr + struct.pack("<H", len(value)) + value)
    encoded = b"".join(body)
    return start + b"\x02\x00\x00\x00UL\x04\x00" + struct.pack("<I", len(encoded)) + encoded


def _decode(
    event: evt.Event, decode_values: bool = True
) -> tuple[ReceivedObject | None, StoreOutcome | None]:
    """Decode the request into a ReceivedObject, or say why it cannot be understood.

    The data set is read to Pixel Data (every element's tag, VR and length: a truncated or
    misframed data set is refused) and its SOP Class and Instance UIDs checked; with
    ``decode_values`` every element's value is decoded too (a value that cannot be is refused).
    """
    request = event.request
    requested_class = str(getattr(request, "AffectedSOPClassUID", "") or "")
    requested_instance = str(getattr(request, "AffectedSOPInstanceUID", "") or "")
    try:
        dataset, encoded = _read_received(event)
        if not getattr(dataset, "file_meta", None):
            # (read from pynetdicom's file, the data set has the file meta pynetdicom wrote
            # there from the same presentation context: not made a second time)
            dataset.file_meta = event.file_meta
        if decode_values:
            # pydicom decodes values lazily: walk every element now, so a malformed data set is
            # refused here rather than half-read by the handler.
            for _ in dataset.iterall():
                pass
        sop_class_uid = str(dataset.get("SOPClassUID", "") or "")
        sop_instance_uid = str(dataset.get("SOPInstanceUID", "") or "")
    except Exception as exc:  # any decoding failure of a peer's bytes is answered, not raised
        _LOG.warning(
            "C-STORE %s: data set cannot be decoded (%s)", requested_instance or "?", _where(exc)
        )
        return None, StoreOutcome.cannot_understand(
            f"data set cannot be decoded ({_exception_name(exc)})"
        )
    if not sop_instance_uid:
        return None, StoreOutcome.cannot_understand("data set has no SOP Instance UID (0008,0018)")
    if requested_instance and sop_instance_uid != requested_instance:
        return None, StoreOutcome.cannot_understand(
            "SOP Instance UID in the data set differs from the C-STORE request's"
        )
    if requested_class and sop_class_uid != requested_class:
        return None, StoreOutcome(
            ok=False,
            reason=f"data set SOP Class {sop_class_uid or 'missing'} "
            f"is not the requested {requested_class}",
            status=StoreStatus.DATA_SET_DOES_NOT_MATCH_SOP_CLASS,
        )
    requestor = event.assoc.requestor
    received = ReceivedObject(
        dataset=dataset,
        encoded=encoded,
        sop_class_uid=sop_class_uid,
        sop_instance_uid=sop_instance_uid,
        transfer_syntax_uid=str(event.context.transfer_syntax),
        calling_ae_title=str(requestor.ae_title).strip(),
        called_ae_title=str(event.assoc.acceptor.ae_title).strip(),
        peer_address=(str(requestor.address), int(requestor.port)),
        received_path=_received_path(event),
    )
    return received, None


def _received_path(event: evt.Event) -> str | None:
    path = getattr(event.request, "_dataset_path", None)
    return None if path is None else str(path)


def _handle_store(
    event: evt.Event,
    handler: StoreHandler,
    on_rejected: RejectHandler | None = None,
    guard: _Guard | None = None,
) -> Dataset:
    """EVT_C_STORE: decode, call the handler, map its outcome onto a C-STORE status."""
    if guard is None:
        return _store_one(event, handler, on_rejected)
    decode_values = guard.config.decode_values
    guard.object_done(event.assoc)
    # half the idle limit: the refusal reaches the sender well before its association would
    # count as silent
    if not guard.in_flight.acquire(timeout=guard.config.network_timeout_s / 2):
        uid = str(getattr(event.request, "AffectedSOPInstanceUID", "") or "?")
        _LOG.warning("C-STORE %s: refused, %d objects in flight already", uid,
                     guard.config.max_objects_in_flight)  # fmt: skip
        return _status_dataset(StoreOutcome.refused("busy: too many objects at once; retry"))
    try:
        return _store_one(event, handler, on_rejected, decode_values)
    finally:
        guard.in_flight.release()
        _restart_idle_timer(event.assoc)


def _restart_idle_timer(assoc: Any) -> None:
    """The time spent storing is not the sender's silence: ``network_timeout_s`` counts anew
    once the answer is ready (pynetdicom counts from the last data received)."""
    timer = getattr(getattr(assoc, "dul", None), "_idle_timer", None)
    if timer is not None:
        timer.restart()


def _store_one(
    event: evt.Event,
    handler: StoreHandler,
    on_rejected: RejectHandler | None,
    decode_values: bool = True,
) -> Dataset:
    received, outcome = _decode(event, decode_values)
    uid = str(getattr(event.request, "AffectedSOPInstanceUID", "") or "?")
    if received is None and on_rejected is not None and outcome is not None:
        _tell_rejected(event, outcome, on_rejected)
    if received is not None:
        try:
            outcome = handler(received)
        except IngestError as exc:  # the handler found the object unusable: retrying won't help
            outcome = StoreOutcome.cannot_understand(f"{exc.code}: {exc.reason}")
        except Exception as exc:  # the handler's failure becomes a failure status, never a crash
            _LOG.error("C-STORE %s: handler failed: %s", uid, _where(exc))
            outcome = StoreOutcome.refused(f"storage failed ({_exception_name(exc)})")
        if not isinstance(outcome, StoreOutcome):
            _LOG.error(
                "C-STORE %s: handler returned %s, not a StoreOutcome", uid, type(outcome).__name__
            )
            outcome = StoreOutcome.refused("storage failed (handler returned no outcome)")
    assert outcome is not None
    if outcome.ok:
        _LOG.info("C-STORE %s: stored (status 0x%04X)", uid, outcome.status)
    else:
        _LOG.warning(
            "C-STORE %s: not stored (status 0x%04X): %s",
            uid,
            outcome.status,
            _error_comment(outcome.reason or ""),
        )
    return _status_dataset(outcome)


def _tell_rejected(event: evt.Event, outcome: StoreOutcome, on_rejected: RejectHandler) -> None:
    request = event.request
    requestor = event.assoc.requestor
    rejected = RejectedObject(
        sop_instance_uid=str(getattr(request, "AffectedSOPInstanceUID", "") or ""),
        sop_class_uid=str(getattr(request, "AffectedSOPClassUID", "") or ""),
        calling_ae_title=str(requestor.ae_title).strip(),
        peer_address=(str(requestor.address), int(requestor.port)),
        reason=outcome.reason or "refused",
        status=int(outcome.status),
    )
    try:
        on_rejected(rejected)
    except Exception as exc:  # recording is best effort: the sender has its answer anyway
        _LOG.error(
            "C-STORE %s: recording the refusal failed: %s",
            rejected.sop_instance_uid or "?",
            _where(exc),
        )


def _describe(event: evt.Event) -> str:
    requestor = event.assoc.requestor
    return f"{str(requestor.ae_title).strip() or '?'}@{requestor.address}:{requestor.port}"


def _log_accepted(event: evt.Event) -> None:
    _LOG.info("association accepted from %s", _describe(event))


def _log_rejected(event: evt.Event) -> None:
    _LOG.warning("association rejected from %s", _describe(event))


def _log_released(event: evt.Event) -> None:
    _LOG.info("association released by %s", _describe(event))


def _log_aborted(event: evt.Event) -> None:
    _LOG.warning("association aborted with %s", _describe(event))


# PS3.8 9.3.4 A-ASSOCIATE-RJ: result 2 rejected-transient, source 3 service-provider
# (presentation), reason 2 local-limit-exceeded (as pynetdicom answers its own limit)
_REJECT_TRANSIENT, _SOURCE_PROVIDER_PRESENTATION, _LOCAL_LIMIT_EXCEEDED = 0x02, 0x03, 0x02


class _Guard:
    """The listener's limits beyond pynetdicom's own: associations in all and per calling AE
    title (counted from the A-ASSOCIATE-RQ on, so bare TCP connections hold no place), an
    association's whole lifetime, objects in flight, and the size of one object."""

    def __init__(self, config: ListenerConfig) -> None:
        self.config = config
        self.in_flight = threading.BoundedSemaphore(config.max_objects_in_flight)
        self._lock = threading.Lock()
        self._admitted: dict[int, tuple[str, threading.Timer]] = {}
        self._received: dict[int, int] = {}
        self._sockets: dict[int, Any] = {}

    def on_opened(self, event: evt.Event) -> None:
        """EVT_CONN_OPEN: remember the connection's socket, to close it for sure at the end."""
        raw = getattr(getattr(event.assoc.dul, "socket", None), "socket", None)
        if raw is not None:
            with self._lock:
                self._sockets[id(event.assoc)] = raw

    def on_requested(self, event: evt.Event) -> None:
        """EVT_REQUESTED: admit the association, or reject it (transient, local limit)."""
        assoc = event.assoc
        primitive = assoc.requestor.primitive
        calling = str(getattr(primitive, "calling_ae_title", "") or "").strip()
        with self._lock:
            same_ae = sum(1 for ae, _ in self._admitted.values() if ae == calling)
            full = len(self._admitted) >= self.config.max_associations
            if not full and same_ae < self.config.max_associations_per_ae:
                timer = threading.Timer(self.config.association_timeout_s, self._expire, [assoc])
                timer.daemon = True
                self._admitted[id(assoc)] = (calling, timer)
                timer.start()
                return
        _LOG.warning(
            "association from %s@%s refused: %s", calling or "?", assoc.requestor.address,
            "the listener is at max_associations" if full
            else "that AE title is at max_associations_per_ae",
        )  # fmt: skip
        assoc.acse.send_reject(
            _REJECT_TRANSIENT, _SOURCE_PROVIDER_PRESENTATION, _LOCAL_LIMIT_EXCEEDED
        )

    def _expire(self, assoc: Any) -> None:
        _LOG.warning(
            "association from %s aborted: open longer than association_timeout_s (%.0f s)",
            str(assoc.requestor.ae_title).strip(), self.config.association_timeout_s,
        )  # fmt: skip
        assoc.abort()

    def on_data(self, event: evt.Event) -> None:
        """EVT_DATA_RECV: count the bytes of the object being received; past
        ``max_object_bytes`` the connection is closed (the association aborts)."""
        key = id(event.assoc)
        with self._lock:
            total = self._received.get(key, 0) + len(event.data)
            self._received[key] = total
        if total > self.config.max_object_bytes + 65536:  # a PDU's framing over the object
            _LOG.warning(
                "association from %s aborted: object larger than max_object_bytes (%d)",
                _describe(event), self.config.max_object_bytes,
            )  # fmt: skip
            with self._lock:
                self._received[key] = 0
            connection = event.assoc.dul.socket
            if connection is not None:
                connection.close()

    def object_done(self, assoc: Any) -> None:
        with self._lock:
            self._received[id(assoc)] = 0

    def on_closed(self, event: evt.Event) -> None:
        """EVT_CONN_CLOSE: free the association's place; remove an unfinished object's file."""
        key = id(event.assoc)
        with self._lock:
            admitted = self._admitted.pop(key, None)
            self._received.pop(key, None)
            raw = self._sockets.pop(key, None)
        if admitted is not None:
            admitted[1].cancel()
        if raw is not None:
            # pynetdicom skips close() when shutdown() fails (a peer already gone): under a
            # flood of dropped connections that would leak a descriptor each time
            raw.close()
        _remove_partial_file(event.assoc)


def _remove_partial_file(assoc: Any) -> None:
    """pynetdicom leaves the temporary file of an object cut off mid-transfer: remove it."""
    import os

    message = getattr(getattr(assoc, "dimse", None), "message", None)
    handle = getattr(message, "_data_set_file", None)
    if handle is None:
        return
    try:
        handle.close()
        os.unlink(handle.name)
    except OSError:
        pass


class Listener:
    """A running C-STORE listener (returned by :func:`start_listener`).

    Use as a context manager, or call :meth:`stop`. :meth:`wait` blocks until stopped.
    """

    def __init__(self, server: Any, config: ListenerConfig) -> None:
        self._server = server
        self._stop_requested = threading.Event()
        self._stopped = threading.Event()
        self._lock = threading.Lock()
        self.config = config

    @property
    def address(self) -> tuple[str, int]:
        """The bound (host, port); the port is the real one when the config asked for 0."""
        host, port = self._server.server_address[:2]
        return str(host), int(port)

    @property
    def port(self) -> int:
        """The bound TCP port."""
        return self.address[1]

    @property
    def stopped(self) -> bool:
        """True once :meth:`stop` has run."""
        return self._stopped.is_set()

    def bind(self, event: Any, handler: Callable[..., Any]) -> None:
        """Add a pynetdicom event handler to the running server (a caller's counters, e.g. of
        ``evt.EVT_ACCEPTED``); the listener's own handlers stay."""
        self._server.bind(event, handler)

    def request_stop(self) -> None:
        """Ask whoever is in :meth:`wait` to stop the listener (safe in a signal handler)."""
        self._stop_requested.set()

    def stop(self) -> None:
        """Stop accepting, end the open associations and close the socket (idempotent)."""
        with self._lock:
            if self._stopped.is_set():
                return
            self._stop_requested.set()
            self._server.shutdown()
            self._stopped.set()
        _LOG.info("listener %s on %s:%d stopped", self.config.ae_title, *self.address)

    def wait(self, timeout_s: float | None = None) -> bool:
        """Block until a stop is requested (:meth:`request_stop`, :meth:`stop`, Ctrl-C) and
        then stop the listener, or until ``timeout_s`` passes; True when stopped."""
        try:
            requested = self._stop_requested.wait(timeout_s)
        except KeyboardInterrupt:
            requested = True
        if requested:
            self.stop()
        return requested

    def __enter__(self) -> Listener:
        return self

    def __exit__(
        self,
        exc_type: type[BaseException] | None,
        exc: BaseException | None,
        tb: TracebackType | None,
    ) -> None:
        self.stop()


def start_listener(
    config: ListenerConfig,
    handler: StoreHandler,
    *,
    block: bool = False,
    on_rejected: RejectHandler | None = None,
) -> Listener:
    """Start the C-STORE listener.

    Parameters
    ----------
    config : ListenerConfig
        AE title, address, accepted calling AE titles, limits.
    handler : StoreHandler
        Called for every received object, from the association's thread (so it must be
        thread-safe); returns a :class:`StoreOutcome` once the object is durably stored, or why
        not. An :class:`~beamaudit.ingest.errors.IngestError` it raises is answered 0xC000 with
        its code and reason; any other exception 0xA700, and is logged; the listener goes on.
    block : bool
        When True, serve in this thread until Ctrl-C, SIGTERM (when called from the main
        thread: ``beamaudit listen`` under a service manager) or :meth:`Listener.request_stop`
        from another thread, then return the stopped listener.
    on_rejected : RejectHandler, optional
        Told of every request refused before ``handler`` saw it (undecodable data set, no SOP
        Instance UID, another class than requested), so that the refusal can be recorded.
        When None, the handler's own ``on_rejected`` attribute is used if it has one.

    Returns
    -------
    Listener
        The running listener (stopped already when ``block`` was True).

    Raises
    ------
    ListenerConfigError
        When the address cannot be bound (port in use, no permission).
    """
    if on_rejected is None:
        on_rejected = getattr(handler, "on_rejected", None)
    from pynetdicom import _config as pynetdicom_config

    # objects arrive into temporary files, not memory (pynetdicom removes each after the
    # handler; _Guard.on_closed removes one cut off mid-transfer)
    pynetdicom_config.STORE_RECV_CHUNKED_DATASET = True
    guard = _Guard(config)
    ae = AE(ae_title=config.ae_title)
    ae.supported_contexts = storage_contexts(config.sop_classes)
    ae.maximum_associations = max(config.max_connections, config.max_associations)
    ae.network_timeout = config.network_timeout_s
    ae.acse_timeout = config.request_timeout_s
    ae.dimse_timeout = config.network_timeout_s
    ae.require_called_aet = config.require_called_aet
    if config.allowed_calling_aets is not None:
        ae.require_calling_aet = sorted(config.allowed_calling_aets)
    handlers: list[EventHandlerType] = [
        (evt.EVT_C_STORE, _handle_store, [handler, on_rejected, guard]),
        (evt.EVT_REQUESTED, guard.on_requested),
        (evt.EVT_DATA_RECV, guard.on_data),
        (evt.EVT_CONN_OPEN, guard.on_opened),
        (evt.EVT_CONN_CLOSE, guard.on_closed),
        (evt.EVT_ACCEPTED, _log_accepted),
        (evt.EVT_REJECTED, _log_rejected),
        (evt.EVT_RELEASED, _log_released),
        (evt.EVT_ABORTED, _log_aborted),
    ]
    try:
        server = ae.start_server((config.host, config.port), block=False, evt_handlers=handlers)
    except OSError as exc:
        raise ListenerConfigError(
            f"cannot listen on {config.host}:{config.port}: {exc.strerror or exc}"
        ) from exc
    listener = Listener(server, config)
    _LOG.info(
        "listener %s on %s:%d accepting %d storage classes%s",
        config.ae_title,
        *listener.address,
        len(dict.fromkeys(config.sop_classes)),
        ""
        if config.allowed_calling_aets is None
        else f" from {len(config.allowed_calling_aets)} AE titles",
    )
    if block:
        _serve_until_stopped(listener)
    return listener


def _serve_until_stopped(listener: Listener) -> None:
    """Wait in this thread until Ctrl-C, SIGTERM (when this is the main thread) or a stop
    request, then stop the listener; SIGTERM's previous handler is put back afterwards."""
    in_main_thread = threading.current_thread() is threading.main_thread()
    previous: Any = None
    if in_main_thread:
        previous = signal.signal(signal.SIGTERM, lambda signum, frame: listener.request_stop())
    try:
        listener.wait()
    finally:
        listener.stop()
        if in_main_thread:
            signal.signal(signal.SIGTERM, previous if previous is not None else signal.SIG_DFL)
