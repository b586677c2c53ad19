"""The C-STORE listener under a hostile sender: idle connections and associations, huge objects.

Before: 10 idle TCP connections (or 10 idle associations from an allowed AE title) made the
listener refuse every legitimate association for as long as they stayed, and one 300 MB object
took it to 1.5 GB. Now bare connections hold no association place and are closed after
``request_timeout_s``, one AE title holds at most ``max_associations_per_ae`` places, idle
associations are closed after ``network_timeout_s``, an object over ``max_object_bytes`` aborts
its association, and objects are received into temporary files. Loopback only; invented data.
"""

from __future__ import annotations

import glob
import os
import socket
import tempfile
import threading
import time
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path

import pytest
from net_samples import build_dose_sr
from pynetdicom import AE

from beamaudit.ingest.listener import (
    DOSE_REPORT_STORAGE_SOP_CLASSES,
    ListenerConfig,
    ListenerConfigError,
    ReceivedObject,
    StoreOutcome,
    start_listener,
)
from beamaudit.ingest.sender import open_association

XRAY_DOSE_SR = next(iter(DOSE_REPORT_STORAGE_SOP_CLASSES))
EXPLICIT_LE = "1.2.840.10008.1.2.1"


@contextmanager
def listening(**settings: object) -> Iterator[tuple[int, list[ReceivedObject]]]:
    received: list[ReceivedObject] = []
    lock = threading.Lock()

    def handler(obj: ReceivedObject) -> StoreOutcome:
        with lock:
            received.append(obj)
        return StoreOutcome.stored()

    config = ListenerConfig(port=0, **settings)  # type: ignore[arg-type]
    with start_listener(config, handler) as listener:
        yield listener.port, received


def _send(port: int, calling: str = "CT_MAIN", **sr: object) -> int | None:
    ae = AE(ae_title=calling)
    ae.add_requested_context(XRAY_DOSE_SR, EXPLICIT_LE)
    assoc = open_association(ae, "127.0.0.1", port, ae_title="BEAMAUDIT")
    if not assoc.is_established:
        return None
    raw = assoc.dul.socket.socket if assoc.dul.socket else None
    status = assoc.send_c_store(build_dose_sr(**sr))
    assoc.release()
    if raw is not None:
        raw.close()  # pynetdicom leaves it open when the listener closed first
    return int(status.Status) if "Status" in status else None


def test_a_legitimate_sender_is_served_while_ten_idle_connections_are_held() -> None:
    with listening(max_associations=10) as (port, received):
        idle = [socket.create_connection(("127.0.0.1", port)) for _ in range(10)]
        try:
            time.sleep(0.3)
            assert _send(port) == 0
        finally:
            for s in idle:
                s.close()
    assert len(received) == 1


def test_idle_associations_of_one_ae_title_leave_room_for_the_others() -> None:
    with listening(max_associations=10, max_associations_per_ae=4) as (port, received):
        held = []
        for _ in range(10):
            ae = AE(ae_title="DR_ROOM1")
            ae.add_requested_context(XRAY_DOSE_SR, EXPLICIT_LE)
            held.append(open_association(ae, "127.0.0.1", port, ae_title="BEAMAUDIT"))
        try:
            assert sum(a.is_established for a in held) == 4  # the rest refused, transient
            assert _send(port, calling="CT_MAIN") == 0
        finally:
            for a in held:
                if a.is_established:
                    a.release()
    assert len(received) == 1


def test_connections_that_never_ask_are_closed_after_the_request_timeout() -> None:
    with listening(request_timeout_s=0.5) as (port, _):
        conn = socket.create_connection(("127.0.0.1", port))
        conn.settimeout(10)
        start = time.monotonic()
        assert conn.recv(1) == b""  # closed by the listener
        assert time.monotonic() - start < 9
        conn.close()


def test_idle_associations_are_closed_after_the_network_timeout() -> None:
    with listening(network_timeout_s=0.5) as (port, _):
        ae = AE(ae_title="DR_ROOM1")
        ae.add_requested_context(XRAY_DOSE_SR, EXPLICIT_LE)
        assoc = open_association(ae, "127.0.0.1", port, ae_title="BEAMAUDIT")
        assert assoc.is_established
        deadline = time.monotonic() + 10
        while assoc.is_established and time.monotonic() < deadline:
            time.sleep(0.1)
        assert not assoc.is_established


def test_an_association_is_cut_off_at_its_whole_lifetime() -> None:
    with listening(association_timeout_s=1.0, network_timeout_s=30) as (port, _):
        ae = AE(ae_title="DR_ROOM1")
        ae.add_requested_context("1.2.840.10008.1.1")  # Verification (C-ECHO), PS3.4 Annex A
        assoc = open_association(ae, "127.0.0.1", port, ae_title="BEAMAUDIT")
        assert assoc.is_established
        deadline = time.monotonic() + 15
        while assoc.is_established and time.monotonic() < deadline:
            assoc.send_c_echo()  # busy, never idle: only the lifetime ends it
            time.sleep(0.2)
        assert assoc.is_aborted or not assoc.is_established


def test_an_object_over_the_size_limit_aborts_its_association_and_leaves_no_file(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    # pynetdicom receives a large object into a temporary file (tempfile.NamedTemporaryFile):
    # here in a folder of this test's own, so that other tests running at the same time
    # (pytest -n) cannot add files to what is compared
    monkeypatch.setattr(tempfile, "tempdir", str(tmp_path))
    before = set(glob.glob(os.path.join(tempfile.gettempdir(), "*.dcm")))
    assert before == set()
    with listening(max_object_bytes=256 * 1024) as (port, received):
        ae = AE(ae_title="CT_MAIN")
        ae.add_requested_context(XRAY_DOSE_SR, EXPLICIT_LE)
        assoc = open_association(ae, "127.0.0.1", port, ae_title="BEAMAUDIT")
        raw = assoc.dul.socket.socket  # pynetdicom leaves it open when the peer cut it off
        big = build_dose_sr()
        big.TextValue = "x" * (2 * 1024 * 1024)  # 2 MiB in one object
        status = assoc.send_c_store(big)
        assert not status or "Status" not in status  # no answer: the association was aborted
        if assoc.is_established:
            assoc.abort()
        raw.close()
        assert _send(port) == 0  # the listener serves the next sender
    assert len(received) == 1
    time.sleep(0.2)
    assert set(glob.glob(os.path.join(tempfile.gettempdir(), "*.dcm"))) <= before


def test_objects_in_flight_are_bounded() -> None:
    gate = threading.Event()
    running = []
    lock = threading.Lock()

    def slow(obj: ReceivedObject) -> StoreOutcome:
        with lock:
            running.append(obj.sop_instance_uid)
        gate.wait(10)
        return StoreOutcome.stored()

    # refused after 5 s of waiting; the two stored ones are answered at 6 s, well within 10 s
    config = ListenerConfig(port=0, max_objects_in_flight=2, network_timeout_s=10.0)
    with start_listener(config, slow) as listener:
        statuses: list[int | None] = []
        threads = [
            threading.Thread(target=lambda i=i: statuses.append(_send(listener.port, f"AE{i}")))
            for i in range(4)
        ]
        for t in threads:
            t.start()
        time.sleep(6.0)
        assert len(running) == 2  # two in the handler; the others waited, then were refused
        gate.set()
        for t in threads:
            t.join(20)
    assert sorted(s for s in statuses if s is not None) == [0, 0, 0xA700, 0xA700]


@pytest.mark.parametrize(
    "bad",
    [
        {"request_timeout_s": 0},
        {"association_timeout_s": -1},
        {"max_associations_per_ae": 0},
        {"max_objects_in_flight": 0},
        {"max_object_bytes": 0},
    ],
)
def test_limits_must_be_positive(bad: dict[str, object]) -> None:
    with pytest.raises(ListenerConfigError):
        ListenerConfig(**bad)  # type: ignore[arg-type]
