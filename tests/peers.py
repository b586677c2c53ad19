"""Helpers for tests that need a peer program (dcmtk, Orthanc, PostgreSQL, Chromium).

A missing peer skips the test on a laptop, with the reason printed (``pytest -ra``), and fails
it when ``CI=true``: on CI a missing peer is a broken install step, never a green run.

Import from any test as ``from peers import require_peer`` (``tests/conftest.py`` puts this
folder on ``sys.path``).

Every peer is talked to on 127.0.0.1 only, on a free port found by binding to port 0.
"""

from __future__ import annotations

import json
import os
import shutil
import socket
import subprocess
import time
import urllib.error
import urllib.request
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import pytest

__all__ = [
    "ORTHANC_DICOMWEB_PLUGIN",
    "OrthancPeer",
    "free_port",
    "in_ci",
    "orthanc_missing",
    "require_peer",
    "start_orthanc",
    "wait_for_http",
    "wait_for_tcp",
    "which_or_none",
]

LOOPBACK = "127.0.0.1"


def in_ci() -> bool:
    """True when the tests run on CI (``CI=true`` in the environment)."""
    return os.environ.get("CI") == "true"


def require_peer(name: str, available: bool, reason: str) -> None:
    """Skip with the reason printed on a laptop; fail when CI=true (a missing peer is a CI failure).

    Parameters
    ----------
    name : str
        The peer, as a person would name it (``"dcmtk storescu"``, ``"Orthanc"``).
    available : bool
        Whether the peer was found; nothing happens when it was.
    reason : str
        What is missing and how to get it (``"apt-get install -y dcmtk"``).
    """
    if available:
        return
    message = f"peer {name} not available: {reason}"
    if in_ci():
        pytest.fail(f"CI=true and {message}", pytrace=False)
    pytest.skip(message)


def which_or_none(program: str) -> str | None:
    """The full path of ``program`` on PATH (or in /usr/sbin, /usr/bin), or None."""
    found = shutil.which(program)
    if found is not None:
        return found
    # Debian installs some servers in /usr/sbin (Orthanc), which is not on every user's PATH.
    return shutil.which(
        program, path="/usr/local/sbin:/usr/local/bin:/usr/sbin:/usr/bin:/sbin:/bin"
    )


def free_port() -> int:
    """A TCP port on 127.0.0.1 that was free a moment ago (the OS picks it: bind to port 0).

    Another process may take it between this call and the peer's bind; peers started with it
    should report a failed bind clearly, and tests start them right after asking.
    """
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as sock:
        sock.bind((LOOPBACK, 0))
        port: int = sock.getsockname()[1]
        return port


def wait_for_tcp(port: int, *, timeout_s: float = 10.0, host: str = LOOPBACK) -> bool:
    """Poll until something accepts TCP connections on ``host:port``; False after ``timeout_s``."""
    deadline = time.monotonic() + timeout_s
    while time.monotonic() < deadline:
        try:
            with socket.create_connection((host, port), timeout=0.5):
                return True
        except OSError:
            time.sleep(0.05)
    return False


def wait_for_http(url: str, *, timeout_s: float = 20.0) -> bool:
    """Poll ``url`` (loopback only) until it answers 200; False after ``timeout_s``."""
    if not url.startswith(("http://127.0.0.1:", "http://localhost:")):
        raise ValueError(f"tests talk to loopback peers only, not {url!r}")
    deadline = time.monotonic() + timeout_s
    while time.monotonic() < deadline:
        try:
            with urllib.request.urlopen(url, timeout=1.0) as response:
                if response.status == 200:
                    return True
        except (urllib.error.URLError, ConnectionError, TimeoutError):
            pass
        time.sleep(0.1)
    return False


# --------------------------------------------------------------------------- Orthanc

ORTHANC_DICOMWEB_PLUGIN = Path("/usr/share/orthanc/plugins/libOrthancDicomWeb.so")


def orthanc_missing() -> str | None:
    """Why Orthanc with its DICOMweb plugin cannot be started here, or None when it can."""
    missing = []
    if which_or_none("Orthanc") is None:
        missing.append("Orthanc (apt-get install -y orthanc)")
    if not ORTHANC_DICOMWEB_PLUGIN.exists():
        missing.append(f"{ORTHANC_DICOMWEB_PLUGIN} (apt-get install -y orthanc-dicomweb)")
    return "; ".join(missing) or None


@dataclass
class OrthancPeer:
    """An Orthanc started for a test session: its own configuration and storage in a temporary
    folder, HTTP on a free loopback port, no DICOM port, no remote access, no authentication.

    Orthanc 1.10.1 has no option to bind HTTP to one address: it listens on all interfaces but,
    with ``RemoteAccessAllowed: false``, answers only requests from this machine; tests talk to
    it on 127.0.0.1 only.
    """

    process: subprocess.Popen[bytes]
    http_port: int
    folder: Path
    log_path: Path

    @property
    def url(self) -> str:
        """The REST API root."""
        return f"http://{LOOPBACK}:{self.http_port}"

    @property
    def dicomweb_url(self) -> str:
        """The DICOMweb root (QIDO-RS, WADO-RS, STOW-RS)."""
        return f"{self.url}/dicom-web"

    def upload(self, data: bytes) -> dict[str, Any]:
        """Store one Part 10 object through the REST API (``POST /instances``); Orthanc's reply."""
        request = urllib.request.Request(
            f"{self.url}/instances",
            data=data,
            method="POST",
            headers={"Content-Type": "application/dicom"},
        )
        with urllib.request.urlopen(request, timeout=10) as response:
            reply: dict[str, Any] = json.loads(response.read())
        if reply.get("Status") not in ("Success", "AlreadyStored"):
            raise RuntimeError(f"Orthanc refused the upload: {reply}")
        return reply

    def log_tail(self, lines: int = 30) -> str:
        """The end of Orthanc's log, for failure messages."""
        try:
            return "\n".join(self.log_path.read_text(errors="replace").splitlines()[-lines:])
        except OSError:
            return "(no log)"

    def stop(self) -> None:
        """Stop Orthanc (SIGTERM, then SIGKILL after 10 s) and wait for it."""
        if self.process.poll() is not None:
            return
        self.process.terminate()
        try:
            self.process.wait(timeout=10)
        except subprocess.TimeoutExpired:
            self.process.kill()
            self.process.wait(timeout=10)


def start_orthanc(folder: Path, *, timeout_s: float = 20.0, attempts: int = 3) -> OrthancPeer:
    """Start Orthanc with the DICOMweb plugin in ``folder``; the caller must :meth:`stop` it.

    The free port may be taken by someone else before Orthanc binds it: then Orthanc exits and
    another port is tried, ``attempts`` times in all.
    """
    binary = which_or_none("Orthanc")
    if binary is None:
        raise RuntimeError("Orthanc is not installed")
    last_log = ""
    for attempt in range(attempts):
        port = free_port()
        storage = folder / f"storage-{attempt}"
        storage.mkdir(parents=True, exist_ok=True)
        config = {
            "Name": "beamaudit-test",
            "StorageDirectory": str(storage),
            "IndexDirectory": str(storage),
            "HttpServerEnabled": True,
            "HttpPort": port,
            "RemoteAccessAllowed": False,
            "AuthenticationEnabled": False,
            "DicomServerEnabled": False,
            "ConcurrentJobs": 1,
            "SaveJobs": False,
            "LoadPrivateDictionary": False,
            "Plugins": [str(ORTHANC_DICOMWEB_PLUGIN)],
            "DicomWeb": {"Enable": True, "Root": "/dicom-web/", "EnableWado": False, "Ssl": False},
        }
        config_path = folder / f"orthanc-{attempt}.json"
        config_path.write_text(json.dumps(config, indent=2))
        log_path = folder / f"orthanc-{attempt}.log"
        with log_path.open("wb") as log:
            process = subprocess.Popen(
                [binary, str(config_path)], stdout=log, stderr=subprocess.STDOUT, cwd=folder
            )
        peer = OrthancPeer(process, port, folder, log_path)
        deadline = time.monotonic() + timeout_s
        while time.monotonic() < deadline and process.poll() is None:
            if wait_for_http(f"{peer.url}/system", timeout_s=0.5):
                return peer
        peer.stop()
        last_log = peer.log_tail()
    raise RuntimeError(f"Orthanc did not start in {attempts} attempts; its log ends:\n{last_log}")
