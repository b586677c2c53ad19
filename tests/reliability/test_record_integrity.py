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
from pathlib import Path

import httpx
import pytest
from corpus import dx_header, encode
from peers import free_port, wait_for_http
from procs import SharedStore, beamaudit_process, shared_store
from sqlalchemy import select

from beamaudit.api.auth import create_token
from beamaudit.api.review import Period, ReviewParameters
from beamaudit.api.reviews import run_review
from beamaudit.api.store import models as m

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


@pytest.mark.slow
@pytest.mark.parametrize("backend", BACKENDS)
def test_writes_after_distributions_and_a_command_line_write_reach_the_disk(
    backend: str, tmp_path: Path
) -> None:
    with shared_store(backend, tmp_path) as store:
        seeded = _seed(store, tmp_path)
        physicist = str(seeded["physicist"])
        port = free_port()
        base = f"http://127.0.0.1:{port}"
        serve = ["serve", "--host", "127.0.0.1", "--port", str(port)]
        with beamaudit_process(serve, store, tmp_path / "serve.log") as server:
            assert wait_for_http(f"{base}/api/v1/health", timeout_s=60)
            with httpx.Client(base_url=base, timeout=60) as client:
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
                events = client.get(
                    "/api/v1/events", params={"limit": 500}, headers=_bearer(physicist)
                )
                assert events.status_code == 200
                assert len(events.json()["items"]) == 25 + 5
                # a flag acknowledged through the API
                path = f"/api/v1/reviews/{seeded['run_id']}/flags/{seeded['flag_id']}"
                changed = client.patch(
                    path,
                    json={"status": "acknowledged"},
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
            assert flag.status == "acknowledged"
            audited = session.scalars(
                select(m.AuditLogEntry).where(
                    m.AuditLogEntry.entity == "flag",
                    m.AuditLogEntry.entity_id == str(seeded["flag_id"]),
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
        port = free_port()
        base = f"http://127.0.0.1:{port}"
        serve = ["serve", "--host", "127.0.0.1", "--port", str(port)]
        with beamaudit_process(serve, store, tmp_path / "serve.log") as server:
            assert wait_for_http(f"{base}/api/v1/health", timeout_s=60)
            with httpx.Client(base_url=base, timeout=60) as client:
                made = _cli(store, "token", "create", "--role", "viewer", "--name", "committee")
                token = made.stdout.strip().splitlines()[-1]
                token_id = made.stdout.split()[1]
                assert client.get("/api/v1/reviews", headers=_bearer(token)).status_code == 200
                client.get("/", headers=_bearer(token))  # a page drawn between the two
                _cli(store, "token", "revoke", token_id)
                assert client.get("/api/v1/reviews", headers=_bearer(token)).status_code == 401
                assert (
                    client.get("/", headers=_bearer(token), follow_redirects=False).status_code
                    == 303
                )
            _stop(server)
