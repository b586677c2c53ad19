"""The listener's spool (``api/intake/spooling.py``): group commit, the worker, a restart.

The store is each backend's (the ``store`` fixture); the spool is a SQLite file of its own.
Objects are the reliability corpus's invented DX headers.
"""

from __future__ import annotations

import os
import stat
import threading
from pathlib import Path

import pytest
from corpus import dx_header, encode
from sqlalchemy import func, select
from sqlalchemy.exc import OperationalError

from beamaudit.api.cli.listen import listen_spool_dir
from beamaudit.api.intake.pipeline import Pipeline
from beamaudit.api.intake.spooling import (
    Spool,
    SpooledObject,
    SpoolWorker,
    make_spooling_handler,
    spool_path,
)
from beamaudit.api.settings import Settings
from beamaudit.api.store import models as m
from beamaudit.ingest.listener import ReceivedObject, StoreStatus
from beamaudit.ingest.pseudonym import Pseudonymiser

KEY = b"spool-test-key-of-32-bytes-long!"


def _spooled(name: str, **values: object) -> SpooledObject:
    ds = dx_header(name, **values)
    return SpooledObject(
        calling_ae_title="DR_ROOM1",
        peer_host="127.0.0.1",
        sop_class_uid=str(ds.SOPClassUID),
        sop_instance_uid=str(ds.SOPInstanceUID),
        encoded=encode(ds),
    )


def _received(name: str) -> ReceivedObject:
    obj = _spooled(name)
    return ReceivedObject(
        dataset=dx_header(name), encoded=obj.encoded, sop_class_uid=obj.sop_class_uid,
        sop_instance_uid=obj.sop_instance_uid, transfer_syntax_uid="1.2.840.10008.1.2.1",
        calling_ae_title="DR_ROOM1", called_ae_title="BEAMAUDIT", peer_address=("127.0.0.1", 4000),
    )  # fmt: skip


def _stored(store) -> list[str]:
    with store.session_factory() as session:
        return list(session.scalars(select(m.SourceObjectRow.sop_instance_uid)).all())


def _errors(store) -> list[m.IngestError]:
    with store.session_factory() as session:
        return list(session.scalars(select(m.IngestError)).all())


def test_puts_from_many_threads_are_all_committed_in_shared_groups(tmp_path: Path) -> None:
    spool = Spool(tmp_path / "spool.sqlite")
    commits: list[int] = []
    write = spool._write

    def counting_write(rows: list[SpooledObject]) -> None:
        commits.append(len(rows))
        write(rows)

    spool._write = counting_write  # type: ignore[method-assign]
    objects = [_spooled(f"group-{t}-{i}") for t in range(8) for i in range(25)]

    def put_all(part: list[SpooledObject]) -> None:
        for obj in part:
            spool.put(obj)

    threads = [threading.Thread(target=put_all, args=(objects[t::8],)) for t in range(8)]
    for thread in threads:
        thread.start()
    for thread in threads:
        thread.join(timeout=60)
    assert spool.pending == 200 == sum(commits)
    assert len(commits) <= 200  # one commit per group; groups of several when threads overlap
    taken = spool.take(limit=500)
    assert sorted(o.sop_instance_uid for o in taken) == sorted(o.sop_instance_uid for o in objects)
    spool.close()
    # a new spool on the same file (a restarted listener) finds every committed object
    again = Spool(tmp_path / "spool.sqlite")
    assert again.pending == 200
    again.done(again.take(limit=500))
    assert again.pending == 0
    again.close()
    # it holds patient data until stored: readable by its owner only
    assert stat.S_IMODE(os.stat(tmp_path / "spool.sqlite").st_mode) == 0o600


def test_the_worker_stores_what_a_killed_listener_left_once(store, tmp_path: Path) -> None:
    path = tmp_path / "spool.sqlite"
    first = Spool(path)
    for i in range(5):
        first.put(_spooled(f"left-{i}"))
    first.put(_spooled("left-bad", KVP="900"))  # kVp out of range: recorded, not stored
    first.close()  # (the listener was killed: nothing stored yet)
    spool = Spool(path)
    pipeline = Pipeline(store.session_factory)
    _, store_batch, give_up = make_spooling_handler(
        spool, pipeline, Pseudonymiser(KEY), max_spooled=100
    )
    worker = SpoolWorker(spool, store_batch, give_up)
    # a crash after the store's commit but before the spool's delete: stored again, once
    store_batch(spool.take())
    assert worker.drain()
    assert spool.pending == 0
    expected = sorted(_spooled(f"left-{i}").sop_instance_uid for i in range(5))
    assert sorted(_stored(store)) == expected  # each once: the second pass found duplicates
    # the unusable object is recorded on each pass (the one known double after such a crash)
    errors = _errors(store)
    assert [(e.code, e.received_via) for e in errors] == [("out_of_range", "listen")] * 2
    spool.close()


def test_a_store_that_fails_leaves_the_objects_spooled(tmp_path: Path) -> None:
    spool = Spool(tmp_path / "spool.sqlite")
    for i in range(3):
        spool.put(_spooled(f"down-{i}"))
    calls: list[int] = []

    def store_unavailable(batch: list[SpooledObject]) -> None:
        calls.append(len(batch))
        raise OperationalError("INSERT", {}, Exception("the database is down"))

    worker = SpoolWorker(spool, store_unavailable, lambda obj, exc: pytest.fail("given up"))
    assert worker.drain() is False
    assert calls == [3]
    assert spool.pending == 3 and len(spool.take()) == 3
    spool.close()


def test_one_object_that_cannot_be_stored_does_not_hold_up_the_others(tmp_path: Path) -> None:
    spool = Spool(tmp_path / "spool.sqlite")
    objects = [_spooled(f"poison-{i}") for i in range(4)]
    for obj in objects:
        spool.put(obj)
    stored: list[str] = []
    given_up: list[tuple[str, str]] = []

    def store_batch(batch: list[SpooledObject]) -> None:
        if any(o.sop_instance_uid == objects[2].sop_instance_uid for o in batch):
            raise RuntimeError("a bug in one object's completion")
        stored.extend(o.sop_instance_uid for o in batch)

    worker = SpoolWorker(
        spool, store_batch, lambda obj, exc: given_up.append((obj.sop_instance_uid, str(exc)))
    )
    assert worker.drain()
    assert sorted(stored) == sorted(o.sop_instance_uid for i, o in enumerate(objects) if i != 2)
    assert given_up == [(objects[2].sop_instance_uid, "a bug in one object's completion")]
    assert spool.pending == 0
    spool.close()


def test_the_handler_answers_success_once_spooled_and_refuses_past_the_limit(
    store, tmp_path: Path
) -> None:
    spool = Spool(tmp_path / "spool.sqlite")
    handler, store_batch, give_up = make_spooling_handler(
        spool, Pipeline(store.session_factory), Pseudonymiser(KEY), max_spooled=2
    )
    assert handler(_received("limit-1")).ok
    assert handler(_received("limit-2")).ok
    refused = handler(_received("limit-3"))
    assert not refused.ok and refused.status == StoreStatus.OUT_OF_RESOURCES
    assert _stored(store) == []  # answered, not stored yet
    SpoolWorker(spool, store_batch, give_up).drain()
    assert len(_stored(store)) == 2
    assert handler(_received("limit-3")).ok  # room again
    spool.close()


def test_the_worker_thread_stores_as_objects_arrive_and_close_drains(store, tmp_path: Path) -> None:
    spool = Spool(tmp_path / "spool.sqlite")
    handler, store_batch, give_up = make_spooling_handler(
        spool, Pipeline(store.session_factory), Pseudonymiser(KEY), max_spooled=1000
    )
    worker = SpoolWorker(spool, store_batch, give_up).start()
    for i in range(30):
        assert handler(_received(f"thread-{i}")).ok
    worker.close()
    assert spool.pending == 0
    with store.session_factory() as session:
        assert session.scalar(select(func.count()).select_from(m.SourceObjectRow)) == 30
    spool.close()


def test_the_spool_file_is_one_per_port_and_database(tmp_path: Path) -> None:
    url = "postgresql+psycopg://beamaudit@db.example.org/beamaudit"
    assert spool_path(tmp_path, url, 11112) == spool_path(tmp_path, url, 11112)
    assert spool_path(tmp_path, url, 11112) != spool_path(tmp_path, url, 11113)
    assert spool_path(tmp_path, url, 11112) != spool_path(tmp_path, url + "2", 11112)
    db = tmp_path / "data" / "store.db"
    assert listen_spool_dir(Settings(database_url=f"sqlite:///{db}")) == db.parent
    key = tmp_path / "keys" / "pseudonym.key"
    assert listen_spool_dir(Settings(database_url=url, secret_key_path=key)) == key.parent
    chosen = tmp_path / "spool"
    assert (
        listen_spool_dir(Settings(database_url=url, listener={"spool_dir": str(chosen)})) == chosen
    )
