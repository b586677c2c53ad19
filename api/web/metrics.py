"""``/metrics``: the service's counts in the Prometheus text exposition format (version 0.0.4).

Most figures are read from the store when scraped, so every process that writes to it (scan,
listen, pull, nightly, serve, on one node or several) is counted, and a restart loses nothing:

==========================================  =======  ==========================================
metric                                      type     from
==========================================  =======  ==========================================
beamaudit_objects_received_total{via}       counter  source objects stored (scan, listen, ...)
beamaudit_objects_rejected_total{via}       counter  ingest errors recorded
beamaudit_events_stored_total               counter  exposure events
beamaudit_reconstruction_failures_total     counter  events whose beam and dose model failed
beamaudit_review_runs_total{kind,status}    counter  review runs
beamaudit_review_run_duration_seconds       summary  finished review runs (sum and count)
beamaudit_flags_total{kind,severity}        counter  flags raised by review runs
beamaudit_findings{kind,status}             gauge    findings by triage status
beamaudit_pull_duration_seconds{source}     gauge    each DICOMweb source's last pull
beamaudit_pull_errors{source}               gauge    objects its last pull could not use
beamaudit_pull_last_timestamp_seconds       gauge    when it last pulled (Unix time)
beamaudit_notifications_total{channel,..}   counter  digests sent and failed (delivery log)
beamaudit_listener_associations_total       counter  this listener process's associations
beamaudit_listener_spooled                  gauge    objects it acknowledged, not yet stored
==========================================  =======  ==========================================

The last two are counted in the ``listen`` process itself (:class:`AssociationCounter`, the
spool's count: :func:`spooled_family`) and shown on
the listener's own metrics address. No label carries a patient identifier, a URL or a secret:
sources are named by their name.

Guarded: off unless ``[metrics] enabled``; then ``/metrics`` on the service answers an admin
token, or, with ``bind`` (``listener_bind`` for ``listen``), a server of its own on that address
answers without a token (a private interface for the scraper).
"""

from __future__ import annotations

import logging
import math
import threading
from collections.abc import Callable, Iterable
from dataclasses import dataclass, field
from http.server import BaseHTTPRequestHandler, ThreadingHTTPServer
from typing import Any

from sqlalchemy import func, select
from sqlalchemy.orm import Session, sessionmaker

from beamaudit.api.store import models as m

__all__ = [
    "CONTENT_TYPE",
    "AssociationCounter",
    "Family",
    "render",
    "start_metrics_server",
    "store_families",
]

log = logging.getLogger(__name__)

#: the exposition format's media type (Prometheus text format 0.0.4)
CONTENT_TYPE = "text/plain; version=0.0.4; charset=utf-8"


@dataclass
class Family:
    """One metric: its name, type, help text and samples (``suffix``, labels, value)."""

    name: str
    type: str  # counter | gauge | summary
    help: str
    samples: list[tuple[str, dict[str, str], float]] = field(default_factory=list)

    def add(self, value: float, suffix: str = "", **labels: Any) -> Family:
        self.samples.append((suffix, {k: str(v) for k, v in labels.items()}, float(value)))
        return self


def _label_value(value: str) -> str:
    # the text format escapes backslash, double quote and line feed in label values
    return value.replace("\\", "\\\\").replace('"', '\\"').replace("\n", "\\n")


def _number(value: float) -> str:
    if math.isnan(value):
        return "NaN"
    if math.isinf(value):
        return "+Inf" if value > 0 else "-Inf"
    return repr(int(value)) if value.is_integer() and abs(value) < 2**53 else repr(value)


def render(families: Iterable[Family]) -> str:
    """The families in the text exposition format: ``# HELP``, ``# TYPE``, then one line per
    sample, ``name{label="value",...} value``."""
    lines: list[str] = []
    for fam in families:
        help_text = fam.help.replace("\\", "\\\\").replace("\n", "\\n")
        lines.append(f"# HELP {fam.name} {help_text}")
        lines.append(f"# TYPE {fam.name} {fam.type}")
        for suffix, labels, value in fam.samples:
            text = ",".join(f'{k}="{_label_value(v)}"' for k, v in sorted(labels.items()))
            lines.append(f"{fam.name}{suffix}{{{text}}} {_number(value)}" if text else
                         f"{fam.name}{suffix} {_number(value)}")  # fmt: skip
    return "\n".join(lines) + "\n"


def _counts(session: Session, fam: Family, **columns: Any) -> Family:
    """``fam`` with one sample per group of ``columns`` (label name = column), its row count."""
    cols = list(columns.values())
    for *values, n in session.execute(select(*cols, func.count()).group_by(*cols)):
        fam.add(n, **dict(zip(columns, values, strict=True)))
    return fam


def _count(session: Session, *where: Any, table: Any) -> int:
    return session.scalar(select(func.count()).select_from(table).where(*where)) or 0


def store_families(session: Session) -> list[Family]:
    """Every store-derived metric (see the module docstring)."""
    fams = [
        _counts(session, Family("beamaudit_objects_received_total", "counter",
                                "DICOM objects stored, by the path they came in by."),
                via=m.SourceObjectRow.received_via),
        _counts(session, Family("beamaudit_objects_rejected_total", "counter",
                                "Files and objects not used (ingest errors), by path."),
                via=m.IngestError.received_via),
        Family("beamaudit_events_stored_total", "counter", "Irradiation events stored.")
        .add(_count(session, table=m.ExposureEventRow)),
        Family("beamaudit_reconstruction_failures_total", "counter",
               "Events whose beam and dose reconstruction failed.")
        .add(_count(session, m.ExposureEventRow.recon_status == "failed",
                    table=m.ExposureEventRow)),
        _counts(session, Family("beamaudit_review_runs_total", "counter",
                                "Review runs, by kind and status."),
                kind=m.ReviewRun.kind, status=m.ReviewRun.status),
    ]  # fmt: skip
    durations = [
        (finished - started).total_seconds()
        for started, finished in session.execute(
            select(m.ReviewRun.started_at, m.ReviewRun.finished_at).where(
                m.ReviewRun.status == "done", m.ReviewRun.finished_at.is_not(None)
            )
        )
        if finished is not None
    ]
    fams += [
        Family("beamaudit_review_run_duration_seconds", "summary",
               "Seconds finished review runs took.")
        .add(sum(durations), "_sum").add(len(durations), "_count"),
        _counts(session, Family("beamaudit_flags_total", "counter",
                                "Flags raised by review runs."),
                kind=m.FlagRow.kind, severity=m.FlagRow.severity),
        _counts(session, Family("beamaudit_findings", "gauge",
                                "Findings, by kind and triage status."),
                kind=m.Finding.kind, status=m.Finding.status),
    ]  # fmt: skip
    duration = Family("beamaudit_pull_duration_seconds", "gauge",
                      "Seconds the last pull of each DICOMweb source took.")  # fmt: skip
    errors = Family("beamaudit_pull_errors", "gauge",
                    "Objects the last pull of each DICOMweb source could not use.")  # fmt: skip
    when = Family("beamaudit_pull_last_timestamp_seconds", "gauge",
                  "When each DICOMweb source was last pulled (Unix time).")  # fmt: skip
    failed = Family("beamaudit_pull_failed", "gauge",
                    "1 when the last pull of a source failed as a whole, else 0.")  # fmt: skip
    for name, at, report in session.execute(
        select(m.DicomwebSource.name, m.DicomwebSource.last_pull_at,
               m.DicomwebSource.last_pull_report)
    ):  # fmt: skip
        if at is None:
            continue
        report = report or {}
        when.add(at.timestamp(), source=name)
        errors.add(len(report.get("errors") or []), source=name)
        failed.add(1 if report.get("failed") else 0, source=name)
        if report.get("duration_s") is not None:
            duration.add(float(report["duration_s"]), source=name)
    fams += [duration, errors, when, failed]
    fams.append(
        _counts(session, Family("beamaudit_notifications_total", "counter",
                                "Digests of new findings, by channel and status (sent, failed)."),
                channel=m.NotificationDelivery.channel, status=m.NotificationDelivery.status)
    )  # fmt: skip
    return fams


class AssociationCounter:
    """Counts a listener's associations (accepted, rejected, released, aborted), thread-safe;
    :meth:`bind` hooks it to a running :class:`beamaudit.ingest.listener.Listener`."""

    RESULTS = ("accepted", "rejected", "released", "aborted")

    def __init__(self) -> None:
        self._lock = threading.Lock()
        self.counts = dict.fromkeys(self.RESULTS, 0)

    def count(self, result: str) -> None:
        with self._lock:
            self.counts[result] += 1

    def bind(self, listener: Any) -> None:
        from pynetdicom import evt

        for result, event in (
            ("accepted", evt.EVT_ACCEPTED),
            ("rejected", evt.EVT_REJECTED),
            ("released", evt.EVT_RELEASED),
            ("aborted", evt.EVT_ABORTED),
        ):
            listener.bind(event, lambda _event, result=result: self.count(result))

    def family(self) -> Family:
        fam = Family("beamaudit_listener_associations_total", "counter",
                     "Associations this listener process saw, by result.")  # fmt: skip
        with self._lock:
            for result, n in self.counts.items():
                fam.add(n, result=result)
        return fam


def spooled_family(spool: Any) -> Callable[[], Family]:
    """The listener's spool as a gauge: objects acknowledged (success answered) and not yet
    stored; they count in ``beamaudit_objects_received_total`` once stored."""

    def family() -> Family:
        fam = Family("beamaudit_listener_spooled", "gauge",
                     "Objects this listener acknowledged that are not stored yet.")  # fmt: skip
        fam.add(int(spool.pending))
        return fam

    return family


def collector(sessions: sessionmaker[Session], *extra: Callable[[], Family]) -> Callable[[], str]:
    """A function that renders the store's metrics and ``extra`` families now."""

    def collect() -> str:
        with sessions() as session:
            fams = store_families(session)
        return render([*fams, *(f() for f in extra)])

    return collect


def start_metrics_server(bind: str, collect: Callable[[], str]) -> ThreadingHTTPServer:
    """Serve ``GET /metrics`` (no token) on ``bind`` (``host:port``) in a daemon thread;
    ``server.shutdown()`` stops it. Anything else is 404."""
    host, _, port = bind.rpartition(":")

    class Handler(BaseHTTPRequestHandler):
        def do_GET(self) -> None:
            if self.path.split("?", 1)[0] != "/metrics":
                self.send_error(404)
                return
            try:
                body = collect().encode("utf-8")
            except Exception as exc:  # the store unreachable: the scraper sees the target down
                log.warning("metrics not collected: %s", type(exc).__name__)
                self.send_error(503)
                return
            self.send_response(200)
            self.send_header("Content-Type", CONTENT_TYPE)
            self.send_header("Content-Length", str(len(body)))
            self.end_headers()
            self.wfile.write(body)

        def log_message(self, format: str, *args: Any) -> None:
            pass

    server = ThreadingHTTPServer((host.strip("[]"), int(port)), Handler)
    server.daemon_threads = True
    threading.Thread(target=server.serve_forever, name="metrics", daemon=True).start()
    return server


def add_metrics_route(app: Any, settings: Any) -> None:
    """``GET /metrics`` on the service for an admin token, when ``[metrics] enabled`` and no
    address of its own is set."""
    if not settings.metrics.enabled or settings.metrics.bind:
        return
    from fastapi import Depends, Response
    from starlette.concurrency import run_in_threadpool

    from beamaudit.api.web.deps import require_role

    admin = Depends(require_role("admin"))

    @app.get("/metrics", include_in_schema=False)
    async def metrics(_: Any = admin) -> Response:
        text = await run_in_threadpool(collector(app.state.session_factory))
        return Response(text, media_type=CONTENT_TYPE)
