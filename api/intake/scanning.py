"""The folder scan: walk paths, parse every DICOM object, store events, record errors.

Parsing runs in this process or, with ``workers > 1``, in a process pool;
storing runs here, in batches of :data:`BATCH_SIZE` objects per transaction.
One bad file never stops the scan: it becomes an ingest error with its path
and reason, and the scan goes on.
"""

from __future__ import annotations

import gc
import itertools
import multiprocessing
import multiprocessing.context
import os
import threading
import time
import warnings
from collections import Counter
from collections.abc import Callable, Iterable, Iterator, Sequence
from concurrent.futures import ProcessPoolExecutor
from dataclasses import dataclass, field
from functools import partial
from pathlib import Path
from typing import Any

from beamaudit.api.intake.ct_sizing import (
    CT_IMAGE_CLASSES,
    StudySizer,
    file_header,
    is_ct_report,
)
from beamaudit.api.intake.pipeline import Pipeline, StoreOutcome, prepare
from beamaudit.api.store.engine import database_files
from beamaudit.ingest.ct_images import read_ct_size_image
from beamaudit.ingest.errors import IngestError
from beamaudit.ingest.events import ParseResult
from beamaudit.ingest.scrub import remove_values

__all__ = ["BATCH_SIZE", "ScanSummary", "freeze_heap", "scan_paths"]

BATCH_SIZE = 500

_worker_pseudonymiser: Any = None


@dataclass
class ScanSummary:
    """What a scan did; ``errors`` lists every rejected file with its reason."""

    files: int = 0
    objects: int = 0
    events: int = 0
    duplicates: int = 0
    skipped: int = 0  # DICOMDIR indexes
    #: the store's own database files found under the scanned paths (never opened)
    store_files_skipped: list[str] = field(default_factory=list)
    errors: list[dict[str, str]] = field(default_factory=list)
    stored_event_ids: list[int] = field(default_factory=list)
    #: what measuring CT patients' size did (``SizingSummary.as_dict``), when it ran
    ct_size: dict[str, Any] | None = None

    def errors_by_reason(self) -> Counter[str]:
        return Counter(e["code"] for e in self.errors)

    def as_dict(self) -> dict[str, Any]:
        return {
            "files": self.files,
            "objects": self.objects,
            "events": self.events,
            "duplicates": self.duplicates,
            "skipped": self.skipped,
            "errors": self.errors,
            **(
                {"store_files_skipped": self.store_files_skipped}
                if self.store_files_skipped
                else {}
            ),
            **({"ct_size": self.ct_size} if self.ct_size is not None else {}),
        }


def _init_worker(key: bytes, scanner_pid: int | None = None) -> None:
    global _worker_pseudonymiser
    from beamaudit.ingest.pseudonym import Pseudonymiser

    _worker_pseudonymiser = Pseudonymiser(key)
    if scanner_pid is not None:
        _end_with(scanner_pid)
    freeze_heap()


#: seconds between a parser process's looks at whether its scanning process still runs
_ORPHAN_CHECK_S = 1.0


def _end_with(scanner_pid: int) -> None:
    """End this parser process once the scanning process ``scanner_pid`` is gone.

    A parser is a child of the fork server, not of the scan, and waits for work on a queue whose
    write end it holds itself, and it holds the fork server's "alive" pipe: a scan killed
    outright (SIGKILL, the out-of-memory killer) would leave the parsers and the fork server
    waiting for ever. A daemon thread looks every second whether the scan still runs.
    """

    def watch() -> None:
        while True:
            time.sleep(_ORPHAN_CHECK_S)
            try:
                os.kill(scanner_pid, 0)
            except ProcessLookupError:
                os._exit(0)
            except PermissionError:  # the number is another user's process now: ours is gone
                os._exit(0)

    threading.Thread(target=watch, name="end-with-the-scan", daemon=True).start()


def freeze_heap() -> None:
    """Take every object alive now out of the cyclic garbage collector's rounds.

    A process that reads and stores thousands of objects runs the collector's full rounds
    over everything its imports made (modules, pydicom's and SQLAlchemy's tables: some
    hundred thousand objects), which none of its work will ever free. After ``gc.freeze()``
    the rounds see only what the work itself makes (about 5 % of a folder scan's time
    saved). Call it once the process has imported what it works with; what is frozen is
    never collected, so only from processes whose start-up objects live as long as they do.
    """
    gc.freeze()


def _parse_one(path_text: str) -> tuple[str, str, ParseResult | IngestError | None, str | None]:
    """``(path, kind, result, fingerprint)``; kind is ``dicom``, ``dicomdir`` or ``error``.

    The result is prepared for storing here (:func:`beamaudit.api.intake.pipeline.prepare`), in the
    parser process, so the storing process only writes.
    """
    from beamaudit.ingest.folder import scan_file

    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        outcome = scan_file(Path(path_text), _worker_pseudonymiser)
    if outcome.result is not None and caught:
        # pydicom's warnings about tolerated deviations become notes on the object
        outcome.result.warnings.extend(
            f"while reading: {remove_values(str(w.message))}"
            for w in caught
            if issubclass(w.category, UserWarning)
        )
    if outcome.skipped:
        return path_text, "dicomdir", None, None
    if outcome.error is not None:
        return path_text, "error", outcome.error, None
    assert outcome.result is not None
    return path_text, "dicom", outcome.result, prepare(outcome.result)


#: with fewer files than this a scan parses in its own process (a pool costs more to start)
POOL_THRESHOLD = 64


def _parsed(
    files: Iterable[Path], key: bytes, workers: int
) -> Iterator[tuple[str, str, ParseResult | IngestError | None, str | None]]:
    names = (str(p) for p in files)
    if workers <= 1:
        _init_worker(key)
        yield from map(_parse_one, names)
        return
    head = list(itertools.islice(names, POOL_THRESHOLD))
    if len(head) < POOL_THRESHOLD:
        _init_worker(key)
        yield from map(_parse_one, head)
        return
    with ProcessPoolExecutor(
        max_workers=workers,
        mp_context=_parser_context(),
        initializer=_init_worker,
        initargs=(key, os.getpid()),
    ) as pool:
        yield from pool.map(_parse_one, itertools.chain(head, names), chunksize=64)


def _parser_context() -> multiprocessing.context.BaseContext:
    """Where parser processes come from: a fork server, never a fork of this process.

    A forked parser would inherit this process's open database connections: killed mid-batch,
    this process would leave parsers holding the socket of its open transaction (PostgreSQL
    then keeps its locks, and the next scan waits on them), and sibling parsers holding each
    other's pipes alive. Children of the fork server (started once per process, with the
    parsing modules imported) inherit neither, and exit when this process goes
    (:func:`_end_with`; then the fork server too).
    """
    if "forkserver" not in multiprocessing.get_all_start_methods():
        return multiprocessing.get_context("spawn")
    context = multiprocessing.get_context("forkserver")
    context.set_forkserver_preload(["beamaudit.api.intake.scanning", "beamaudit.ingest.folder"])
    return context


def scan_paths(
    paths: Sequence[Path],
    *,
    pipeline: Pipeline,
    key: bytes,
    workers: int = 1,
    received_via: str = "scan",
    on_file: Callable[[str], None] | None = None,
    ct_size: bool = True,
) -> ScanSummary:
    """Scan ``paths`` (files or folders, recursively) into the store.

    Parameters
    ----------
    paths
        Files and folders; DICOM files are recognised by content, not by name.
    pipeline
        Stores the parsed objects.
    key
        The pseudonymisation key.
    workers
        Parser processes (1: parse in this process).
    on_file
        Called once per file after it is handled (progress display).
    ct_size
        Measure CT patients' size from their images once the scan's objects are stored
        (:mod:`beamaudit.api.intake.ct_sizing`: only the chosen images' pixels are read).
    """
    from beamaudit.ingest.folder import iter_candidate_files

    summary = ScanSummary()
    batch: list[tuple[ParseResult, str | None, str | None]] = []
    pending_errors: list[tuple[IngestError, str | None]] = []
    sizer = StudySizer(pipeline.sessions) if ct_size else None

    def flush() -> None:
        if batch:
            outcomes = pipeline.store_many(batch, received_via=received_via, prepared=True)
            for (result, source, _), outcome in zip(batch, outcomes, strict=True):
                _count(summary, outcome, source, pending_errors)
                if sizer is not None and outcome.status == "stored" and source:
                    _keep_ct_header(sizer, result, source, summary, pending_errors)
            batch.clear()
        if pending_errors:
            pipeline.record_errors(pending_errors, received_via=received_via)
            pending_errors.clear()

    unreadable: list[IngestError] = []  # folders that cannot be listed: their files are lost

    def note_unreadable_folders() -> None:
        while unreadable:
            error = unreadable.pop(0)
            summary.errors.append(
                {"source": error.source or "", "code": error.code, "reason": error.reason}
            )
            pending_errors.append((error, error.source))

    own = database_files(pipeline.sessions.kw.get("bind"))

    def skip_own(path: Path) -> None:  # the store's own files: never opened, said so
        summary.store_files_skipped.append(str(path))

    files = iter_candidate_files(paths, unreadable.append, skip=own, on_skipped=skip_own)
    parsed = _parsed(files, key, max(1, workers))
    for path_text, kind, result, fingerprint in parsed:
        note_unreadable_folders()
        summary.files += 1
        if kind == "dicomdir":
            summary.skipped += 1
        elif isinstance(result, IngestError):
            summary.errors.append(
                {"source": path_text, "code": result.code, "reason": result.reason}
            )
            pending_errors.append((result, path_text))
        elif isinstance(result, ParseResult):
            batch.append((result, path_text, fingerprint))
        if len(batch) >= BATCH_SIZE or len(pending_errors) >= BATCH_SIZE:
            flush()
        if on_file is not None:
            on_file(path_text)
    note_unreadable_folders()
    flush()
    if sizer is not None:
        sized = sizer.finish_all(received_via=received_via)
        summary.ct_size = sized.as_dict()
        summary.errors.extend(
            {"source": e.source or "", "code": e.code, "reason": e.reason} for e in sized.errors
        )
    return summary


def _keep_ct_header(
    sizer: StudySizer,
    result: ParseResult,
    path: str,
    summary: ScanSummary,
    pending_errors: list[tuple[IngestError, str | None]],
) -> None:
    """A stored CT image's size header, kept with how to read its pixels later (a CT dose
    report: its study sized again from the samples stored before)."""
    if result.source.sop_class_uid not in CT_IMAGE_CLASSES:
        if is_ct_report(result):
            sizer.add_report(result.source.study_instance_uid)
        return
    try:
        header = file_header(path)
    except IngestError as exc:
        summary.errors.append({"source": path, "code": exc.code, "reason": exc.reason})
        pending_errors.append((exc, path))
        return
    sizer.add(header, partial(read_ct_size_image, path), path)


def _count(
    summary: ScanSummary,
    outcome: StoreOutcome,
    source: str | None,
    pending_errors: list[tuple[IngestError, str | None]],
) -> None:
    if outcome.status == "stored":
        summary.objects += 1
        summary.events += outcome.events
        summary.stored_event_ids.extend(outcome.event_ids)
    elif outcome.status == "duplicate":
        summary.duplicates += 1
    else:
        reason = outcome.reason or "conflicts with a stored object"
        summary.errors.append(
            {"source": source or outcome.sop_instance_uid, "code": "conflict", "reason": reason}
        )
        pending_errors.append((IngestError("bad_value", reason, source), source))


def default_workers() -> int:
    """One parser per core, at most 4."""
    return max(1, min(4, os.cpu_count() or 1))
