"""The process that stores a listener's spool (started by ``beamaudit listen`` and by the demo's
listener process, never by hand).

The listener's process receives and spools; this one, a child of it, parses and stores, so the
two use two cores and storing a batch never holds up an association's answer. It reads one JSON
line of settings on standard input, then stores what the spool holds until its parent writes
``stop`` (it then stores everything left, and exits) or its standard input ends without it (the
parent is gone: it finishes the batch in hand and exits; the next listener stores the rest).
One worker per spool at a time: it holds an exclusive lock on ``<spool>.lock``.

Run as ``python -m beamaudit.api.intake.spool_worker`` (see :class:`SpoolWorkerProcess`).
"""

from __future__ import annotations

import json
import logging
import signal
import subprocess
import sys
import threading
from pathlib import Path
from typing import IO, Any

__all__ = ["SpoolWorkerProcess", "main"]

log = logging.getLogger("beamaudit.api.intake.spooling")

#: seconds between looks at whether the worker process still runs
_WATCH_S = 1.0


class SpoolWorkerProcess:
    """The spool's worker as a child process, started again should it end unasked."""

    def __init__(self, config: dict[str, Any]) -> None:
        self._config = config
        self._stopping = threading.Event()
        self._lock = threading.Lock()
        self._process = self._spawn()
        self._watcher = threading.Thread(target=self._watch, name="spool-watch", daemon=True)
        self._watcher.start()

    def _spawn(self) -> subprocess.Popen[bytes]:
        process = subprocess.Popen(
            [sys.executable, "-m", "beamaudit.api.intake.spool_worker"], stdin=subprocess.PIPE
        )
        stdin = process.stdin
        assert stdin is not None
        stdin.write(json.dumps(self._config).encode() + b"\n")
        stdin.flush()
        return process

    def _watch(self) -> None:
        while not self._stopping.wait(_WATCH_S):
            with self._lock:
                code = self._process.poll()
                if code is None or self._stopping.is_set():
                    continue
                log.error("the spool's worker process ended (exit %s); starting it again", code)
                self._process = self._spawn()

    def close(self, timeout_s: float = 600.0) -> None:
        """Ask the worker to store everything spooled and end; wait for it."""
        self._stopping.set()
        with self._lock:
            process = self._process
        try:
            if process.stdin is not None:
                process.stdin.write(b"stop\n")
                process.stdin.close()
        except OSError:  # it ended already
            pass
        try:
            process.wait(timeout_s)
        except subprocess.TimeoutExpired:
            log.error("the spool's worker did not finish in %g s; what is left stays spooled",
                      timeout_s)  # fmt: skip
            process.kill()
            process.wait()


def _watch_parent(stdin: IO[str], stop: threading.Event, parent_gone: threading.Event) -> None:
    line = stdin.readline()
    if line.strip() != "stop":
        parent_gone.set()
    stop.set()


def main() -> int:
    """The worker process's body."""
    import fcntl

    from beamaudit.api.intake.ct_sizing import ArrivalSizer, StudySizer
    from beamaudit.api.intake.pipeline import Pipeline
    from beamaudit.api.intake.postprocess import Completion
    from beamaudit.api.intake.spooling import Spool, SpoolWorker, make_spooling_handler
    from beamaudit.api.logs import configure_logging
    from beamaudit.api.store import make_engine, make_session_factory
    from beamaudit.ingest.pseudonym import Pseudonymiser

    signal.signal(signal.SIGINT, signal.SIG_IGN)  # Ctrl-C reaches the parent, which says stop
    config = json.loads(sys.stdin.readline())
    # INFO (each stored batch) for ``listen``'s operator; the demo asks for WARNING
    level = logging.getLevelName(config.get("log_level", "INFO"))
    configure_logging(level, log_format=config["log_format"])
    stop, parent_gone = threading.Event(), threading.Event()
    signal.signal(signal.SIGTERM, lambda signum, frame: stop.set())  # stop, after storing
    threading.Thread(target=_watch_parent, args=(sys.stdin, stop, parent_gone), daemon=True).start()
    path = Path(config["spool"])
    with open(f"{path}.lock", "a") as lock:
        while True:  # a worker left by a killed listener finishes its batch first
            try:
                fcntl.flock(lock, fcntl.LOCK_EX | fcntl.LOCK_NB)
                break
            except BlockingIOError:
                if stop.wait(0.2):
                    return 0
        engine = make_engine(config["database_url"])
        sessions = make_session_factory(engine)
        spool = Spool(path, synchronous=config["synchronous"])
        sizer = ArrivalSizer(StudySizer(sessions), quiet_s=config["size_quiet_s"])
        _, store_batch, give_up = make_spooling_handler(
            spool,
            Pipeline(sessions, completion=Completion()),
            Pseudonymiser(bytes.fromhex(config["key"])),
            max_spooled=config["max_spooled"],
            sizer=sizer,
        )
        worker = SpoolWorker(spool, store_batch, give_up)
        try:
            worker.run(stop)
            if not parent_gone.is_set() and not worker.drain():
                log.error("%d received objects stay spooled until the next start", spool.count())
        finally:
            sizer.close()  # the studies still waiting for their quiet time are sized now
            spool.close()
            engine.dispose()
    return 0


if __name__ == "__main__":
    sys.exit(main())
