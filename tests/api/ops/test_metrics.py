"""``/metrics``: the Prometheus text exposition format, read back by the Prometheus project's
own parser (``prometheus_client.parser``, as a scraper reads it); the counts from the store; the
guard (off by default, an admin token, or an address of its own); the listener's associations
counted by a real association on loopback. Invented rows."""

from __future__ import annotations

import urllib.request
from datetime import UTC, date, datetime, timedelta
from typing import Any

import pytest
from peers import free_port
from prometheus_client.parser import text_string_to_metric_families
from pynetdicom import AE

from beamaudit.api.runs.findings import store_flags
from beamaudit.api.store import models as m
from beamaudit.api.web.metrics import (
    AssociationCounter,
    Family,
    collector,
    render,
    start_metrics_server,
)


def _samples(text: str) -> dict[tuple[str, tuple[tuple[str, str], ...]], float]:
    return {
        (s.name, tuple(sorted(s.labels.items()))): s.value
        for fam in text_string_to_metric_families(text)
        for s in fam.samples
    }


def _seed(sessions: Any) -> None:
    now = datetime.now(UTC)
    with sessions.begin() as session:
        for i, via in enumerate(["scan", "scan", "listen"]):
            session.add(m.SourceObjectRow(
                sop_instance_uid=f"1.2.826.0.1.3680043.8.498.90.{i}", sop_class_uid="1.2",
                kind="image_header", received_via=via))  # fmt: skip
        session.add(m.IngestError(received_via="pull", source="https://pacs/x", code="unreadable",
                                  reason="not DICOM"))  # fmt: skip
        run = m.ReviewRun(kind="nightly", period="2026-11", period_start=date(2026, 11, 1),
                          period_end=date(2026, 12, 1), software_version="t", status="done",
                          started_at=now - timedelta(seconds=12), finished_at=now)  # fmt: skip
        session.add(run)
        session.add(m.DicomwebSource(name="main PACS", url="https://pacs.example/dicomweb",
                                     last_pull_at=now, last_pull_report={
                                         "errors": [{"source": "a", "reason": "b"}],
                                         "duration_s": 3.5}))  # fmt: skip
        session.add(m.NotificationDelivery(recipient="outbox", channel="outbox", target="f",
                                           trigger="nightly", status="sent", attempts=1,
                                           findings=1, digest_sha256="0" * 64))  # fmt: skip
        session.flush()
        store_flags(session, run, [{"kind": "no_dose_data", "severity": "warning",
                                    "reason": "invented", "numbers": {"n_events": 2},
                                    "concerns": {"room": "RAD A"}}])  # fmt: skip


def test_render_escapes_label_values_and_help() -> None:
    text = render([Family("x_total", "counter", 'a "help"\nline').add(2, source='a"b\\c\nd')])
    assert text == (
        '# HELP x_total a "help"\\nline\n# TYPE x_total counter\n'
        'x_total{source="a\\"b\\\\c\\nd"} 2\n'
    )
    [(name, labels)] = [(k[0], dict(k[1])) for k in _samples(text)]
    assert (name, labels) == ("x_total", {"source": 'a"b\\c\nd'})


def test_store_metrics_parse_as_prometheus_reads_them(store) -> None:
    _seed(store.session_factory)
    samples = _samples(collector(store.session_factory)())
    assert samples[("beamaudit_objects_received_total", (("via", "scan"),))] == 2
    assert samples[("beamaudit_objects_received_total", (("via", "listen"),))] == 1
    assert samples[("beamaudit_objects_rejected_total", (("via", "pull"),))] == 1
    assert samples[("beamaudit_events_stored_total", ())] == 0
    runs = ("beamaudit_review_runs_total", (("kind", "nightly"), ("status", "done")))
    assert samples[runs] == 1
    assert samples[("beamaudit_review_run_duration_seconds_count", ())] == 1
    assert samples[("beamaudit_review_run_duration_seconds_sum", ())] == pytest.approx(12, abs=1)
    flag = ("beamaudit_flags_total", (("kind", "no_dose_data"), ("severity", "warning")))
    assert samples[flag] == 1
    assert samples[("beamaudit_findings", (("kind", "no_dose_data"), ("status", "open")))] == 1
    assert samples[("beamaudit_pull_duration_seconds", (("source", "main PACS"),))] == 3.5
    assert samples[("beamaudit_pull_errors", (("source", "main PACS"),))] == 1
    assert samples[("beamaudit_pull_failed", (("source", "main PACS"),))] == 0
    sent = ("beamaudit_notifications_total", (("channel", "outbox"), ("status", "sent")))
    assert samples[sent] == 1


def test_metrics_route_is_off_by_default_and_needs_an_admin_token(store, tmp_path) -> None:
    from api_support import make_api

    for api in make_api(store, tmp_path):
        assert api.client.get("/metrics").status_code == 404  # off by default
    for api in make_api(store, tmp_path, metrics={"enabled": True}):
        assert api.client.get("/metrics").status_code == 401
        viewer = {"Authorization": f"Bearer {api.tokens['viewer']}"}
        assert api.client.get("/metrics", headers=viewer).status_code == 403
        admin = {"Authorization": f"Bearer {api.tokens['admin']}"}
        reply = api.client.get("/metrics", headers=admin)
        assert reply.status_code == 200
        assert reply.headers["content-type"] == "text/plain; version=0.0.4; charset=utf-8"
        assert ("beamaudit_events_stored_total", ()) in _samples(reply.text)


def test_an_address_of_its_own_serves_without_token_and_counts_associations(store) -> None:
    from beamaudit.ingest.listener import ListenerConfig, StoreOutcome, start_listener

    counter = AssociationCounter()
    with start_listener(ListenerConfig(port=0), lambda r: StoreOutcome.stored()) as listener:
        counter.bind(listener)
        ae = AE(ae_title="DR_ROOM1")
        ae.add_requested_context("1.2.840.10008.1.1")
        assoc = ae.associate("127.0.0.1", listener.port, ae_title="BEAMAUDIT")
        assert assoc.is_established and assoc.send_c_echo().Status == 0
        assoc.release()
        bind = f"127.0.0.1:{free_port()}"
        server = start_metrics_server(bind, collector(store.session_factory, counter.family))
        try:
            with urllib.request.urlopen(f"http://{bind}/metrics", timeout=10) as reply:
                text = reply.read().decode()
            with pytest.raises(urllib.error.HTTPError, match="404"):
                urllib.request.urlopen(f"http://{bind}/other", timeout=10)
        finally:
            server.shutdown()
            server.server_close()
    samples = _samples(text)
    key = "beamaudit_listener_associations_total"
    assert samples[(key, (("result", "accepted"),))] == 1
    assert samples[(key, (("result", "released"),))] == 1
    assert samples[(key, (("result", "rejected"),))] == 0


def test_the_listener_counts_what_its_spool_holds(tmp_path) -> None:
    from corpus import dx_header, encode

    from beamaudit.api.intake.spooling import Spool, SpooledObject
    from beamaudit.api.web.metrics import render, spooled_family

    spool = Spool(tmp_path / "spool.sqlite")
    for i in range(3):
        ds = dx_header(f"metrics-spooled-{i}")
        spool.put(SpooledObject("DR_ROOM1", "127.0.0.1", str(ds.SOPClassUID),
                                str(ds.SOPInstanceUID), encode(ds)))  # fmt: skip
    samples = _samples(render([spooled_family(spool)()]))
    assert samples[("beamaudit_listener_spooled", ())] == 3
    spool.done(spool.take(limit=2))
    assert _samples(render([spooled_family(spool)()]))[("beamaudit_listener_spooled", ())] == 1
    spool.close()
