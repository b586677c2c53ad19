"""Helpers for tests that need a peer program (dcmtk, Orthanc, PostgreSQL, Chromium).

A missing peer skips the test on a laptop, with the reason printed (``pytest -ra``), and fails
it when ``CI=true``: on CI a missing peer is a broken install step, never a green run.

Import from any test as ``from peers import require_peer`` (``tests/conftest.py`` puts this
folder on ``sys.path``).

Every peer is talked to on 127.0.0.1 only, on a free port found by binding to port 0.
"""

from __future__ import annotations

import os
import shutil
import socket
import time
import urllib.error
import urllib.request

import pytest

__all__ = [
    "free_port",
    "in_ci",
    "require_peer",
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
