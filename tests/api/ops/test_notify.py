"""Notifications of new findings: the digest's rules, and delivery to real peers on loopback
(an SMTP server requiring STARTTLS and a login; a webhook receiver checking the HMAC-SHA256
signature), retries with backoff, the delivery log, the outbox, and ``nightly``.

The findings are invented (Hollowbrook General Hospital); what is checked is who is told what,
that no patient identifier and no secret leaves or is stored, and that a failing peer costs one
line and loses nothing. HMAC-SHA256: RFC 2104 with SHA-256 (FIPS 180-4); the receiver here
computes it with Python's ``hmac`` on its own.
"""

from __future__ import annotations

import json
import logging
import subprocess
import sys
from datetime import date
from email import message_from_bytes, policy
from pathlib import Path
from typing import Any

import pytest
from notify_peers import smtp_server, webhook_receiver
from peers import free_port
from sqlalchemy import select

from beamaudit.api.runs.findings import store_flags
from beamaudit.api.runs.notify import notify_new_findings, sign, verify_signature
from beamaudit.api.settings import load
from beamaudit.api.store import models as m

STUDY_UID = "1.2.826.0.1.3680043.8.498.77.1"
SECRET = "hook-secret-not-for-logs"
PASSWORD = "smtp-password-not-for-logs"


def _flags() -> list[dict[str, Any]]:
    group = {"site": "Hollowbrook General Hospital (invented)", "exam_type": "chest_pa",
             "quantity": "dap_gy_cm2"}  # fmt: skip
    return [
        {"kind": "group_above_level", "severity": "action",
         "reason": "RAD A chest PA: median DAP 0.21 Gy·cm² above the local level 0.15 (invented)",
         "numbers": {"median": 0.21, "level": 0.15, "level_set": "Local"},
         "concerns": {**group, "room": "RAD A"}},
        {"kind": "exam_above_investigation_level", "severity": "warning",
         "reason": f"study {STUDY_UID}: DAP 1.9 Gy·cm², 4 x the level (invented)",
         "numbers": {"value": 1.9, "ratio": 4.0},
         "concerns": {**group, "room": "RAD B", "study_uid": STUDY_UID}},
        {"kind": "low_dose_review", "severity": "info", "reason": "RAD B low (invented)",
         "numbers": {"median": 0.02}, "concerns": {**group, "room": "RAD B"}},
    ]  # fmt: skip


def _review(sessions: Any, flags: list[dict[str, Any]] | None = None) -> int:
    with sessions.begin() as session:
        session.merge(
            m.ExamTypeRow(
                code="chest_pa",
                name="Chest PA",
                modality="DX",
                level_applies_per="projection",
                quantities=["dap_gy_cm2"],
            )
        )
        run = m.ReviewRun(
            kind="monthly", period="2026-11", period_start=date(2026, 11, 1),
            period_end=date(2026, 12, 1), software_version="test", status="done",
        )  # fmt: skip
        session.add(run)
        session.flush()
        store_flags(session, run, flags if flags is not None else _flags())
        return run.id


def _settings(tmp_path: Path, store: Any, **notify: Any) -> Any:
    notify.setdefault("outbox", tmp_path / "outbox.jsonl")
    notify.setdefault("public_base_url", "https://dose.hollowbrook.example")
    notify.setdefault("backoff_s", 0.5)
    return load(database_url=store.url, notify=notify)


def _every_stored_value(sessions: Any) -> str:
    with sessions() as session:
        rows = session.scalars(select(m.NotificationDelivery)).all()
        columns = [c.key for c in m.NotificationDelivery.__table__.columns]
        return json.dumps([{c: getattr(r, c) for c in columns} for r in rows], default=str)


def test_the_outbox_takes_every_new_finding_once_when_nothing_is_configured(store, tmp_path):
    _review(store.session_factory)
    settings = _settings(tmp_path, store)
    [delivery] = notify_new_findings(store.session_factory, settings.notify, trigger="nightly")
    assert (delivery.channel, delivery.status, delivery.findings) == ("outbox", "sent", 3)
    [line] = (tmp_path / "outbox.jsonl").read_text().splitlines()
    digest = json.loads(line)
    assert digest["schema"] == "beamaudit.findings-digest/1"
    assert [f["severity"] for f in digest["findings"]] == ["action", "warning", "info"]
    assert digest["findings"][0]["link"].startswith(
        "https://dose.hollowbrook.example/flags?kind=group_above_level&period=2026-11&room=RAD+A"
    )
    assert "qualified medical physicist" in digest["caution"]
    assert STUDY_UID not in line and "study_uid" not in line  # no patient identifier
    assert notify_new_findings(store.session_factory, settings.notify, trigger="nightly") == []
    _review(store.session_factory)  # the same findings found again: nothing new
    assert notify_new_findings(store.session_factory, settings.notify, trigger="nightly") == []


def test_rules_choose_kinds_severities_and_rooms_per_recipient(store, tmp_path):
    _review(store.session_factory)
    settings = _settings(tmp_path, store, recipients={
        "committee": {"role": "committee", "min_severity": "action"},
        "rad_b": {"role": "room lead", "rooms": ["RAD B"], "min_severity": "info"},
        "physics": {"kinds": ["exam_above_investigation_level"], "quiet_digest": True},
    })  # fmt: skip
    sent = notify_new_findings(store.session_factory, settings.notify, trigger="review")
    assert {(d.recipient, d.findings) for d in sent} == {
        ("committee", 1),
        ("rad_b", 2),
        ("physics", 1),
    }
    again = notify_new_findings(store.session_factory, settings.notify, trigger="review")
    assert [(d.recipient, d.findings) for d in again] == [("physics", 0)]  # quiet digest asked


def test_smtp_with_starttls_and_login_on_loopback(store, tmp_path, caplog):
    caplog.set_level(logging.DEBUG)
    _review(store.session_factory)
    with smtp_server(tmp_path, login="beamaudit", password=PASSWORD) as peer:
        settings = _settings(tmp_path, store, smtp={
            "host": "127.0.0.1", "port": peer.port, "security": "starttls",
            "username": "beamaudit", "password": PASSWORD,
            "sender": "beamaudit@hollowbrook.example", "ca_file": str(peer.cert),
        }, recipients={"physics": {"emails": ["physics@hollowbrook.example"]}})  # fmt: skip
        [delivery] = notify_new_findings(store.session_factory, settings.notify, trigger="nightly")
    assert delivery.status == "sent", delivery.error
    assert peer.logins == ["beamaudit"]
    [envelope] = peer.messages
    assert envelope.rcpt_tos == ["physics@hollowbrook.example"]
    mail = message_from_bytes(envelope.content, policy=policy.default)
    assert mail["Subject"] == "beamaudit: 2 new findings, 1 needing action"
    text = mail.get_body(("plain",)).get_content()
    assert "[Action] Median above a level (November 2026): RAD A, Chest PA, DAP (Gy·cm²)" in text
    assert "numbers: median 0.21; level 0.15; level set Local" in text
    assert "https://dose.hollowbrook.example/flags?" in text
    [attachment] = list(mail.iter_attachments())
    assert json.loads(attachment.get_content())["new_findings"] == 2
    assert STUDY_UID not in envelope.content.decode("utf-8", "replace")
    assert PASSWORD not in caplog.text and PASSWORD not in _every_stored_value(
        store.session_factory
    )


def test_a_mail_server_down_costs_one_line_after_the_retries(store, tmp_path):
    run_id = _review(store.session_factory)
    waits: list[float] = []
    settings = _settings(tmp_path, store, attempts=3, smtp={
        "host": "127.0.0.1", "port": free_port(), "sender": "beamaudit@hollowbrook.example",
    }, recipients={"physics": {"emails": ["physics@hollowbrook.example"]}})  # fmt: skip
    [delivery] = notify_new_findings(
        store.session_factory, settings.notify, trigger="nightly", sleep=waits.append
    )
    assert (delivery.status, delivery.attempts, waits) == ("failed", 3, [0.5, 1.0])
    assert "\n" not in delivery.line()
    assert delivery.line().startswith("notifying physics by smtp failed after 3 attempts: ")
    assert "cannot reach the mail server 127.0.0.1" in delivery.line()
    with store.session_factory() as session:
        assert session.get(m.ReviewRun, run_id) is not None  # the review is kept
        [row] = session.scalars(select(m.NotificationDelivery)).all()
        assert (row.status, row.attempts) == ("failed", 3)


def test_a_refused_login_is_not_retried(store, tmp_path):
    _review(store.session_factory)
    waits: list[float] = []
    with smtp_server(tmp_path, login="beamaudit", password=PASSWORD) as peer:
        settings = _settings(tmp_path, store, smtp={
            "host": "127.0.0.1", "port": peer.port, "username": "beamaudit",
            "password": "wrong", "sender": "beamaudit@hollowbrook.example",
            "ca_file": str(peer.cert),
        }, recipients={"physics": {"emails": ["physics@hollowbrook.example"]}})  # fmt: skip
        [delivery] = notify_new_findings(
            store.session_factory, settings.notify, trigger="nightly", sleep=waits.append
        )
    assert (delivery.status, delivery.attempts, waits) == ("failed", 1, [])
    assert "refused the login (535)" in (delivery.error or "")
    assert peer.messages == []


def test_webhook_signed_and_retried_after_503(store, tmp_path, caplog, monkeypatch):
    caplog.set_level(logging.DEBUG)
    monkeypatch.setenv("BEAMAUDIT_NOTIFY__RECIPIENTS__ONCALL__WEBHOOK__SECRET", SECRET)
    _review(store.session_factory)
    waits: list[float] = []
    with webhook_receiver(SECRET.encode(), script=[503]) as peer:
        settings = _settings(tmp_path, store, recipients={
            "oncall": {"webhook": {"url": peer.url}, "min_severity": "warning"}
        })  # fmt: skip
        assert settings.notify.recipients["oncall"].webhook.key() == SECRET.encode()  # from env
        [delivery] = notify_new_findings(
            store.session_factory, settings.notify, trigger="nightly", sleep=waits.append
        )
    assert (delivery.status, delivery.attempts, waits) == ("sent", 2, [0.5])
    assert peer.verdicts == ["good", "good"]
    [digest] = peer.received
    assert digest["new_findings"] == 2 and digest["trigger"] == "nightly"
    assert STUDY_UID not in json.dumps(digest)
    assert SECRET not in caplog.text and SECRET not in _every_stored_value(store.session_factory)


def test_a_webhook_with_another_secret_refuses_and_the_findings_stay_new(store, tmp_path):
    _review(store.session_factory)
    with webhook_receiver(b"the receiver's own secret") as peer:
        settings = _settings(tmp_path, store, recipients={
            "oncall": {"webhook": {"url": peer.url, "secret": SECRET}}})  # fmt: skip
        [failed] = notify_new_findings(store.session_factory, settings.notify, trigger="nightly")
        assert (failed.status, failed.attempts, peer.verdicts) == ("failed", 1, ["bad signature"])
        origin = peer.url.rsplit("/hooks", 1)[0]
        assert failed.error == f"the webhook {origin} answered 401"
    with webhook_receiver(SECRET.encode()) as peer:
        settings = _settings(tmp_path, store, recipients={
            "oncall": {"webhook": {"url": peer.url, "secret": SECRET}}})  # fmt: skip
        [sent] = notify_new_findings(store.session_factory, settings.notify, trigger="nightly")
    assert (sent.status, sent.findings) == ("sent", 2)  # the same findings, sent this time


def test_signature_check_refuses_a_changed_body_and_an_old_timestamp() -> None:
    key, body = b"k", b'{"new_findings":1}'
    header = sign(key, 1_800_000_000, body)
    assert verify_signature(key, "1800000000", body, header, now=1_800_000_010) == (True, "")
    assert not verify_signature(key, "1800000000", body + b" ", header, now=1_800_000_010)[0]
    assert not verify_signature(key, "1800000000", body, header, now=1_800_001_000)[0]
    assert not verify_signature(b"other", "1800000000", body, header, now=1_800_000_010)[0]


def test_a_webhook_url_must_be_https_and_hold_no_login() -> None:
    from beamaudit.api.settings import SettingsError

    with pytest.raises(SettingsError, match="must be https://"):
        load(notify={"recipients": {"x": {"webhook": {"url": "http://hooks.example/x",
                                                       "secret": "s"}}}})  # fmt: skip
    with pytest.raises(SettingsError, match="no login inside a webhook URL"):
        load(notify={"recipients": {"x": {"webhook": {"url": "https://u:p@hooks.example/x",
                                                       "secret": "s"}}}})  # fmt: skip


def test_nightly_sends_the_digest_and_a_failing_webhook_exits_2(store, tmp_path):
    _review(store.session_factory)  # findings of an earlier review, not yet told
    url = store.url
    if store.backend == "postgresql":  # the command's own engine, in the test's schema
        schema = str(store.connect_args["options"]).split("=", 1)[1]
        url += ("&" if "?" in url else "?") + f"options=-csearch_path%3D{schema}"
    env = {"PATH": "/usr/bin:/bin", "BEAMAUDIT_DATABASE_URL": url,
           "BEAMAUDIT_SECRET_KEY_PATH": str(tmp_path / "key"),
           "BEAMAUDIT_NOTIFY__OUTBOX": str(tmp_path / "outbox.jsonl")}  # fmt: skip

    def nightly(**more: str) -> subprocess.CompletedProcess[str]:
        return subprocess.run(
            [sys.executable, "-m", "beamaudit", "nightly"], env={**env, **more},
            capture_output=True, text=True, timeout=120,
        )  # fmt: skip

    ok = nightly()
    assert ok.returncode == 0, ok.stderr
    assert "notified outbox by outbox" in ok.stdout
    [line] = (tmp_path / "outbox.jsonl").read_text().splitlines()
    assert json.loads(line)["trigger"] == "nightly"
    _review(store.session_factory, [{**_flags()[0], "concerns": {"room": "RAD C"}}])
    failing = nightly(
        BEAMAUDIT_NOTIFY__RECIPIENTS__ONCALL__WEBHOOK__URL=f"http://127.0.0.1:{free_port()}/x",
        BEAMAUDIT_NOTIFY__RECIPIENTS__ONCALL__WEBHOOK__SECRET=SECRET,
        BEAMAUDIT_NOTIFY__ATTEMPTS="1",
    )
    assert failing.returncode == 2
    [problem] = [x for x in failing.stderr.splitlines() if x.strip()]
    assert problem.startswith("failed: notify oncall by webhook: cannot reach the webhook")
    assert SECRET not in failing.stdout + failing.stderr
