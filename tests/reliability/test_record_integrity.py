"""The record survives a server and command-line commands sharing one store.

A running ``beamaudit serve`` (a real uvicorn process) and command-line commands in processes of
their own write the same store. On SQLite each process's POSIX locks are its own: a second SQLite
library opened on the file inside the server (a driver with its own copy) drops the server's locks
when it closes the file, and the next command-line process to close then deletes the write-ahead
log under the server's feet: afterwards the server reads an old state and its writes are lost.
The exact sequence that showed it: the server draws ``/distributions`` (the review read), a
command-line write follows, a flag is acknowledged through the API, the server stops, and the
disk is read.

Data are invented (a fictional hospital).
"""

from __future__ import annotations

import os
import signal
import subprocess
import sys
import time
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path
from typing import Any

import httpx
import pytest
from corpus import dx_header, encode
from peers import free_port, wait_for_http
from procs import SharedStore, beamaudit_process, shared_store, start_beamaudit
from sqlalchemy import select

from beamaudit.api.review import Period, ReviewParameters
from beamaudit.api.runs.reviews import run_review
from beamaudit.api.store import models as m
from beamaudit.api.store.auth import create_token

BACKENDS = ["sqlite", pytest.param("postgresql", marks=pytest.mark.postgres)]
MONTH = "2024-03"  # the corpus headers' study date is 2024-03-05


def _export(folder: Path, names: list[str]) -> None:
    folder.mkdir(parents=True)
    for name in names:
        values: dict[str, object] = {}
        if name.endswith("-odd"):  # header text no mapping rule knows: an unmapped-events flag
            values = {
                "StudyDescription": "ZZ NOTHING",
                "ProtocolName": "ZZ",
                "BodyPartExamined": "ZZ",
            }
        (folder / name).write_bytes(encode(dx_header(name, **values)))


def _cli(store: SharedStore, *args: str) -> subprocess.CompletedProcess[str]:
    done = subprocess.run(
        [sys.executable, "-m", "beamaudit", *args],
        env=store.env(),
        capture_output=True,
        text=True,
        timeout=180,
    )
    assert done.returncode == 0, (args, done.stdout, done.stderr)
    return done


def _bearer(token: str) -> dict[str, str]:
    return {"Authorization": f"Bearer {token}"}


def _seed(store: SharedStore, tmp_path: Path) -> dict[str, object]:
    """Events of one month (scanned by the command line), its review, tokens; then no
    connection of this process stays open (it would hold the log in place and hide a loss)."""
    _export(tmp_path / "first", [f"first-{i}" for i in range(24)] + ["first-odd"])
    _cli(store, "scan", str(tmp_path / "first"))
    run_id = run_review(store.sessions, ReviewParameters(period=Period.parse(MONTH)))
    with store.sessions.begin() as session:
        run = session.get(m.ReviewRun, run_id)
        assert run is not None and run.status == "done", run and run.error
        flag_id = session.scalars(select(m.FlagRow.id).where(m.FlagRow.review_run_id == run_id))
        flag_ids = list(flag_id)
        _, physicist = create_token(session, role="physicist", name="physicist", actor="test")
        leaving_id, leaving = create_token(session, role="viewer", name="leaving", actor="test")
    assert flag_ids, "the review raised no flag to acknowledge"
    store.engine.dispose()
    return {
        "run_id": run_id,
        "flag_id": flag_ids[0],
        "physicist": physicist,
        "leaving_id": leaving_id,
        "leaving": leaving,
    }


def _stop(process: subprocess.Popen[bytes]) -> None:
    os.kill(process.pid, signal.SIGTERM)  # a graceful stop: uvicorn closes down, then exits
    process.wait(timeout=60)


@contextmanager
def _serving(
    store: SharedStore, tmp_path: Path
) -> Iterator[tuple[subprocess.Popen[bytes], httpx.Client]]:
    """``beamaudit serve`` (a real uvicorn process) answering on a free port, and a client of it;
    stopped gracefully when the block ends, if the block did not stop it."""
    port = free_port()
    base = f"http://127.0.0.1:{port}"
    serve = ["serve", "--host", "127.0.0.1", "--port", str(port)]
    with beamaudit_process(serve, store, tmp_path / "serve.log") as server:
        assert wait_for_http(f"{base}/api/v1/health", timeout_s=60)
        with httpx.Client(base_url=base, timeout=60) as client:
            yield server, client
        if server.poll() is None:
            _stop(server)


@pytest.mark.slow
@pytest.mark.parametrize("backend", BACKENDS)
def test_writes_after_distributions_and_a_command_line_write_reach_the_disk(
    backend: str, tmp_path: Path
) -> None:
    with shared_store(backend, tmp_path) as store:
        seeded = _seed(store, tmp_path)
        physicist = str(seeded["physicist"])
        with _serving(store, tmp_path) as (server, client):
            drawn = client.get("/distributions", headers=_bearer(physicist))
            assert drawn.status_code == 200, drawn.text[:500]
            # command-line writes in processes of their own, while the server runs
            created = _cli(store, "token", "create", "--role", "viewer", "--name", "new")
            new_token = created.stdout.strip().splitlines()[-1]
            _cli(store, "token", "revoke", str(seeded["leaving_id"]))
            _export(tmp_path / "second", [f"second-{i}" for i in range(5)])
            _cli(store, "scan", str(tmp_path / "second"))
            # the server sees each at once
            assert client.get("/api/v1/reviews", headers=_bearer(new_token)).status_code == 200
            revoked = client.get("/api/v1/reviews", headers=_bearer(str(seeded["leaving"])))
            assert revoked.status_code == 401
            events = client.get("/api/v1/events", params={"limit": 500}, headers=_bearer(physicist))
            assert events.status_code == 200
            assert len(events.json()["items"]) == 25 + 5
            # a flag acknowledged through the API
            path = f"/api/v1/reviews/{seeded['run_id']}/flags/{seeded['flag_id']}"
            changed = client.patch(
                path,
                json={"status": "acknowledged", "note": "known protocol; mapping on its way"},
                headers=_bearer(physicist),
            )
            assert changed.status_code == 200, changed.text
            assert changed.json()["status"] == "acknowledged"
            _stop(server)
            log = (tmp_path / "serve.log").read_text()
            # uvicorn stops gracefully, then ends by the signal it was sent
            assert server.returncode in (0, -signal.SIGTERM), log[-3000:]
            assert "Traceback" not in log, log[-3000:]
        # the disk, read afresh once the server has stopped
        store.engine.dispose()
        with store.sessions() as session:
            flag = session.get(m.FlagRow, seeded["flag_id"])
            assert flag is not None
            assert (flag.finding.status, flag.finding.note) == (
                "acknowledged",
                "known protocol; mapping on its way",
            )
            audited = session.scalars(
                select(m.AuditLogEntry).where(
                    m.AuditLogEntry.entity == "finding",
                    m.AuditLogEntry.entity_id == str(flag.finding_id),
                )
            ).all()
            assert [e.after["status"] for e in audited if e.after] == ["acknowledged"]
            n_events = session.scalar(
                select(m.ExposureEventRow.id).order_by(m.ExposureEventRow.id.desc()).limit(1)
            )
            assert n_events is not None and n_events >= 30
            tokens = {t.name: t for t in session.scalars(select(m.ApiToken))}
            assert tokens["leaving"].revoked_at is not None and "new" in tokens
            if backend == "sqlite":
                assert (
                    session.connection().exec_driver_sql("PRAGMA integrity_check").scalar() == "ok"
                )


@pytest.mark.slow
@pytest.mark.parametrize("backend", BACKENDS)
def test_tokens_made_and_revoked_on_the_command_line_count_at_once_on_a_running_server(
    backend: str, tmp_path: Path
) -> None:
    with shared_store(backend, tmp_path) as store:
        store.engine.dispose()
        with _serving(store, tmp_path) as (server, client):
            made = _cli(store, "token", "create", "--role", "viewer", "--name", "committee")
            token = made.stdout.strip().splitlines()[-1]
            token_id = made.stdout.split()[1]
            assert client.get("/api/v1/reviews", headers=_bearer(token)).status_code == 200
            client.get("/", headers=_bearer(token))  # a page drawn between the two
            _cli(store, "token", "revoke", token_id)
            assert client.get("/api/v1/reviews", headers=_bearer(token)).status_code == 401
            assert (
                client.get("/", headers=_bearer(token), follow_redirects=False).status_code == 303
            )
            _stop(server)


def _hold_the_run(store: SharedStore, run_id: int) -> Any:
    """A connection of this process holding what the review must write last: on SQLite the
    database's write lock, on PostgreSQL the run's row. Returns the connection (roll it back)."""
    if store.backend == "sqlite":
        import sqlite3

        path = store.url.removeprefix("sqlite:///")
        held = sqlite3.connect(path, isolation_level=None, timeout=30)
        held.execute("BEGIN IMMEDIATE")
        return held
    held = store.engine.raw_connection()
    cursor = held.cursor()
    cursor.execute("SELECT id FROM review_runs WHERE id = %s FOR UPDATE", (run_id,))
    return held


def _status(store: SharedStore, run_id: int, held: Any = None) -> tuple[str, str | None]:
    if held is not None and store.backend == "sqlite":  # inside the held transaction
        row = held.execute("SELECT status, error FROM review_runs WHERE id = ?", (run_id,))
        return tuple(row.fetchone())  # type: ignore[return-value]
    with store.sessions() as session:
        run = session.get(m.ReviewRun, run_id)
        assert run is not None
        return run.status, run.error


def _kill_a_running_review(store: SharedStore, tmp_path: Path) -> int:
    """Start ``beamaudit review``, catch it between its start and its result, SIGKILL it.

    The review stores its run as ``running`` first; this process then takes what the review
    must write last, so the review waits there, and is killed waiting. Returns the run's id.
    """
    for attempt in range(5):
        with store.sessions() as session:
            known = set(session.scalars(select(m.ReviewRun.id)))
        log = tmp_path / f"review-{attempt}.log"
        review = start_beamaudit(["review", "--month", MONTH], store, log)
        run_id = None
        deadline = time.monotonic() + 120
        while run_id is None and time.monotonic() < deadline and review.poll() is None:
            with store.sessions() as session:
                new = set(session.scalars(select(m.ReviewRun.id))) - known
            run_id = min(new) if new else None
            time.sleep(0.002)
        assert run_id is not None or review.returncode == 0, log.read_text()
        if run_id is None:
            continue  # it finished between two looks: try again
        store.engine.dispose()
        held = _hold_the_run(store, run_id)
        try:
            if _status(store, run_id, held)[0] != "running":
                review.wait(timeout=60)
                continue  # finished before the hold: try again
            time.sleep(0.5)  # the review reads, then waits for what is held
            os.kill(review.pid, signal.SIGKILL)
            review.wait(timeout=60)
        finally:
            held.rollback()
            held.close()
        return run_id
    pytest.fail("the review always finished before it could be held")


@pytest.mark.slow
@pytest.mark.parametrize("backend", BACKENDS)
def test_a_review_killed_mid_way_is_marked_failed_when_the_service_next_starts(
    backend: str, tmp_path: Path
) -> None:
    from beamaudit.api.runs.record import this_process

    with shared_store(backend, tmp_path) as store:
        _export(tmp_path / "first", [f"first-{i}" for i in range(24)] + ["first-odd"])
        _cli(store, "scan", str(tmp_path / "first"))
        # a run of a process still alive (this one) must be left alone
        with store.sessions.begin() as session:
            alive = m.ReviewRun(kind="monthly", period=MONTH, software_version="test",
                                status="running", runner=this_process())  # fmt: skip
            session.add(alive)
            session.flush()
            alive_id = alive.id
        killed = _kill_a_running_review(store, tmp_path)
        assert _status(store, killed) == ("running", None)  # what the kill left
        with _serving(store, tmp_path) as (server, _):
            _stop(server)
        status, error = _status(store, killed)
        assert status == "failed"
        assert error is not None and "did not finish" in error and "serve" in error
        assert _status(store, alive_id) == ("running", None)
        with store.sessions() as session:
            entries = session.scalars(
                select(m.AuditLogEntry).where(
                    m.AuditLogEntry.entity == "review_run",
                    m.AuditLogEntry.entity_id == str(killed),
                    m.AuditLogEntry.action == "fail",
                )
            ).all()
        assert len(entries) == 1
