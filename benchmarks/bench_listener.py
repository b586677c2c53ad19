"""Benchmark: the C-STORE listener's throughput beside a bare pynetdicom SCP (issue #24).

dcmtk's ``storescu`` (``TCP_NODELAY=1`` in its environment: without it dcmtk waits on delayed ACKs
and every receiver looks equally slow) sends the same 300 small invented DX headers on one
association to

- the baseline: a bare pynetdicom SCP in a process of its own that only answers success;
- ``beamaudit listen`` on a fresh SQLite store (``$BEAMAUDIT_BENCH_DATABASE_URL`` for another),
  which answers success once each object is committed to its spool (stored after; the run
  checks, after the listener's stop, that every object was stored).

Taken in turns (``--rounds``, default 3), best of each. Prints objects per second of both, their
ratio and the target (>= 0.7); exits 1 when missed or when any object was not stored. Plain
script: ``python benchmarks/bench_listener.py [--rounds N] [--objects N]``; loopback only.
"""

from __future__ import annotations

import argparse
import os
import random
import shutil
import signal
import subprocess
import sys
import tempfile
import time
from pathlib import Path

from bench_load import _free_port, _header, service_env

TARGET = 0.7
HOST = "127.0.0.1"

_BARE_SCP = """
import sys
from pynetdicom import AE, StoragePresentationContexts, VerificationPresentationContexts, evt
ae = AE("BEAMAUDIT")
ae.supported_contexts = StoragePresentationContexts + VerificationPresentationContexts
ae.start_server(("127.0.0.1", int(sys.argv[1])), block=True,
                evt_handlers=[(evt.EVT_C_STORE, lambda event: 0x0000)])
"""


def _wait_echo(port: int, timeout_s: float = 120.0) -> None:
    env = {**os.environ, "TCP_NODELAY": "1"}
    deadline = time.monotonic() + timeout_s
    while time.monotonic() < deadline:
        done = subprocess.run(
            ["echoscu", "-aec", "BEAMAUDIT", HOST, str(port)], env=env, capture_output=True
        )
        if done.returncode == 0:
            return
        time.sleep(0.2)
    raise SystemExit(f"no DICOM listener answered on {HOST}:{port}")


def _send(files: list[Path], port: int) -> float:
    """Seconds ``storescu`` takes to send ``files`` on one association; exits on a failure."""
    env = {**os.environ, "TCP_NODELAY": "1"}
    start = time.perf_counter()
    done = subprocess.run(
        ["storescu", "-aec", "BEAMAUDIT", HOST, str(port), *map(str, files)],
        env=env, capture_output=True, text=True,
    )  # fmt: skip
    seconds = time.perf_counter() - start
    if done.returncode != 0:
        raise SystemExit(f"storescu failed ({done.returncode}): {done.stderr[-2000:]}")
    return seconds


def stop(process: subprocess.Popen[bytes]) -> None:
    """Stop a service started for a benchmark: SIGINT, then SIGKILL after 20 s."""
    process.send_signal(signal.SIGINT)
    try:
        process.wait(timeout=20)
    except subprocess.TimeoutExpired:
        process.kill()
        process.wait()


def _bare_round(files: list[Path]) -> float:
    port = _free_port()
    scp = subprocess.Popen([sys.executable, "-c", _BARE_SCP, str(port)],
                           stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)  # fmt: skip
    try:
        _wait_echo(port)
        return _send(files, port)
    finally:
        stop(scp)


def _wait_stored(database_url: str, n: int, timeout_s: float = 120.0) -> None:
    """Wait until the store holds ``n`` source objects (the listener stores after answering)."""
    from sqlalchemy import func, select

    from beamaudit.api.store import make_engine
    from beamaudit.api.store import models as m

    engine = make_engine(database_url)
    deadline = time.monotonic() + timeout_s
    try:
        while time.monotonic() < deadline:
            with engine.connect() as conn:
                if conn.scalar(select(func.count()).select_from(m.SourceObjectRow)) >= n:
                    return
            time.sleep(0.05)
    finally:
        engine.dispose()
    raise SystemExit(f"the listener stored fewer than {n} objects in {timeout_s:g} s")


def _listener_round(files: list[Path], warm_up: Path, work: Path, round_no: int) -> float:
    env, beamaudit = service_env(work, f"listen-{round_no}.db")
    port = _free_port()
    log = (work / f"listen-{round_no}.log").open("wb")
    listener = subprocess.Popen([*beamaudit, "listen", "--host", HOST, "--port", str(port)],
                                env=env, stdout=log, stderr=subprocess.STDOUT)  # fmt: skip
    try:
        _wait_echo(port)
        _send([warm_up], port)  # the first object computes the model's tables: not timed
        _wait_stored(env["BEAMAUDIT_DATABASE_URL"], 1)  # stored after its answer, from the spool
        seconds = _send(files, port)
    finally:
        stop(listener)
        log.close()
    stored = subprocess.run(
        [*beamaudit, "export", "events", "--format", "json"],
        env=env, check=True, capture_output=True, text=True,
    ).stdout  # fmt: skip
    count = stored.count('"sop_instance_uid"')
    if count != len(files) + 1:
        raise SystemExit(f"the listener stored {count} of {len(files) + 1} objects")
    return seconds


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--rounds", type=int, default=3)
    parser.add_argument("--objects", type=int, default=300)
    args = parser.parse_args(argv)
    for tool in ("storescu", "echoscu"):
        if shutil.which(tool) is None:
            print(f"skipped: dcmtk's {tool} is not installed (apt-get install dcmtk)")
            return 0 if os.environ.get("CI") != "true" else 1
    with tempfile.TemporaryDirectory(prefix="beamaudit-bench-listen-") as tmp:
        work = Path(tmp)
        rng = random.Random(20240305)
        files = []
        for i in range(args.objects):
            path = work / f"IM{i:05d}.dcm"
            _header(rng).save_as(path, enforce_file_format=True)
            files.append(path)
        warm_up = work / "warm-up.dcm"
        _header(rng).save_as(warm_up, enforce_file_format=True)
        bare: list[float] = []
        ours: list[float] = []
        for round_no in range(args.rounds):
            bare.append(_bare_round(files))
            ours.append(_listener_round(files, warm_up, work, round_no))
            print(f"round {round_no + 1}: bare SCP {args.objects / bare[-1]:.0f}/s, "
                  f"beamaudit listen {args.objects / ours[-1]:.0f}/s")  # fmt: skip
    bare_rate, our_rate = args.objects / min(bare), args.objects / min(ours)
    ratio = our_rate / bare_rate
    verdict = "MET" if ratio >= TARGET else "MISSED"
    print(f"{args.objects} DX headers, one association from storescu: bare pynetdicom SCP "
          f"{bare_rate:.0f}/s (baseline), beamaudit listen {our_rate:.0f}/s, spooled before each "
          f"answer, all stored; ratio {ratio:.2f}, target >= {TARGET}: {verdict}")  # fmt: skip
    return 0 if ratio >= TARGET else 1


if __name__ == "__main__":
    sys.exit(main())
