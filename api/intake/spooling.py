"""The listener's spool: received objects made durable before their success is sent, stored after.

``beamaudit listen`` answers a C-STORE once the object is in the spool, a SQLite file of its own
(WAL), and a worker (under ``beamaudit listen`` a process of its own,
``api/intake/spool_worker.py``; a thread with :meth:`SpoolWorker.start`) parses, stores and
completes the spooled objects in batches, then deletes them from the spool. An acknowledged
object is therefore never lost: a listener killed after the answer finds the object in its spool
when it starts again, and stores it then (the store's idempotence by SOP Instance UID makes a
second pass over an object already stored a duplicate, never a second row).

- **Group commit.** :meth:`Spool.put` returns once the object's row is committed. The thread
  that finds no commit in progress commits every row queued so far in one transaction (it leads);
  rows that arrive meanwhile wait and go in the next transaction. With several associations the
  commits, and so the fsyncs under ``synchronous=FULL``, are shared.
- **Durability.** ``synchronous`` is the SQLite setting of the spool's commits: ``NORMAL`` (the
  default, as the SQLite store itself) keeps a committed row through a crash of the process;
  ``FULL`` through a crash of the machine too, at one fsync per group.
- **The worker** takes up to :data:`BATCH` rows oldest first and stores them with
  :meth:`Pipeline.store_many` (one transaction, the batch path of a folder scan). What cannot be
  used (unparseable, not dose-bearing, another object's UID with other content) is recorded as an
  ingest error, as the synchronous handler records it; its C-STORE was answered success already.
  A store that fails (database down) leaves the rows in the spool; the worker tries again later.
  Each CT image stored is then given to the :class:`~beamaudit.api.intake.ct_sizing.
  ArrivalSizer` (patient size: a few axial images and calibrated localizers measured from the
  spooled bytes, their pixels dropped).
- **The file** is named after the listener's port and its database
  (:func:`spool_path`), so a listener started again on the same port and database finds it, and
  holds received objects as sent (patient identifiers included) until stored: it is created
  readable by its owner only, and deleted rows are overwritten (``secure_delete``).
"""

from __future__ import annotations

import contextlib
import hashlib
import io
import logging
import os
import sqlite3
import threading
import time
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path
from typing import Literal

from sqlalchemy.exc import SQLAlchemyError

from beamaudit.api.errors import ApiError
from beamaudit.api.intake.ct_sizing import CT_IMAGE_CLASSES, ArrivalSizer
from beamaudit.api.intake.pipeline import Pipeline
from beamaudit.api.intake.receiving import StoreHandler, record_rejected
from beamaudit.ingest.errors import IngestError
from beamaudit.ingest.events import ParseResult
from beamaudit.ingest.listener import ReceivedObject, RejectedObject, StoreOutcome
from beamaudit.ingest.pseudonym import Pseudonymiser

__all__ = [
    "BATCH",
    "Spool",
    "SpoolError",
    "SpoolWorker",
    "SpooledObject",
    "make_spooling_handler",
    "spool_path",
]

log = logging.getLogger(__name__)

#: spooled objects stored per transaction by the worker
BATCH = 200
#: seconds the worker waits before trying a failed store again
_RETRY_S = 5.0
#: a pause in arrivals after which the worker stores what it gathered, and the longest it
#: gathers (the receiving threads keep the processor while objects stream in)
_LULL_S, _GATHER_S = 0.05, 1.0
#: seconds a count of the spool's objects is used before the file is counted again
_COUNT_EVERY_S = 0.5

Synchronous = Literal["normal", "full"]

_SCHEMA = """
CREATE TABLE IF NOT EXISTS received (
    id INTEGER PRIMARY KEY,
    received_at REAL NOT NULL,
    calling_ae_title TEXT NOT NULL,
    peer_host TEXT NOT NULL,
    sop_class_uid TEXT NOT NULL,
    sop_instance_uid TEXT NOT NULL,
    encoded BLOB NOT NULL
)
"""


class SpoolError(ApiError):
    """The spool cannot be opened or written (disk full, no permission)."""


@dataclass(frozen=True, slots=True)
class SpooledObject:
    """One received object as spooled: what storing it needs, nothing decoded."""

    calling_ae_title: str
    peer_host: str
    sop_class_uid: str
    sop_instance_uid: str
    #: Part 10 bytes: up to Pixel Data, or whole for a CT image (its size may be measured)
    encoded: bytes
    received_at: float = 0.0
    id: int = 0

    @property
    def source(self) -> str:
        """The ingest source as the synchronous handler names it."""
        return f"c-store:{self.calling_ae_title}@{self.peer_host}"


def spool_path(directory: Path, database_url: str, port: int) -> Path:
    """The spool file of a listener on ``port`` storing into ``database_url``: one per port and
    database, so a restarted listener finds what its predecessor acknowledged."""
    digest = hashlib.sha256(database_url.encode()).hexdigest()[:12]
    return directory / f"listen-spool-{port}-{digest}.sqlite"


class _Group:
    """Rows committed in one transaction."""

    __slots__ = ("done", "error", "rows")

    def __init__(self) -> None:
        self.rows: list[SpooledObject] = []
        self.done = False
        self.error: BaseException | None = None


class Spool:
    """The durable queue of received objects (a SQLite file in WAL mode).

    :meth:`put` is called from the associations' threads; :meth:`take`, :meth:`done` and
    :meth:`pending` from the worker.
    """

    def __init__(self, path: Path, *, synchronous: Synchronous = "normal") -> None:
        self.path = path
        try:
            path.parent.mkdir(parents=True, exist_ok=True)
            if not path.exists():
                os.close(os.open(path, os.O_CREAT | os.O_WRONLY, 0o600))
            self._writer = self._connect(synchronous)
            self._writer.execute(_SCHEMA)
            self._reader = self._connect(synchronous)
        except (OSError, sqlite3.Error) as exc:
            raise SpoolError(f"cannot open the listener's spool {path}: {exc}") from exc
        self._cond = threading.Condition()
        self._open = _Group()
        self._committing = False
        self._reader_lock = threading.Lock()
        self._pending = self.count()
        self._counted_at = time.monotonic()

    def _connect(self, synchronous: Synchronous) -> sqlite3.Connection:
        conn = sqlite3.connect(
            self.path, isolation_level=None, check_same_thread=False, timeout=30.0
        )
        conn.execute("PRAGMA journal_mode=WAL")
        conn.execute(f"PRAGMA synchronous={synchronous.upper()}")
        conn.execute("PRAGMA secure_delete=ON")
        return conn

    def count(self) -> int:
        """Objects spooled and not yet stored, counted in the file now."""
        with self._reader_lock:
            return int(self._reader.execute("SELECT count(*) FROM received").fetchone()[0])

    @property
    def pending(self) -> int:
        """Objects spooled and not yet stored: counted in the file at most
        :data:`_COUNT_EVERY_S` ago (another process's worker deletes), with this process's
        own puts and deletes since."""
        if time.monotonic() - self._counted_at > _COUNT_EVERY_S:
            self._counted_at = time.monotonic()
            with contextlib.suppress(sqlite3.Error):  # else the last count stands
                self._pending = self.count()
        return self._pending

    def put(self, obj: SpooledObject) -> None:
        """Spool ``obj``; returns once it is committed (raises :class:`SpoolError` if not)."""
        with self._cond:
            group = self._open
            group.rows.append(obj)
            while not group.done:
                if self._committing:
                    self._cond.wait()
                    continue
                batch, self._open = self._open, _Group()
                self._committing = True
                self._cond.release()
                try:
                    try:
                        self._write(batch.rows)
                    except BaseException as exc:  # every waiter of the group gets the failure
                        batch.error = exc
                finally:
                    self._cond.acquire()
                    batch.done = True
                    self._committing = False
                    self._cond.notify_all()
        if group.error is not None:
            raise SpoolError(f"spooling failed: {type(group.error).__name__}") from group.error

    def _write(self, rows: list[SpooledObject]) -> None:
        now = time.time()
        conn = self._writer
        conn.execute("BEGIN IMMEDIATE")
        try:
            conn.executemany(
                "INSERT INTO received (received_at, calling_ae_title, peer_host, sop_class_uid,"
                " sop_instance_uid, encoded) VALUES (?, ?, ?, ?, ?, ?)",
                [
                    (now, r.calling_ae_title, r.peer_host, r.sop_class_uid, r.sop_instance_uid,
                     r.encoded)
                    for r in rows
                ],
            )  # fmt: skip
            conn.execute("COMMIT")
        except BaseException:
            conn.execute("ROLLBACK")
            raise
        self._pending += len(rows)  # (under the commit's exclusivity)

    def take(self, limit: int = BATCH) -> list[SpooledObject]:
        """Up to ``limit`` spooled objects, oldest first (they stay spooled until :meth:`done`)."""
        with self._reader_lock:
            rows = self._reader.execute(
                "SELECT id, received_at, calling_ae_title, peer_host, sop_class_uid,"
                " sop_instance_uid, encoded FROM received ORDER BY id LIMIT ?",
                (limit,),
            ).fetchall()
        return [
            SpooledObject(
                id=row[0], received_at=row[1], calling_ae_title=row[2], peer_host=row[3],
                sop_class_uid=row[4], sop_instance_uid=row[5], encoded=bytes(row[6]),
            )
            for row in rows
        ]  # fmt: skip

    def done(self, objects: list[SpooledObject]) -> None:
        """Remove stored (or recorded as errors) objects from the spool."""
        if not objects:
            return
        conn = self._reader
        with self._reader_lock:
            conn.execute("BEGIN IMMEDIATE")
            try:
                conn.executemany("DELETE FROM received WHERE id = ?", [(o.id,) for o in objects])
                conn.execute("COMMIT")
            except BaseException:
                conn.execute("ROLLBACK")
                raise
            self._pending = max(0, self._pending - len(objects))

    def close(self) -> None:
        """Close the file (what is still spooled stays for the next start)."""
        with self._cond:
            self._writer.close()
            self._reader.close()


class SpoolWorker:
    """Stores what the spool holds, in batches: :meth:`run` in the calling thread (the worker
    process of ``beamaudit listen``), or :meth:`start` on a thread of its own.

    Parameters
    ----------
    spool : Spool
        The spool to drain.
    store_batch : callable
        Stores (or records as errors) a batch of spooled objects; raises ``SQLAlchemyError``
        when the store is unavailable (the batch then stays spooled and is tried again).
    give_up : callable
        Told of an object whose storing raised anything else, alone in its batch: it is recorded
        (as an ingest error) and leaves the spool, so that one object cannot stop the others.
    """

    def __init__(
        self,
        spool: Spool,
        store_batch: Callable[[list[SpooledObject]], None],
        give_up: Callable[[SpooledObject, Exception], None],
    ) -> None:
        self._spool = spool
        self._store_batch = store_batch
        self._give_up = give_up
        self._stop = threading.Event()
        self._thread = threading.Thread(target=self._run, name="spool-worker", daemon=True)

    def start(self) -> SpoolWorker:
        """Drain on a thread of this process (what an earlier run left spooled first)."""
        self._thread.start()
        return self

    def _run(self) -> None:
        self.run(self._stop)

    def run(self, stop: threading.Event) -> None:
        """Store what arrives until ``stop`` is set: the spool is looked at every
        :data:`_LULL_S`; objects that keep coming are gathered until they pause for that long,
        a batch is full, or :data:`_GATHER_S` has passed since the first (the receiving side
        keeps the processor while objects stream in), then stored as one batch."""
        while not stop.is_set():
            waiting = self._spool.count()
            if not waiting:
                stop.wait(_LULL_S)
                continue
            started = time.monotonic()
            while waiting < BATCH and time.monotonic() - started < _GATHER_S:
                if stop.wait(_LULL_S):
                    break
                now = self._spool.count()
                if now == waiting:
                    break
                waiting = now
            if self._store_next() is False:  # the store failed: wait, then try again
                stop.wait(_RETRY_S)

    def drain(self) -> bool:
        """Store everything spooled now; False when the store failed (rows stay spooled)."""
        while True:
            stored = self._store_next()
            if stored is None:
                return True
            if not stored:
                return False

    def _store_next(self) -> bool | None:
        """Store the oldest batch: True when done, False when the store failed (the batch stays
        spooled), None when the spool is empty."""
        batch = self._spool.take()
        if not batch:
            return None
        try:
            self._store_each(batch)
        except SQLAlchemyError as exc:
            log.error(
                "storing %d spooled objects failed (%s); they stay spooled, next try in %g s",
                len(batch), type(exc).__name__, _RETRY_S,
            )  # fmt: skip
            return False
        self._spool.done(batch)
        return True

    def _store_each(self, batch: list[SpooledObject]) -> None:
        """The batch in one go; after a failure other than the store's, one object at a time."""
        try:
            self._store_batch(batch)
            return
        except SQLAlchemyError:
            raise
        except Exception as exc:
            if len(batch) == 1:
                log.error("storing spooled %s failed: %s", batch[0].sop_instance_uid,
                          type(exc).__name__)  # fmt: skip
                self._give_up(batch[0], exc)
                return
        for obj in batch:
            self._store_each([obj])

    def close(self, timeout_s: float = 60.0) -> None:
        """Stop the thread, then store what is still spooled (the listener has stopped)."""
        self._stop.set()
        if self._thread.is_alive():
            self._thread.join(timeout_s)
        if not self.drain():
            log.error("%d received objects stay spooled until the next start", self._spool.pending)


def _spooled(received: ReceivedObject) -> SpooledObject:
    encoded = received.encoded
    if received.sop_class_uid in CT_IMAGE_CLASSES and received.received_path is not None:
        # the patient-size measurement may need this image's pixels: spool it whole
        with open(received.received_path, "rb") as fh:
            encoded = fh.read()
    return SpooledObject(
        calling_ae_title=received.calling_ae_title,
        peer_host=received.peer_address[0],
        sop_class_uid=received.sop_class_uid,
        sop_instance_uid=received.sop_instance_uid,
        encoded=encoded,
    )


def make_spooling_handler(
    spool: Spool,
    pipeline: Pipeline,
    pseudonymiser: Pseudonymiser,
    *,
    max_spooled: int,
    received_via: str = "listen",
    sizer: ArrivalSizer | None = None,
) -> tuple[
    StoreHandler,
    Callable[[list[SpooledObject]], None],
    Callable[[SpooledObject, Exception], None],
]:
    """The listener's handler that answers once an object is spooled, and the worker's batch
    store and its last resort (for :class:`SpoolWorker`). Past ``max_spooled`` objects waiting,
    new ones are refused (0xA700: the sender keeps them and tries again)."""
    from beamaudit.ingest.reader import read_bytes

    def handle(received: ReceivedObject) -> StoreOutcome:
        if spool.pending >= max_spooled:
            return StoreOutcome.refused("busy: too many received objects waiting; retry later")
        try:
            spool.put(_spooled(received))
        except (SpoolError, OSError) as exc:
            log.error("spooling %s failed: %s", received.sop_instance_uid, type(exc).__name__)
            return StoreOutcome.refused("the listener's spool is unavailable; retry later")
        return StoreOutcome.stored()

    def record(error: IngestError, obj: SpooledObject) -> None:
        pipeline.record_error(
            error, received_via=received_via, source=obj.source,
            sop_instance_uid=obj.sop_instance_uid,
        )  # fmt: skip

    def store_batch(batch: list[SpooledObject]) -> None:
        items: list[tuple[ParseResult, str | None, str | None]] = []
        parsed: list[SpooledObject] = []
        unusable: list[tuple[IngestError, SpooledObject]] = []
        for obj in batch:
            try:
                result = read_bytes(obj.encoded, pseudonymiser=pseudonymiser, source=obj.source)
            except IngestError as exc:
                unusable.append((exc, obj))
                continue
            except Exception as exc:  # a reader failure other than IngestError: recorded too
                log.error("parsing spooled %s failed: %s", obj.sop_instance_uid, type(exc).__name__)
                unusable.append(
                    (IngestError("bad_value", f"cannot be read ({type(exc).__name__})"), obj)
                )
                continue
            items.append((result, obj.source, None))
            parsed.append(obj)
        # stored first, then the errors recorded: a batch tried again records each error once
        outcomes = pipeline.store_many(items, received_via=received_via) if items else []
        for error, obj in unusable:
            log.warning("spooled %s not stored: %s: %s", obj.sop_instance_uid, error.code,
                        error.reason)  # fmt: skip
            record(error, obj)
        event_ids: list[int] = []
        for obj, (result, _, _), outcome in zip(parsed, items, outcomes, strict=True):
            if outcome.status == "conflict":
                record(IngestError("bad_value", outcome.reason or "conflict", obj.source), obj)
                log.warning("spooled %s not stored: %s", obj.sop_instance_uid, outcome.reason)
                continue
            event_ids.extend(outcome.event_ids)
            if sizer is not None and outcome.status == "stored":
                if result.source.sop_class_uid in CT_IMAGE_CLASSES:
                    _size(sizer, obj)
                else:
                    sizer.report_stored(result)
        if parsed:
            log.info("stored %d spooled objects (%d events)", len(parsed), len(event_ids))

    def give_up(obj: SpooledObject, exc: Exception) -> None:
        reason = f"received, but storing it failed ({type(exc).__name__}); send it again"
        record(IngestError("bad_value", reason, obj.source), obj)

    def on_rejected(rejected: RejectedObject) -> None:
        record_rejected(pipeline, rejected, received_via)

    return StoreHandler(handle, on_rejected), store_batch, give_up


def _size(sizer: ArrivalSizer, obj: SpooledObject) -> None:
    from pydicom import dcmread

    try:
        header = dcmread(io.BytesIO(obj.encoded), stop_before_pixels=True)
        sizer.received(header, encoded=obj.encoded, source=obj.source)
    except Exception:  # the object is stored; its size can be measured again
        log.exception("measuring %s failed", obj.sop_instance_uid)
