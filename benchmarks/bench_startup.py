"""Benchmark: how long a command takes to start (issue #24).

Each command runs as a fresh process, ``--rounds`` times (default 5), taken in turns with the
baseline ``python -c "import sqlalchemy"`` (the least a command on the store must import). The
figure is the process's CPU time (user + system, best of the rounds): on a shared machine the
wall-clock time mostly measures the other processes. Targets: ``beamaudit --help`` and
``beamaudit levels list`` on a small database <= 3x the baseline. ``beamaudit serve`` (the
seconds until ``/api/v1/health`` answers, wall-clock beside the baseline's) is reported.
Exits 1 when a target is missed. Plain script: ``python benchmarks/bench_startup.py``.
"""

from __future__ import annotations

import argparse
import resource
import subprocess
import sys
import tempfile
import time
import urllib.request
from pathlib import Path

from bench_listener import stop
from bench_load import _free_port, service_env

TARGET = 3.0
HOST = "127.0.0.1"


def _cpu_seconds(cmd: list[str], env: dict[str, str]) -> tuple[float, float]:
    """CPU seconds (user + system) and wall-clock seconds of one run of ``cmd``."""
    before = resource.getrusage(resource.RUSAGE_CHILDREN)
    start = time.perf_counter()
    subprocess.run(cmd, env=env, check=True, capture_output=True)
    wall = time.perf_counter() - start
    after = resource.getrusage(resource.RUSAGE_CHILDREN)
    cpu = (after.ru_utime - before.ru_utime) + (after.ru_stime - before.ru_stime)
    return cpu, wall


def _serve_seconds(beamaudit: list[str], env: dict[str, str]) -> float:
    """Wall-clock seconds from starting ``beamaudit serve`` to its first health answer."""
    port = _free_port()
    start = time.perf_counter()
    server = subprocess.Popen(
        [*beamaudit, "serve", "--host", HOST, "--port", str(port)],
        env=env, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL,
    )  # fmt: skip
    try:
        deadline = time.monotonic() + 120
        while time.monotonic() < deadline:
            try:
                with urllib.request.urlopen(f"http://{HOST}:{port}/api/v1/health", timeout=1):
                    return time.perf_counter() - start
            except OSError:
                time.sleep(0.02)
        raise SystemExit("beamaudit serve did not answer in 120 s")
    finally:
        stop(server)


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--rounds", type=int, default=5)
    args = parser.parse_args(argv)
    with tempfile.TemporaryDirectory(prefix="beamaudit-bench-startup-") as tmp:
        work = Path(tmp)
        env, beamaudit = service_env(work, "small.db")
        commands = {
            "baseline: python -c 'import sqlalchemy'": [sys.executable, "-c", "import sqlalchemy"],
            "beamaudit --help": [*beamaudit, "--help"],
            "beamaudit levels list": [*beamaudit, "levels", "list"],
        }
        cpu: dict[str, list[float]] = {name: [] for name in commands}
        wall: dict[str, list[float]] = {name: [] for name in commands}
        for _ in range(args.rounds):
            for name, cmd in commands.items():
                c, w = _cpu_seconds(cmd, env)
                cpu[name].append(c)
                wall[name].append(w)
        serve = min(_serve_seconds(beamaudit, env) for _ in range(min(args.rounds, 3)))
    base_name = next(iter(commands))
    base_cpu, base_wall = min(cpu[base_name]), min(wall[base_name])
    print(f"{base_name}: {base_cpu:.2f} s CPU, {base_wall:.2f} s wall-clock")
    missed = False
    for name in list(commands)[1:]:
        ratio = min(cpu[name]) / base_cpu
        verdict = "MET" if ratio <= TARGET else "MISSED"
        missed |= ratio > TARGET
        print(f"{name}: {min(cpu[name]):.2f} s CPU ({min(wall[name]):.2f} s wall-clock); "
              f"ratio {ratio:.2f}, target <= {TARGET:g}: {verdict}")  # fmt: skip
    print(f"beamaudit serve until /api/v1/health answers: {serve:.2f} s wall-clock; "
          f"ratio to the baseline's wall-clock {serve / base_wall:.1f} (reported)")  # fmt: skip
    return 1 if missed else 0


if __name__ == "__main__":
    sys.exit(main())
