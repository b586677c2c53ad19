"""The end-to-end demo: an invented hospital's files through the real ingest paths.

1. :func:`beamaudit.api.demo.generate.generate_scenario` writes the invented
   scenario as DICOM files (``DIR/dicom``) and its manifest.
2. The rooms' beam configurations and the QA measurements of the calibrated
   rooms are stored (as a physicist would enter them), so reconstruction uses
   them.
3. Rooms delivered by "folder" are read by the folder scan; rooms delivered by
   "cstore" are sent over DICOM C-STORE to listeners on free loopback ports
   (:data:`CSTORE_NODES` listener processes on the one database, as ingest nodes),
   answering once an object is in its spool while its worker process stores
   the spool in batches, as ``beamaudit listen`` does; the broken files go
   through the folder scan too.
4. The national and the (invented) local reference-level sets are imported,
   and a monthly review runs for every month of the scenario.
5. The nightly notification step sends the digest of the new findings: with no mail server or
   webhook configured (the demo never uses one), it is written to ``DIR/outbox.jsonl``.
6. :func:`compare_with_plan` sets the flags beside the planted findings.

Everything here is invented; nothing is a real patient, person or hospital.
"""

from __future__ import annotations

import json
import logging
import multiprocessing
import multiprocessing.context
import tempfile
import time
from collections import Counter
from collections.abc import Iterator
from concurrent.futures import ThreadPoolExecutor
from contextlib import contextmanager
from dataclasses import dataclass, field
from datetime import date
from multiprocessing.connection import Connection
from multiprocessing.process import BaseProcess
from pathlib import Path
from typing import TYPE_CHECKING, Any

from sqlalchemy import select
from sqlalchemy.orm import Session, sessionmaker

from beamaudit.api.demo.errors import DemoError
from beamaudit.api.store import models as m
from beamaudit.api.store.auth import record_change

if TYPE_CHECKING:
    from beamaudit.api.intake.pipeline import Pipeline

__all__ = ["DemoOutcome", "compare_with_plan", "run_demo"]

log = logging.getLogger(__name__)


@dataclass
class DemoOutcome:
    manifest: dict[str, Any]
    scan: dict[str, Any] = field(default_factory=dict)
    cstore: dict[str, int] = field(default_factory=dict)
    run_ids: dict[str, int] = field(default_factory=dict)
    flags: list[dict[str, Any]] = field(default_factory=list)
    ingest_errors: list[dict[str, str]] = field(default_factory=list)
    #: the recurrent-exposure list at the end of the demo's months: pseudonyms, counts, sums
    recurrent: list[dict[str, Any]] = field(default_factory=list)
    #: the patient pseudonym of each study the scenario planted for that list
    recurrent_planted: dict[str, str] = field(default_factory=dict)
    #: seconds spent in each phase, in the order they ran (``generate``, ``scan``, ...)
    timings: dict[str, float] = field(default_factory=dict)
    #: the nightly notification step's deliveries (to the outbox file) and the file
    notifications: list[dict[str, Any]] = field(default_factory=list)
    outbox: Path | None = None


def _phase_timer(timings: dict[str, float]) -> Any:
    """``phase = _phase_timer(t)``; ``with phase("scan"):`` adds the block's seconds to ``t``."""

    @contextmanager
    def phase(name: str) -> Iterator[None]:
        t0 = time.perf_counter()
        try:
            yield
        finally:
            elapsed = time.perf_counter() - t0
            timings[name] = timings.get(name, 0.0) + elapsed
            log.debug("demo phase %s: %.2f s", name, elapsed)

    return phase


def _setup_rooms(sessions: sessionmaker[Session], manifest: dict[str, Any]) -> None:
    """Each room of the manifest as its physicist enters it: site, room, device, the CT
    scanner's localizer calibration, the QA measurements and, for a calibrated room, the room
    calibration fitted to them."""
    with sessions.begin() as session:
        for r in manifest["rooms"]:
            site_name = r.get("site") or manifest["institution"]
            room = _add_room(session, _site(session, site_name), r)
            device = m.Device(
                room_id=room.id,
                station_name=r["station_name"],
                manufacturer=r["manufacturer"],
                model_name=r["model_name"],
                serial_number=r["serial_number"],
                device_observer_uid=r.get("device_observer_uid"),
                institution_name=site_name,
            )
            session.add(device)
            if r.get("ct_localizer_calibration"):
                session.flush()
                _add_localizer_calibration(session, device.id, r["ct_localizer_calibration"])
            qa = r.get("qa_measurements") or []
            session.add_all(_qa_row(room.id, q) for q in qa)
            if r.get("calibrated") and qa:
                session.add(_calibration_row(room, qa))
            record_change(
                session,
                actor="demo",
                action="create",
                entity="room",
                entity_id=room.id,
                after={"name": room.name, "calibrated": bool(r.get("calibrated"))},
            )


def _site(session: Session, name: str) -> m.Site:
    """The site named ``name``, added when it is not stored yet."""
    site = session.scalar(select(m.Site).where(m.Site.name == name))
    if site is None:
        site = m.Site(name=name)
        session.add(site)
        session.flush()
    return site


def _add_room(session: Session, site: m.Site, r: dict[str, Any]) -> m.Room:
    """The manifest's room ``r`` stored (flushed: its id is known) with its beam configuration."""
    room = m.Room(
        site_id=site.id,
        name=r["station_name"],
        modality=r["modality"],
        anode_material=r.get("anode_material") or "tungsten",
        anode_angle_deg=float(r.get("anode_angle_deg") or 12.0),
        ripple_percent=float(r.get("ripple_percent") or 0.0),
        filtration=r.get("inherent_filtration") or None,
        table_to_detector_mm=r.get("table_to_detector_mm"),
    )
    session.add(room)
    session.flush()
    return room


def _add_localizer_calibration(session: Session, device_id: int, cal: dict[str, Any]) -> None:
    """The CT scanner's calibration to water, as its physicist stores it."""
    from beamaudit.api.store.ct_calibrations import add_localizer_calibration

    add_localizer_calibration(
        session,
        device_id=device_id,
        kvp_kv=cal["kvp_kv"],
        view=cal["view"],
        pixel_values=cal["pixel_values"],
        water_thickness_mm=cal["water_thickness_mm"],
        source=cal["source"],
        measured_on=date.fromisoformat(cal["measured_on"]),
        actor="demo",
    )


def _qa_row(room_id: int, q: dict[str, Any]) -> m.QAMeasurementRow:
    """One QA measurement of the manifest as a stored row."""
    return m.QAMeasurementRow(
        room_id=room_id,
        measured_on=date.fromisoformat(q["measured_on"]),
        kvp_kv=q["kvp_kv"],
        filtration=q.get("filtration"),
        distance_mm=q["distance_mm"],
        output_ugy_per_mas=q["output_ugy_per_mas"],
        hvl_mm_al=q.get("hvl_mm_al"),
        note=q.get("note"),
    )


def _calibration_row(room: m.Room, qa: list[dict[str, Any]]) -> m.RoomCalibrationRow:
    """The room's calibration fitted to its QA measurements (``calibrate_room``)."""
    from beamaudit.model import FilterSpec, QAMeasurement, calibrate_room

    cal = calibrate_room(
        [
            QAMeasurement(
                kv=q["kvp_kv"],
                filters=tuple(
                    FilterSpec(f["material"], f["thickness_mm"]) for f in q.get("filtration") or []
                ),
                distance_mm=q["distance_mm"],
                measured_output_ugy_per_mas=q["output_ugy_per_mas"],
                measured_hvl_mm_al=q.get("hvl_mm_al"),
            )
            for q in qa
        ],
        anode="W",
        anode_angle_deg=room.anode_angle_deg,
        ripple_percent=room.ripple_percent,
    )
    return m.RoomCalibrationRow(
        room_id=room.id,
        output_scale=cal.output_scale,
        output_scale_uncertainty_rel=cal.output_scale_uncertainty_rel,
        inherent_filtration_mm_al=cal.inherent_filtration_mm_al,
        residuals=[
            x.as_dict() if hasattr(x, "as_dict") else dict(x.__dict__) for x in cal.residuals
        ],
        n_measurements=len(qa),
    )


#: Listener processes the C-STORE rooms are sent to (a hospital may run several ingest nodes on
#: one database, DEPLOYMENT.md). Each runs as ``beamaudit listen`` does: it answers once an
#: object is in its spool, and a worker process of its own stores the spool in batches. The
#: workers' batches are the work, and most of it is reading the dose reports (pydicom's parse of
#: their content trees, seven tenths of a worker's time), which two workers do at once on two
#: cores; they take turns only to write. The demo's C-STORE phase, 1,994 objects: in CPU
#: seconds of all its processes, 117 s storing before each answer on two nodes, 59 s spooled
#: on two, 46 s spooled on one; in wall-clock seconds (2026-12-05, the one worker busy on one
#: core while the other idled) 34.5-36 s on one node, 21.7 s on two.
CSTORE_NODES = 2
_CALLING_AE = "DEMO_MODALITY"
_CALLED_AE = "BEAMAUDIT"
#: seconds the demo's senders wait for a C-STORE response before they abort (pynetdicom's default)
_DIMSE_TIMEOUT_S = 30.0
_NODE_TIMEOUT_S = 120.0
#: seconds a node's worker may take to store what is still spooled once the sends are done
_DRAIN_TIMEOUT_S = 600.0
#: objects a node's spool may hold before it refuses new ones (far more than the demo sends)
_MAX_SPOOLED = 1_000_000


def _node_context() -> (
    multiprocessing.context.SpawnContext | multiprocessing.context.ForkServerContext
):
    """A fork server (the listener processes inherit no database connection of this one)."""
    if "forkserver" not in multiprocessing.get_all_start_methods():
        return multiprocessing.get_context("spawn")
    return multiprocessing.get_context("forkserver")


def _listener_node(database_url: str, key: bytes, spool: str, conn: Connection) -> None:
    """One ingest node as ``beamaudit listen`` runs it, in its own process: a listener that
    answers once an object is in its spool (the file ``spool``), and the spool's worker process
    (``api/intake/spool_worker.py``) that parses and stores it in batches, completed (exam types,
    figures) as a folder scan's.

    Sends ``("port", n)`` once listening (or ``("error", text)``), then receives until anything
    is received on ``conn``; then the worker stores everything spooled and ends, and the node
    sends ``("left", objects still spooled)`` (0 unless storing failed).
    """
    from beamaudit.api.intake.pipeline import Pipeline
    from beamaudit.api.intake.spool_worker import SpoolWorkerProcess
    from beamaudit.api.intake.spooling import Spool, make_spooling_handler
    from beamaudit.api.store import make_engine, make_session_factory
    from beamaudit.ingest.listener import ListenerConfig, start_listener
    from beamaudit.ingest.pseudonym import Pseudonymiser

    try:
        engine = make_engine(database_url)  # the listener records the objects it refuses
        spooled = Spool(Path(spool))
        handler, _, _ = make_spooling_handler(
            spooled,
            Pipeline(make_session_factory(engine)),
            Pseudonymiser(key),
            max_spooled=_MAX_SPOOLED,
        )
        config = ListenerConfig(ae_title=_CALLED_AE, port=0, decode_values=False)
        listener = start_listener(config, handler)
    except Exception as exc:  # told to the demo, which ends with one line
        conn.send(("error", f"{type(exc).__name__}: {exc}"))
        return
    with listener:
        worker = SpoolWorkerProcess(
            {
                "spool": spool,
                "synchronous": "normal",
                "database_url": database_url,
                "key": key.hex(),
                "size_quiet_s": 30.0,  # as `listen`; the worker sizes what is left when it ends
                "max_spooled": _MAX_SPOOLED,
                "log_format": "text",
                "log_level": "WARNING",  # the demo prints its own summary
            }
        )
        conn.send(("port", listener.port))
        conn.recv()
    worker.close(_DRAIN_TIMEOUT_S)  # everything spooled is stored, then the worker ends
    left = spooled.count()
    spooled.close()
    engine.dispose()
    conn.send(("left", left))


class _Nodes:
    """Listener processes on free loopback ports, spooling into ``spool_dir``; :meth:`stop`
    waits until their workers have stored everything they acknowledged."""

    def __init__(self, database_url: str, key: bytes, count: int, spool_dir: Path) -> None:
        context = _node_context()
        self._procs: list[tuple[BaseProcess, Connection]] = []
        self.ports: list[int] = []
        try:
            for i in range(count):
                ours, theirs = context.Pipe()
                spool = str(spool_dir / f"node-{i + 1}.sqlite")
                proc = context.Process(
                    target=_listener_node, args=(database_url, key, spool, theirs), daemon=True
                )
                proc.start()
                theirs.close()
                self._procs.append((proc, ours))
            for _, conn in self._procs:
                self.ports.append(int(self._answer(conn, "port")))
        except BaseException:
            self.close()
            raise

    @staticmethod
    def _answer(conn: Connection, kind: str, timeout_s: float = _NODE_TIMEOUT_S) -> Any:
        if not conn.poll(timeout_s):
            raise DemoError(f"the demo's listener process gave no answer in {timeout_s:g} s")
        try:
            got, value = conn.recv()
        except EOFError:
            raise DemoError("the demo's listener process ended unexpectedly") from None
        if got != kind:
            raise DemoError(f"the demo's listener process failed: {value}")
        return value

    def stop(self) -> None:
        """Stop the listeners; return once their workers have stored what they spooled."""
        left = 0
        try:
            for _, conn in self._procs:
                conn.send("stop")
            for proc, conn in self._procs:
                left += int(self._answer(conn, "left", _DRAIN_TIMEOUT_S + _NODE_TIMEOUT_S))
                proc.join(_NODE_TIMEOUT_S)
        finally:
            self.close()
        if left:
            raise DemoError(
                f"{left} objects received by the demo's listeners could not be stored "
                "(the database was unavailable)"
            )

    def close(self) -> None:
        """End every listener process still running (after a failure)."""
        for proc, conn in self._procs:
            if proc.is_alive():
                proc.terminate()
                proc.join(10)
            conn.close()


@contextmanager
def _files_sent_undecoded() -> Iterator[None]:
    """Have pynetdicom send a file's data set as its bytes are (as a modality sends what it has
    stored), not decoded into a pydicom Dataset and encoded again: for a dose report of a few
    hundred content items that costs more than the listener's work. The flag is process-wide in
    pynetdicom; it is put back afterwards."""
    from pynetdicom import _config

    before = _config.STORE_SEND_CHUNKED_DATASET
    _config.STORE_SEND_CHUNKED_DATASET = True
    try:
        yield
    finally:
        _config.STORE_SEND_CHUNKED_DATASET = before


def _send_cstore(
    files: list[Path], port: int, sop_classes: list[str], rooms: dict[Path, str]
) -> Counter[str]:
    """Send ``files`` (Explicit VR Little Endian Part 10 files) on one association; ``rooms``
    names each file's room. A send that fails is a :class:`DemoError` naming the room and why."""
    from pydicom.uid import ExplicitVRLittleEndian
    from pynetdicom import AE

    from beamaudit.ingest.sender import open_association

    counts: Counter[str] = Counter()
    if not files:
        return counts
    ae = AE(ae_title=_CALLING_AE)
    ae.dimse_timeout = _DIMSE_TIMEOUT_S
    for uid in sop_classes:
        ae.add_requested_context(uid, [ExplicitVRLittleEndian])
    assoc = open_association(ae, "127.0.0.1", port, ae_title=_CALLED_AE)
    if not assoc.is_established:
        names = ", ".join(sorted({rooms.get(p, p.parent.name) for p in files}))
        raise DemoError(
            f"C-STORE from room(s) {names} failed: the demo's own listener on port {port} "
            "refused or did not answer the association"
        )
    try:
        for path in files:
            try:
                status = assoc.send_c_store(path)
            except (RuntimeError, OSError, ValueError) as exc:
                raise DemoError(_send_failure(path, rooms, counts, assoc, exc)) from None
            if "Status" not in status:  # no response: aborted, or the wait ran out
                deadline = time.monotonic() + 2.0  # the abort may still be on its way
                while assoc.is_established and not assoc.is_aborted and time.monotonic() < deadline:
                    time.sleep(0.05)
                failure = RuntimeError("no response to the C-STORE request")
                raise DemoError(_send_failure(path, rooms, counts, assoc, failure))
            code = int(status.Status)
            counts["success" if code == 0 else "failure"] += 1
    finally:
        if assoc.is_established:
            assoc.release()
    return counts


def _send_failure(
    path: Path, rooms: dict[Path, str], counts: Counter[str], assoc: Any, exc: Exception
) -> str:
    """One line: which room's send failed, after how many objects, and why."""
    if assoc.is_aborted or not (assoc.is_established or assoc.is_released):
        why = (
            f"the association was aborted (no answer within {_DIMSE_TIMEOUT_S:g} s, or the "
            "listener cut it off; on a heavily loaded machine, run the demo again when it is "
            "quieter)"
        )
    elif assoc.is_released:
        why = "the listener released the association before every object was sent"
    else:
        why = " ".join(str(exc).split()) or type(exc).__name__
    sent = sum(counts.values())
    room = rooms.get(path, path.parent.name)
    return (
        f"C-STORE from room {room} failed at {path.name} after {sent} objects on its "
        f"association: {why}"
    )


#: associations the demo opens to each listener at once: while one waits for its response
#: (the listener storing the object), another's next object is on its way
ASSOCIATIONS_PER_NODE = 3


def _send_all(
    files: list[Path],
    ports: list[int],
    sop_classes: list[str],
    rooms: dict[Path, str],
    *,
    per_port: int = ASSOCIATIONS_PER_NODE,
) -> Counter[str]:
    """Deal ``files`` over ``per_port`` associations to each port, all sending at once."""
    targets = [port for _ in range(per_port) for port in ports]
    n = len(targets)
    streams = [files[i::n] for i in range(n)]
    counts: Counter[str] = Counter()
    with _files_sent_undecoded(), ThreadPoolExecutor(max_workers=n) as pool:
        for c in pool.map(_send_cstore, streams, targets, [sop_classes] * n, [rooms] * n):
            counts.update(c)
    return counts


def _database_url(sessions: sessionmaker[Session]) -> str | None:
    """The URL another process can open the demo database with (None: an in-memory one)."""
    bind = sessions.kw.get("bind")
    url = getattr(bind, "url", None)
    if url is None or (
        url.get_backend_name() == "sqlite" and url.database in (None, "", ":memory:")
    ):
        return None
    return str(url.render_as_string(hide_password=False))


def run_demo(
    sessions: sessionmaker[Session],
    *,
    output: Path,
    months: int,
    seed: int,
    key: bytes,
    end_month: str | None = None,
    workers: int = 2,
    cstore_nodes: int = CSTORE_NODES,
) -> DemoOutcome:
    """Generate, ingest through the real paths, import levels, review every month.

    ``workers`` parser processes read the folder rooms; the C-STORE rooms go to
    ``cstore_nodes`` listener processes on the same database, each with its spool and the
    spool's worker process (0, or an in-memory database: one listener in this process, storing
    each object before it answers). ``DemoOutcome.timings`` has the seconds of every phase.
    """
    from beamaudit.api.demo.generate import generate_scenario
    from beamaudit.api.intake.pipeline import Pipeline
    from beamaudit.api.intake.postprocess import Completion
    from beamaudit.api.intake.scanning import scan_paths

    timings: dict[str, float] = {}
    phase = _phase_timer(timings)
    dicom = output / "dicom"
    with phase("generate"):
        generate_scenario(dicom, months=months, seed=seed, end_month=end_month)
        manifest = json.loads((dicom / "manifest.json").read_text(encoding="utf-8"))
    outcome = DemoOutcome(manifest=manifest, timings=timings)
    with phase("setup"):
        _setup(sessions, manifest)
    pipeline = Pipeline(sessions, completion=Completion())  # exam types and figures stored too
    folders = [dicom / r["path"] for r in manifest["rooms"] if r["delivery"] == "folder"]
    with phase("scan"):
        summary = scan_paths(
            [*folders, dicom / "broken"], pipeline=pipeline, key=key, workers=workers
        )
    outcome.scan = summary.as_dict()
    with phase("cstore"):
        outcome.cstore = _cstore(sessions, pipeline, dicom, manifest, key, cstore_nodes)
    with phase("reviews"):
        outcome.run_ids = _review_months(sessions, manifest)
    with phase("notify"):
        # only the outbox: the demo's findings are invented and must reach no one's mailbox
        outcome.outbox = output / "outbox.jsonl"
        outcome.notifications = _notify(sessions, outcome.outbox)
    with phase("collect"), sessions() as session:
        _collect(session, outcome)
    return outcome


def _setup(sessions: sessionmaker[Session], manifest: dict[str, Any]) -> None:
    """The rooms, the exam catalogue, and the national and the invented local level sets."""
    from beamaudit.api.review import load_demo_local_levels, load_national_levels
    from beamaudit.api.store.level_sets import add_level_sets
    from beamaudit.api.store.review_rows import ensure_catalogue

    _setup_rooms(sessions, manifest)
    with sessions.begin() as session:
        ensure_catalogue(session, actor="demo")
        add_level_sets(session, [*load_national_levels(), *load_demo_local_levels()], actor="demo")


def _cstore(
    sessions: sessionmaker[Session],
    pipeline: Pipeline,
    dicom: Path,
    manifest: dict[str, Any],
    key: bytes,
    nodes: int,
) -> dict[str, int]:
    """Send the C-STORE rooms' files to the demo's listeners; the counts of the answers. Returns
    once every acknowledged object is stored."""
    from beamaudit.api.intake.ct_sizing import ArrivalSizer, StudySizer
    from beamaudit.api.intake.receiving import make_store_handler
    from beamaudit.ingest.listener import ListenerConfig, start_listener
    from beamaudit.ingest.pseudonym import Pseudonymiser

    cstore_rooms = [r for r in manifest["rooms"] if r["delivery"] == "cstore"]
    room_of = {
        p: r["name"]
        for r in cstore_rooms
        for p in sorted((dicom / r["path"]).rglob("*"))
        if p.is_file()
    }
    files = list(room_of)
    sop_classes = sorted({uid for r in cstore_rooms for uid in r["sop_classes"]})
    url = _database_url(sessions) if nodes > 0 else None
    if url is None:  # an in-memory database: one listener in this process
        # CT images and localizers sized on arrival as `beamaudit listen` sizes them
        sizer = ArrivalSizer(StudySizer(sessions))
        handler = make_store_handler(pipeline, Pseudonymiser(key), sizer=sizer)
        with start_listener(ListenerConfig(ae_title=_CALLED_AE, port=0), handler) as listener:
            counts = _send_all(files, [listener.port], sop_classes, room_of)
        sizer.close()  # the studies still in their quiet time
        return dict(counts)
    # the spools hold the objects as sent until stored: a folder of this run's own
    with tempfile.TemporaryDirectory(prefix="beamaudit-demo-spool-") as spool_dir:
        listeners = _Nodes(url, key, nodes, Path(spool_dir))
        try:
            counts = _send_all(files, listeners.ports, sop_classes, room_of)
        except BaseException:
            listeners.close()
            raise
        listeners.stop()
    return dict(counts)


def _review_months(sessions: sessionmaker[Session], manifest: dict[str, Any]) -> dict[str, int]:
    """A monthly review of each month of the scenario (with the manifest's review parameters);
    the run id of each month."""
    from beamaudit.api.review import Period, ReviewParameters
    from beamaudit.api.runs.reviews import run_review

    params = manifest.get("review_parameters") or {}
    known = set(ReviewParameters.__dataclass_fields__)
    overrides: dict[str, Any] = {
        k: (tuple(v) if isinstance(v, list) else v) for k, v in params.items() if k in known
    }
    return {
        month: run_review(
            sessions,
            ReviewParameters(period=Period.parse(month), **overrides),
            kind="monthly",
            actor="demo",
        )
        for month in manifest["months"]
    }


def _notify(sessions: sessionmaker[Session], outbox: Path) -> list[dict[str, Any]]:
    """The nightly notification step, with no recipient: the digest goes to ``outbox``."""
    from beamaudit.api.runs.notify import notify_new_findings
    from beamaudit.api.settings import NotifySettings

    outbox.unlink(missing_ok=True)
    notify = NotifySettings(outbox=outbox, recipients={})
    deliveries = notify_new_findings(sessions, notify, trigger="nightly")
    return [d.__dict__ for d in deliveries]


def _collect(session: Session, outcome: DemoOutcome) -> None:
    """The reviews' flags by month, the ingest errors, and the recurrent-exposure list."""
    for month, run_id in outcome.run_ids.items():
        run = session.get(m.ReviewRun, run_id)
        for f in (run.result or {}).get("flags", []) if run else []:
            outcome.flags.append({**f, "period": month})
    outcome.ingest_errors = [
        {"source": e.source, "code": e.code, "reason": e.reason}
        for e in session.scalars(select(m.IngestError).order_by(m.IngestError.id))
    ]
    _collect_recurrent(session, outcome)


def _collect_recurrent(session: Session, outcome: DemoOutcome) -> None:
    """The recurrent-exposure list at the end of the months, and the planted studies' patient."""
    from datetime import date, timedelta

    from beamaudit.api.runs.recurrent import recurrent_exposure

    last = max(outcome.manifest["months"])
    year, month = (int(x) for x in last.split("-"))
    end = date(year + month // 12, month % 12 + 1, 1) - timedelta(days=1)
    outcome.recurrent = recurrent_exposure(session, as_of=end).patients
    uids = [
        u
        for p in outcome.manifest["planted_findings"]
        if p["kind"] == "recurrent_exposure"
        for u in p.get("study_instance_uids") or []
    ]
    if uids:
        outcome.recurrent_planted = {
            uid: key or ""
            for uid, key in session.execute(
                select(m.Study.study_instance_uid, m.Study.patient_pseudo_id).where(
                    m.Study.study_instance_uid.in_(uids)
                )
            )
        }


_KIND_OF_PLANT = {
    "dap_ratio": "dap_ratio_out_of_tolerance",
    "change_point": "changepoint",
    "unmapped_protocol": "unmapped_events",
}


def _room_of(flag: dict[str, Any]) -> str | None:
    return (flag.get("concerns") or {}).get("room")


def compare_with_plan(outcome: DemoOutcome) -> dict[str, Any]:
    """Each planted finding with the flags (or ingest errors) that found it; the unplanted flags."""
    rooms = {r["name"]: r["station_name"] for r in outcome.manifest["rooms"]}
    used: set[int] = set()
    found = []
    for plant in outcome.manifest["planted_findings"]:
        kind = _KIND_OF_PLANT.get(plant["kind"], plant["kind"])
        if kind == "recurrent_exposure":
            keys = set(outcome.recurrent_planted.values())
            hits = [p for p in outcome.recurrent if p["patient_key"] in keys]
            found.append(
                {
                    "plant": plant["id"],
                    "kind": kind,
                    "found": len(keys) == 1 and bool(hits),
                    "required": plant.get("required", True),
                    "by": [
                        f"{p['n_exams_in_window']} examinations, "
                        f"{p['cumulative_dose_msv']:.0f} mSv (estimate)"
                        for p in hits
                    ],
                }
            )
            continue
        if kind == "ingest_error":
            name = Path(plant.get("paths", [""])[0] or plant["id"]).name
            hits = [e for e in outcome.ingest_errors if Path(e["source"]).name == name]
            found.append(
                {
                    "plant": plant["id"],
                    "kind": kind,
                    "found": bool(hits),
                    "by": [e["reason"] for e in hits],
                }
            )
            continue
        station = rooms.get(plant.get("room") or "", plant.get("station_name"))
        uids = set(plant.get("study_instance_uids") or [])
        months = set((plant.get("expected") or {}).get("months") or [])  # the low-dose plant's
        hit_indices: list[int] = []
        for i, f in enumerate(outcome.flags):
            if f["kind"] != kind:
                continue
            where = f.get("concerns") or {}
            if uids and where.get("study_uid") not in uids:
                continue
            if months and f.get("period") not in months:
                continue
            if station and where.get("room") not in (station, None):
                continue
            if plant.get("exam_type") and where.get("exam_type") not in (plant["exam_type"], None):
                continue
            quantities = (plant.get("expected") or {}).get("quantities") or [plant.get("quantity")]
            if (
                kind == "changepoint"
                and plant.get("quantity")
                and where.get("quantity")
                not in (
                    *quantities,
                    None,
                )
            ):
                continue
            hit_indices.append(i)
        used.update(hit_indices)
        found.append(
            {
                "plant": plant["id"],
                "kind": kind,
                "found": bool(hit_indices),
                "required": plant.get("required", True),
                "by": [outcome.flags[i]["reason"] for i in hit_indices[:3]],
            }
        )
    unplanted = [f for i, f in enumerate(outcome.flags) if i not in used]
    return {"planted": found, "unplanted": unplanted}
