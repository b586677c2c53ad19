"""Benchmark: a bounded load test on loopback (issue #10).

1. ``beamaudit serve`` (SQLite, or ``$BEAMAUDIT_BENCH_DATABASE_URL``) seeded with 300 invented
   headers; 50 concurrent API clients for 30 s, each looping over the events list, one event,
   the exams list, the ingest errors and, one request in ten, an upload of a new header.
2. ``beamaudit listen`` on the same store; 10 concurrent C-STORE associations, 40 objects each.

Zero errors are required (every request answered 2xx, every C-STORE success). Prints p50/p99
latency and throughput of each, and the ratio of the loaded API's throughput to a single client's
rate on the health endpoint measured in the same run (the baseline). Targets (issue #24): the
ratio >= 0.5 and the API's p99 <= 1 s; each is printed with its target. Exits 1 on any error or
a missed target. Plain script: ``python benchmarks/bench_load.py [SECONDS]``; traffic goes to
127.0.0.1 only. ``beamaudit serve`` runs with its default workers (one per core).
"""

from __future__ import annotations

import io
import os
import random
import signal
import socket
import subprocess
import sys
import tempfile
import threading
import time
from pathlib import Path

import httpx
from pydicom.dataset import Dataset, FileMetaDataset
from pydicom.uid import UID, ExplicitVRLittleEndian, generate_uid

API_CLIENTS = 50
LOAD_S = 30.0
BASELINE_S = 3.0
ASSOCIATIONS = 10
PER_ASSOCIATION = 40
SEED_OBJECTS = 300
#: issue #24: the loaded API's throughput as a share of the one-client health rate, and its p99
TARGET_RATIO = 0.5
TARGET_P99_S = 1.0
HOST = "127.0.0.1"
DX = UID("1.2.840.10008.5.1.4.1.1.1.1")  # Digital X-Ray Image Storage - For Presentation (PS3.4)


def _header(rng: random.Random) -> Dataset:
    """An invented DX header (demo values; the patient is made up)."""
    ds = Dataset()
    ds.SOPClassUID = DX
    ds.SOPInstanceUID = generate_uid()
    ds.StudyInstanceUID = generate_uid()
    ds.SeriesInstanceUID = generate_uid()
    ds.Modality = "DX"
    ds.StudyDate = f"2024{rng.randint(1, 12):02d}{rng.randint(1, 28):02d}"
    ds.StudyTime = "101500"
    ds.PatientID = f"LOAD-{rng.randint(0, 10**6)}"
    ds.Manufacturer = "Load Imaging (invented)"
    ds.InstitutionName = "Kestrel Bay General (invented)"
    ds.StationName = f"ROOM{rng.randint(0, 5)}"
    ds.StudyDescription = "XR CHEST"
    ds.BodyPartExamined = "CHEST"
    ds.KVP = str(rng.choice((70, 81, 90, 110, 125)))
    ds.ExposureInuAs = rng.randint(800, 20_000)
    ds.DistanceSourceToDetector = "1800"
    ds.ImageAndFluoroscopyAreaDoseProduct = f"{rng.uniform(0.05, 2.0):.3f}"
    meta = FileMetaDataset()
    meta.MediaStorageSOPClassUID = DX
    meta.MediaStorageSOPInstanceUID = ds.SOPInstanceUID
    meta.TransferSyntaxUID = ExplicitVRLittleEndian
    ds.file_meta = meta
    return ds


def _encoded(ds: Dataset) -> bytes:
    buffer = io.BytesIO()
    ds.save_as(buffer, enforce_file_format=True)
    return buffer.getvalue()


def _free_port() -> int:
    with socket.socket() as sock:
        sock.bind((HOST, 0))
        return int(sock.getsockname()[1])


def _wait_tcp(port: int, timeout_s: float = 60.0) -> None:
    deadline = time.monotonic() + timeout_s
    while time.monotonic() < deadline:
        try:
            with socket.create_connection((HOST, port), timeout=0.5):
                return
        except OSError:
            time.sleep(0.1)
    raise SystemExit(f"nothing listens on {HOST}:{port}")


def _wait_dicom(port: int, timeout_s: float = 60.0) -> None:
    """Until a C-ECHO is answered (a bare TCP probe would hold an association slot a while)."""
    from pynetdicom import AE

    from beamaudit.ingest.sender import open_association

    ae = AE(ae_title="LOADECHO")
    ae.add_requested_context("1.2.840.10008.1.1")  # Verification, PS3.4 Annex A
    deadline = time.monotonic() + timeout_s
    while time.monotonic() < deadline:
        assoc = open_association(ae, HOST, port, ae_title="BEAMAUDIT")
        if assoc.is_established:
            assoc.send_c_echo()
            assoc.release()
            return
        time.sleep(0.2)
    raise SystemExit(f"no DICOM listener on {HOST}:{port}")


def service_env(work: Path, database: str) -> tuple[dict[str, str], list[str]]:
    """The environment of a benchmark's ``beamaudit`` processes, with their store migrated (the
    SQLite file ``work/database``, or ``$BEAMAUDIT_BENCH_DATABASE_URL``), and the command."""
    env = {k: v for k, v in os.environ.items() if not k.startswith("BEAMAUDIT_")}
    env["BEAMAUDIT_DATABASE_URL"] = os.environ.get(
        "BEAMAUDIT_BENCH_DATABASE_URL", f"sqlite:///{work / database}"
    )
    env["BEAMAUDIT_SECRET_KEY_PATH"] = str(work / "pseudonym.key")
    beamaudit = [sys.executable, "-m", "beamaudit"]
    subprocess.run([*beamaudit, "db", "upgrade"], env=env, check=True, capture_output=True)
    return env, beamaudit


def _percentile(values: list[float], q: float) -> float:
    ordered = sorted(values)
    return ordered[min(len(ordered) - 1, round(q * (len(ordered) - 1)))]


class Recorder:
    """Latencies and errors from many threads."""

    def __init__(self) -> None:
        self.lock = threading.Lock()
        self.latencies: list[float] = []
        self.errors: list[str] = []
        #: latencies by kind of request (list, one event, upload): where a slow tail comes from
        self.by_kind: dict[str, list[float]] = {}

    def add(self, seconds: float, error: str | None = None, kind: str = "") -> None:
        with self.lock:
            self.latencies.append(seconds)
            self.by_kind.setdefault(kind, []).append(seconds)
            if error is not None:
                self.errors.append(error)


def _api_client(base: str, token: str, until: float, rec: Recorder, seed: int) -> None:
    rng = random.Random(seed)
    headers = {"Authorization": f"Bearer {token}"}
    paths = ["/api/v1/events?limit=50", "/api/v1/exams?limit=50", "/api/v1/ingest-errors"]
    with httpx.Client(base_url=base, headers=headers, timeout=60) as client:
        event_ids = [e["id"] for e in client.get("/api/v1/events?limit=200").json()["items"]]
        while time.monotonic() < until:
            choice = rng.random()
            start = time.perf_counter()
            try:
                if choice < 0.1:
                    reply = client.post(
                        "/api/v1/upload",
                        content=_encoded(_header(rng)),
                        headers={"Content-Type": "application/dicom"},
                    )
                elif choice < 0.3 and event_ids:
                    reply = client.get(f"/api/v1/events/{rng.choice(event_ids)}")
                else:
                    reply = client.get(rng.choice(paths))
                error = None if reply.is_success else f"{reply.status_code} {reply.text[:200]}"
            except httpx.HTTPError as exc:
                error = f"{type(exc).__name__}: {exc}"
            kind = "upload" if choice < 0.1 else "one event" if choice < 0.3 else "lists"
            rec.add(time.perf_counter() - start, error, kind)


def _baseline(base: str) -> tuple[float, list[float]]:
    latencies = []
    with httpx.Client(base_url=base, timeout=30) as client:
        until = time.monotonic() + BASELINE_S
        while time.monotonic() < until:
            start = time.perf_counter()
            reply = client.get("/api/v1/health")
            latencies.append(time.perf_counter() - start)
            if not reply.is_success:
                raise SystemExit(f"health answered {reply.status_code}")
    return len(latencies) / BASELINE_S, latencies


def _store_client(port: int, rec: Recorder, seed: int) -> None:
    from pynetdicom import AE

    from beamaudit.ingest.sender import open_association

    rng = random.Random(seed)
    ae = AE(ae_title=f"LOAD{seed:02d}")
    ae.add_requested_context(DX, ExplicitVRLittleEndian)
    assoc = open_association(ae, HOST, port, ae_title="BEAMAUDIT")
    if not assoc.is_established:
        rec.add(0.0, "association not established")
        return
    try:
        for _ in range(PER_ASSOCIATION):
            ds = _header(rng)
            start = time.perf_counter()
            status = assoc.send_c_store(ds)
            ok = "Status" in status and status.Status == 0x0000
            rec.add(time.perf_counter() - start, None if ok else f"C-STORE answered {status}")
    finally:
        assoc.release()


def _report(name: str, rec: Recorder, seconds: float) -> float:
    if not rec.latencies:
        print(f"{name}: no request answered in {seconds:.1f} s; errors {len(rec.errors)}")
        return 0.0
    rate = len(rec.latencies) / seconds
    p50 = _percentile(rec.latencies, 0.50) * 1000
    p99 = _percentile(rec.latencies, 0.99) * 1000
    print(f"{name}: {len(rec.latencies)} requests in {seconds:.1f} s = {rate:.1f}/s; "
          f"p50 {p50:.1f} ms, p99 {p99:.1f} ms; errors {len(rec.errors)}")  # fmt: skip
    for error in rec.errors[:5]:
        print(f"  error: {error}")
    return rate


def _seed(work: Path, env: dict[str, str], beamaudit: list[str]) -> str:
    """A physicist's token, and the store seeded with :data:`SEED_OBJECTS` invented headers."""
    made = subprocess.run(
        [*beamaudit, "token", "create", "--role", "physicist", "--name", "load test"],
        env=env, check=True, capture_output=True, text=True,
    )  # fmt: skip
    token = next(w for w in made.stdout.split() if w.startswith("bat_"))
    rng = random.Random(20240305)
    seed_folder = work / "seed"
    seed_folder.mkdir()
    for i in range(SEED_OBJECTS):
        _header(rng).save_as(seed_folder / f"IM{i:05d}", enforce_file_format=True)
    subprocess.run([*beamaudit, "scan", str(seed_folder)], env=env, check=True,
                   capture_output=True)  # fmt: skip
    return token


def _run_threads(threads: list[threading.Thread], timeout_s: float) -> None:
    for thread in threads:
        thread.start()
    for thread in threads:
        thread.join(timeout=timeout_s)


def process_tree_cpu_s(root_pid: int) -> float:
    """CPU seconds (user + system) of a process and its descendants, from Linux's ``/proc``
    (0 elsewhere): what the serving processes spent, whatever else the machine runs."""
    proc = Path("/proc")
    if not proc.is_dir():
        return 0.0
    children: dict[int, list[int]] = {}
    times: dict[int, float] = {}
    tick = os.sysconf("SC_CLK_TCK")
    for entry in proc.iterdir():
        if not entry.name.isdigit():
            continue
        try:  # fields after the command's closing parenthesis: state, ppid, ..., utime, stime
            fields = (entry / "stat").read_text().rsplit(")", 1)[1].split()
        except OSError:  # ended meanwhile
            continue
        children.setdefault(int(fields[1]), []).append(int(entry.name))
        times[int(entry.name)] = (int(fields[11]) + int(fields[12])) / tick
    total, todo = 0.0, [root_pid]
    while todo:
        pid = todo.pop()
        total += times.get(pid, 0.0)
        todo += children.get(pid, [])
    return total


def _api_load(
    base: str, token: str, load_s: float, missed: list[str], server_pid: int | None = None
) -> Recorder:
    """:data:`API_CLIENTS` clients for ``load_s`` against the same-run baseline; the targets
    missed are added to ``missed``. With ``server_pid``, the serving processes' CPU per request
    is printed too (steady on a loaded machine, where the wall-clock ratio is not)."""
    baseline_rate, baseline_lat = _baseline(base)
    cpu_before = process_tree_cpu_s(server_pid) if server_pid else 0.0
    print(f"baseline: one client on /api/v1/health: {baseline_rate:.1f}/s; "
          f"p50 {_percentile(baseline_lat, 0.5) * 1000:.1f} ms")  # fmt: skip
    api = Recorder()
    until = time.monotonic() + load_s
    started = time.monotonic()
    _run_threads(
        [
            threading.Thread(target=_api_client, args=(base, token, until, api, i))
            for i in range(API_CLIENTS)
        ],
        load_s + 120,
    )
    api_rate = _report(f"API, {API_CLIENTS} clients", api, time.monotonic() - started)
    for kind, seconds in sorted(api.by_kind.items()):
        print(f"  {kind}: {len(seconds)} requests, p50 {_percentile(seconds, 0.5) * 1000:.0f} ms, "
              f"p99 {_percentile(seconds, 0.99) * 1000:.0f} ms")  # fmt: skip
    if server_pid and api.latencies:
        cpu_ms = (process_tree_cpu_s(server_pid) - cpu_before) / len(api.latencies) * 1000
        print(f"  the serving processes' CPU: {cpu_ms:.2f} ms a request")
    ratio = api_rate / baseline_rate
    p99_s = _percentile(api.latencies, 0.99) if api.latencies else float("inf")
    if ratio < TARGET_RATIO:
        missed.append("throughput")
    if p99_s > TARGET_P99_S:
        missed.append("p99")
    print(f"ratio loaded API throughput / single-client health rate: {ratio:.2f} "
          f"(target >= {TARGET_RATIO}: {'met' if ratio >= TARGET_RATIO else 'MISSED'}); "
          f"p99 {p99_s:.2f} s (target <= {TARGET_P99_S:g} s: "
          f"{'met' if p99_s <= TARGET_P99_S else 'MISSED'})")  # fmt: skip
    return api


def _store_load(dicom_port: int) -> Recorder:
    """:data:`ASSOCIATIONS` concurrent associations of :data:`PER_ASSOCIATION` C-STOREs each."""
    dicom = Recorder()
    started = time.monotonic()
    _run_threads(
        [
            threading.Thread(target=_store_client, args=(dicom_port, dicom, 100 + i))
            for i in range(ASSOCIATIONS)
        ],
        300,
    )
    _report(f"C-STORE, {ASSOCIATIONS} associations", dicom, time.monotonic() - started)
    return dicom


def _stop(services: list[subprocess.Popen[bytes]]) -> None:
    """Stop the services as Ctrl-C would; kill one that does not stop within 20 s."""
    for process in services:
        process.send_signal(signal.SIGINT)
    for process in services:
        try:
            process.wait(timeout=20)
        except subprocess.TimeoutExpired:
            process.kill()
            process.wait()


def _print_last_traceback(log_path: Path) -> None:
    text = log_path.read_text(errors="replace")
    tracebacks = [block for block in text.split("\n\n") if "Traceback" in block]
    print("the services' log, last traceback:")
    print((tracebacks[-1] if tracebacks else text)[-4000:])


def main(argv: list[str]) -> int:
    load_s = float(argv[1]) if len(argv) > 1 else LOAD_S
    with tempfile.TemporaryDirectory(prefix="beamaudit-bench-load-") as tmp:
        work = Path(tmp)
        env, beamaudit = service_env(work, "load.db")
        token = _seed(work, env, beamaudit)
        api_port, dicom_port = _free_port(), _free_port()
        log = (work / "services.log").open("wb")
        services = [
            subprocess.Popen([*beamaudit, "serve", "--host", HOST, "--port", str(api_port)],
                             env=env, stdout=log, stderr=subprocess.STDOUT),
            subprocess.Popen([*beamaudit, "listen", "--host", HOST, "--port", str(dicom_port)],
                             env=env, stdout=log, stderr=subprocess.STDOUT),
        ]  # fmt: skip
        missed: list[str] = []
        try:
            _wait_tcp(api_port)
            _wait_dicom(dicom_port)
            api = _api_load(
                f"http://{HOST}:{api_port}", token, load_s, missed, server_pid=services[0].pid
            )
            dicom = _store_load(dicom_port)
            expected = ASSOCIATIONS * PER_ASSOCIATION
            if len(dicom.latencies) != expected:
                print(f"only {len(dicom.latencies)} of {expected} C-STOREs were answered")
                return 1
        finally:
            _stop(services)
            log.close()
        failed = bool(api.errors or dicom.errors)
        if failed:
            _print_last_traceback(work / "services.log")
    print("zero errors" if not failed else "ERRORS: the load test failed")
    if missed:
        print(f"TARGET MISSED: {', '.join(missed)} (on a loaded machine compare the ratio)")
    return 1 if failed or missed else 0


if __name__ == "__main__":
    sys.exit(main(sys.argv))
