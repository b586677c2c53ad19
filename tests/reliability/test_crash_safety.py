"""Crash safety: the scanner and the listener killed with SIGKILL mid-batch, then restarted.

An acknowledged instance is one the store committed: for a scan, a committed batch; for the
listener, an instance whose C-STORE the sender saw answered success (the listener answers once
the object is committed to its spool, and stores it from there: after a restart, when killed
first). Each must be stored exactly once after the kill (and the listener's restart); nothing
half-stored may remain (an object without its events); a re-run stores the rest, every instance
once, without duplicates.
"""

from __future__ import annotations

import os
import signal
import sqlite3
import threading
import time
from pathlib import Path

import pytest
from corpus import dx_header, encode
from peers import free_port, wait_for_tcp
from procs import (
    SharedStore,
    beamaudit_process,
    counts,
    shared_store,
    spool_of,
    wait_spool_drained,
)
from pynetdicom import AE

from beamaudit.api.intake.scanning import BATCH_SIZE
from beamaudit.ingest.sender import open_association

N_SCAN = BATCH_SIZE * 3 + 57  # several batches and a partial one
N_SEND = 150  # more than a fast listener acknowledges between the 20th answer and the kill
DX_PRESENTATION = "1.2.840.10008.5.1.4.1.1.1.1"
EXPLICIT_LE = "1.2.840.10008.1.2.1"


def _export(folder: Path, n: int, prefix: str) -> list[str]:
    folder.mkdir(parents=True)
    uids = []
    for i in range(n):
        ds = dx_header(f"{prefix}-{i}", StationName=f"ROOM-{i % 3}")
        (folder / f"IM{i:05d}").write_bytes(encode(ds))
        uids.append(str(ds.SOPInstanceUID))
    return uids


def _wait_for(predicate, timeout_s: float, what: str, process=None) -> None:  # type: ignore[no-untyped-def]
    deadline = time.monotonic() + timeout_s
    while time.monotonic() < deadline:
        if predicate():
            return
        if process is not None and process.poll() is not None:
            pytest.fail(f"the process ended (exit {process.returncode}) before {what}")
        time.sleep(0.02)
    pytest.fail(f"timed out waiting for {what}")


@pytest.mark.slow
@pytest.mark.parametrize(
    "backend", ["sqlite", pytest.param("postgresql", marks=pytest.mark.postgres)]
)
def test_scanner_killed_mid_batch_keeps_whole_batches_and_a_rerun_completes(
    backend: str, tmp_path: Path
) -> None:
    folder = tmp_path / "export"
    uids = _export(folder, N_SCAN, "scan")
    log = tmp_path / "scan.log"
    with shared_store(backend, tmp_path) as store:
        with beamaudit_process(["scan", str(folder), "--json"], store, log) as scanner:
            # kill it once the first batch is committed, while the next one is being stored
            _wait_for(lambda: counts(store)["objects"] >= BATCH_SIZE, 120, "a first batch",
                      scanner)  # fmt: skip
            helpers = _descendants(scanner.pid)  # the fork server and its parser processes
            assert helpers, "the scan started no parser process"
            os.kill(scanner.pid, signal.SIGKILL)
            scanner.wait(timeout=30)
        assert scanner.returncode == -signal.SIGKILL
        # the scan's parser processes and fork server end with it (each looks every second)
        _wait_for(lambda: not any(_alive(pid) for pid in helpers), 30, "the parsers to end")
        after_kill = counts(store)
        assert after_kill["objects"] % BATCH_SIZE == 0  # a batch is one transaction
        assert 0 < after_kill["objects"] < N_SCAN
        assert after_kill["distinct"] == after_kill["objects"]
        assert after_kill["objects_without_events"] == 0
        assert after_kill["events"] == after_kill["objects"]  # one exposure per header
        # the re-run stores the rest; what was stored is a duplicate, never a second row
        with beamaudit_process(["scan", str(folder), "--json"], store, log) as rerun:
            assert rerun.wait(timeout=240) == 0, log.read_text()[-3000:]
        final = counts(store)
        assert sorted(final["uids"]) == sorted(uids)
        assert final["events"] == N_SCAN
        assert final["objects_without_events"] == 0
        assert final["errors"] == 0


def _descendants(pid: int) -> list[int]:
    """The processes below ``pid`` (Linux /proc), children before grandchildren."""
    found: list[int] = []
    parents = [pid]
    while parents:
        parent = parents.pop(0)
        try:
            children = Path(f"/proc/{parent}/task/{parent}/children").read_text().split()
        except OSError:
            continue
        found += [int(c) for c in children]
        parents += [int(c) for c in children]
    return found


def _alive(pid: int) -> bool:
    try:
        state = Path(f"/proc/{pid}/stat").read_text().rsplit(")", 1)[1].split()[0]
    except OSError:
        return False
    return state != "Z"  # a zombie has ended; its new parent reaps it


def _spooled_uids(store: SharedStore, port: int) -> list[str]:
    path = spool_of(store, port)
    if not path.exists():
        return []
    conn = sqlite3.connect(f"file:{path}?mode=ro", uri=True)
    try:
        return [row[0] for row in conn.execute("SELECT sop_instance_uid FROM received")]
    finally:
        conn.close()


def _send_all(port: int, datasets, acknowledged: list[str], answered: list[str]) -> None:  # type: ignore[no-untyped-def]
    """Send every data set on one association until it breaks; note what was answered."""
    ae = AE(ae_title="CRASHTEST")
    ae.add_requested_context(DX_PRESENTATION, EXPLICIT_LE)
    assoc = open_association(ae, "127.0.0.1", port, ae_title="BEAMAUDIT")
    # pynetdicom leaves the socket of an association whose peer was killed to the garbage
    # collector: keep it, to close it here
    raw = assoc.dul.socket.socket if assoc.dul.socket is not None else None
    if not assoc.is_established:
        return
    try:
        for ds in datasets:
            if not assoc.is_established:
                return
            status = assoc.send_c_store(ds)
            if "Status" not in status:  # no answer: the listener is gone
                return
            answered.append(str(ds.SOPInstanceUID))
            if status.Status == 0x0000:
                acknowledged.append(str(ds.SOPInstanceUID))
    finally:
        if assoc.is_established:
            assoc.release()
        if raw is not None:
            raw.close()


@pytest.mark.slow
@pytest.mark.parametrize(
    "backend", ["sqlite", pytest.param("postgresql", marks=pytest.mark.postgres)]
)
def test_listener_killed_mid_association_keeps_every_acknowledged_instance_once(
    backend: str, tmp_path: Path
) -> None:
    datasets = [dx_header(f"send-{i}", StationName=f"ROOM-{i % 3}") for i in range(N_SEND)]
    all_uids = sorted(str(ds.SOPInstanceUID) for ds in datasets)
    log = tmp_path / "listen.log"
    with shared_store(backend, tmp_path) as store:
        port = free_port()
        args = ["listen", "--host", "127.0.0.1", "--port", str(port)]
        acknowledged: list[str] = []
        answered: list[str] = []
        with beamaudit_process(args, store, log) as listener:
            assert wait_for_tcp(port, timeout_s=60), log.read_text()[-3000:]
            sender = threading.Thread(
                target=_send_all, args=(port, datasets, acknowledged, answered), daemon=True
            )
            sender.start()
            _wait_for(lambda: len(acknowledged) >= 20, 120, "20 acknowledged instances",
                      listener)  # fmt: skip
            os.kill(listener.pid, signal.SIGKILL)  # mid-association, objects in flight
            listener.wait(timeout=30)
            sender.join(timeout=60)
        assert not sender.is_alive()
        assert 20 <= len(acknowledged) < N_SEND
        # the listener answers once an object is in its spool and stores it after: every
        # acknowledged instance is in the store or the spool; nothing is half-stored. (Its
        # worker process may finish a batch meanwhile: stored, then deleted from the spool,
        # so the spool is read first.)
        spooled = _spooled_uids(store, port)
        after_kill = counts(store)
        assert after_kill["distinct"] == len(after_kill["uids"])
        assert after_kill["objects_without_events"] == 0
        assert set(acknowledged) <= set(after_kill["uids"]) | set(spooled)
        acknowledged_again: list[str] = []
        with beamaudit_process(args, store, log) as listener:
            assert wait_for_tcp(port, timeout_s=60), log.read_text()[-3000:]
            wait_spool_drained(store, port)  # the restarted listener stores what is spooled
            restarted = counts(store)
            stored = restarted["uids"]
            assert restarted["distinct"] == len(stored)
            # every acknowledged instance is stored, once; at most the one in flight beyond them
            assert set(acknowledged) <= set(stored)
            assert len(stored) - len(acknowledged) <= 1
            assert restarted["objects_without_events"] == 0
            # the sender sends everything again: duplicates are success
            _send_all(port, datasets, acknowledged_again, [])
            wait_spool_drained(store, port)
        assert sorted(acknowledged_again) == all_uids
        final = counts(store)
        assert sorted(final["uids"]) == all_uids
        assert final["events"] == N_SEND
        assert final["errors"] == 0
