"""A sender keeps every C-STORE response, however its threads are scheduled.

pynetdicom's requestor reactor can take a response off the queue while ``send_c_store`` waits
for it (see ``ingest/sender.py``). On a loaded machine that happens now and then; here the
interleaving that loses it is forced every time: the reactor is held just past its checkpoint
until a request is under way (a thread preempted there), and the sending thread is held after
its request went out, so the response lands while only the reactor is looking. The peer is a
bare pynetdicom SCP on loopback that answers success (PS3.4 Table B.2-1: 0x0000).
"""

from __future__ import annotations

import threading
import time
from collections.abc import Iterator
from typing import Any

import pytest
from peers import free_port
from pydicom.dataset import Dataset, FileMetaDataset
from pydicom.uid import ExplicitVRLittleEndian, generate_uid
from pynetdicom import AE, evt
from pynetdicom.association import Association

from beamaudit.ingest.sender import keep_responses, open_association

DX_PRESENTATION = "1.2.840.10008.5.1.4.1.1.1.1"  # PS3.4 Table B.5-1


@pytest.fixture
def scp_port() -> Iterator[int]:
    ae = AE("BARESCP")
    ae.add_supported_context(DX_PRESENTATION, ExplicitVRLittleEndian)
    port = free_port()
    server = ae.start_server(
        ("127.0.0.1", port), block=False, evt_handlers=[(evt.EVT_C_STORE, lambda event: 0)]
    )
    try:
        yield port
    finally:
        server.shutdown()


def _instance(i: int) -> Dataset:
    ds = Dataset()
    ds.SOPClassUID = DX_PRESENTATION
    ds.SOPInstanceUID = generate_uid()
    ds.PatientID = f"SENDER-{i}"
    ds.file_meta = FileMetaDataset()
    ds.file_meta.TransferSyntaxUID = ExplicitVRLittleEndian
    return ds


class _HeldCheckpoint(threading.Event):
    """The reactor's checkpoint; the reactor, once past it, is held until a request starts."""

    def __init__(self, reactor: threading.Thread) -> None:
        super().__init__()
        self.set()
        self._reactor = reactor

    def wait(self, timeout: float | None = None) -> bool:
        passed = super().wait(timeout)
        if threading.current_thread() is self._reactor:
            deadline = time.monotonic() + 2
            while self.is_set() and time.monotonic() < deadline:
                time.sleep(0.0005)
            time.sleep(0.005)  # the sender has seen "paused" and sends
        return passed


def _force_the_interleaving(assoc: Association) -> None:
    assoc._reactor_checkpoint = _HeldCheckpoint(assoc)
    dimse = assoc.dimse
    get_msg, send_msg = dimse.get_msg, dimse.send_msg

    def reactor_looks_first(block: bool = False) -> Any:
        if not block and threading.current_thread() is assoc:
            try:
                return dimse.msg_queue.get(block=True, timeout=0.5)
            except Exception:  # queue.Empty: nothing came
                return None, None
        return get_msg(block)

    def sender_held_after_sending(primitive: Any, context_id: int) -> None:
        send_msg(primitive, context_id)
        time.sleep(0.05)

    dimse.get_msg = reactor_looks_first  # type: ignore[method-assign]
    dimse.send_msg = sender_held_after_sending  # type: ignore[method-assign]
    time.sleep(0.05)  # the reactor's next round reaches the held checkpoint


def _associate(port: int, *, keep: bool) -> Association:
    ae = AE("SENDER")
    ae.add_requested_context(DX_PRESENTATION, ExplicitVRLittleEndian)
    ae.dimse_timeout = 1
    assoc = ae.associate("127.0.0.1", port, ae_title="BARESCP")
    assert assoc.is_established
    if keep:
        keep_responses(assoc)
    _force_the_interleaving(assoc)
    return assoc


def test_the_forced_interleaving_loses_a_bare_associations_response(scp_port: int) -> None:
    # if this starts to pass, pynetdicom closed the race itself and keep_responses can go
    assoc = _associate(scp_port, keep=False)
    try:
        status = assoc.send_c_store(_instance(0))
        assert "Status" not in status
        assert assoc.is_aborted
    finally:
        if assoc.is_established:
            assoc.release()


def test_kept_responses_all_arrive_under_the_forced_interleaving(scp_port: int) -> None:
    assoc = _associate(scp_port, keep=True)
    try:
        statuses = [int(assoc.send_c_store(_instance(i)).Status) for i in range(10)]
    finally:
        assoc.release()
    assert statuses == [0] * 10
    assert assoc.is_released


def test_open_association_keeps_responses_and_sends_without_delay(scp_port: int) -> None:
    import socket

    ae = AE("SENDER")
    ae.add_requested_context(DX_PRESENTATION, ExplicitVRLittleEndian)
    assoc = open_association(ae, "127.0.0.1", scp_port, ae_title="BARESCP")
    assert assoc.is_established
    try:
        sock = assoc.dul.socket.socket  # type: ignore[union-attr]
        assert sock is not None
        assert sock.getsockopt(socket.IPPROTO_TCP, socket.TCP_NODELAY) == 1
        assert int(assoc.send_c_store(_instance(0)).Status) == 0
    finally:
        assoc.release()
