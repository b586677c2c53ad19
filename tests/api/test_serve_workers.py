"""``beamaudit serve --workers N``: N uvicorn processes making the app from the settings the
command was given (a ``--config`` file), ending with the serving process however it ends."""

from __future__ import annotations

import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import httpx
import pytest
from peers import free_port, wait_for_http

pytestmark = pytest.mark.skipif(not sys.platform.startswith("linux"), reason="Linux only")


def _children(pid: int) -> list[int]:
    found = subprocess.run(["pgrep", "-P", str(pid)], capture_output=True, text=True)
    return [int(p) for p in found.stdout.split()]


def _alive(pid: int) -> bool:
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    stat = Path(f"/proc/{pid}/stat")
    return not (stat.exists() and stat.read_text().split()[2] == "Z")


def test_workers_serve_the_configured_store_and_end_with_a_killed_server(tmp_path: Path) -> None:
    config = tmp_path / "settings.toml"
    config.write_text(f'database_url = "sqlite:///{tmp_path / "store.db"}"\n')
    env = {k: v for k, v in os.environ.items() if not k.startswith("BEAMAUDIT_")}
    port = free_port()
    log = (tmp_path / "serve.log").open("wb")
    server = subprocess.Popen(
        [sys.executable, "-m", "beamaudit", "--config", str(config), "serve",
         "--port", str(port), "--workers", "2"],
        cwd=tmp_path, env=env, stdout=log, stderr=subprocess.STDOUT, start_new_session=True,
    )  # fmt: skip
    workers: list[int] = []
    try:
        assert wait_for_http(f"http://127.0.0.1:{port}/api/v1/health", timeout_s=120)
        workers = _children(server.pid)
        assert len(workers) >= 2  # two workers (and multiprocessing's resource tracker)
        # the workers use the configured store, not the default file in the working folder
        assert not (tmp_path / "beamaudit.db").exists()
        os.kill(server.pid, signal.SIGKILL)  # no chance to stop its workers itself
        server.wait(timeout=30)
        deadline = time.monotonic() + 60
        while any(_alive(p) for p in workers) and time.monotonic() < deadline:
            time.sleep(0.2)
        assert not any(_alive(p) for p in workers), (tmp_path / "serve.log").read_text()[-2000:]
        with pytest.raises(httpx.TransportError):
            httpx.get(f"http://127.0.0.1:{port}/api/v1/health", timeout=2)
    finally:
        for pid in [server.pid, *workers]:
            if _alive(pid):
                os.kill(pid, signal.SIGKILL)
        server.wait(timeout=30)
        log.close()
