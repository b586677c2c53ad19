"""A small DICOMweb origin server on loopback, scripted to misbehave (the pull's attack tests).

It answers the QIDO-RS searches and WADO-RS metadata requests a pull sends (PS3.18 10.6, 10.4)
from a list of studies of invented DX headers, and can instead: answer every request with one
status (503), drip its answers one byte at a time, send a huge answer, redirect elsewhere, or ask
for HTTP Basic credentials. Every request is recorded with its ``Authorization`` header.
"""

from __future__ import annotations

import base64
import json
import threading
import time
from collections.abc import Iterator
from contextlib import contextmanager
from dataclasses import dataclass, field
from http.server import BaseHTTPRequestHandler, ThreadingHTTPServer
from typing import Any
from urllib.parse import urlsplit

__all__ = ["FakePacs", "Study", "dx_metadata", "fake_pacs"]

DX_PRESENTATION = "1.2.840.10008.5.1.4.1.1.1.1"


def dx_metadata(sop_uid: str, study_uid: str, series_uid: str, study_date: str,
                **extra: dict[str, Any]) -> dict[str, Any]:  # fmt: skip
    """The DICOM JSON of an invented DX header (demo data), with ``extra`` elements by tag."""

    def el(vr: str, *values: Any) -> dict[str, Any]:
        return {"vr": vr, "Value": list(values)}

    meta = {
        "00080016": el("UI", DX_PRESENTATION),
        "00080018": el("UI", sop_uid),
        "00080020": el("DA", study_date),
        "00080030": el("TM", "101500"),
        "00080060": el("CS", "DX"),
        "00080070": el("LO", "Invented Medical"),
        "00081010": el("SH", "RAD1"),
        "00100010": el("PN", {"Alphabetic": "Quillfeather^Zephyrine"}),
        "00100020": el("LO", "MRN-88412-QX"),
        "00100040": el("CS", "F"),
        "00180015": el("CS", "CHEST"),
        "00180060": el("DS", 81),
        "00181152": el("IS", 10),
        "00185101": el("CS", "PA"),
        "0020000D": el("UI", study_uid),
        "0020000E": el("UI", series_uid),
    }
    meta.update(extra)
    return meta


@dataclass
class Study:
    uid: str
    date: str  # YYYYMMDD
    instances: list[dict[str, Any]] = field(default_factory=list)
    series_uid: str = ""

    def __post_init__(self) -> None:
        self.series_uid = self.series_uid or self.uid + ".1"


@dataclass
class FakePacs:
    """The server's script and what it saw. Change the attributes while it runs."""

    studies: list[Study] = field(default_factory=list)
    status: int | None = None  # answer every request with this status
    drip_s: float = 0.0  # seconds between the bytes of every answer
    huge_bytes: int = 0  # the study search answers this many bytes
    redirect_to: str | None = None  # every request is redirected here (302, same path)
    basic_auth: tuple[str, str] | None = None  # required credentials
    seen: list[tuple[str, str | None]] = field(default_factory=list)  # (path, Authorization)
    url: str = ""
    stop: threading.Event = field(default_factory=threading.Event)

    def answer(self, path: str) -> tuple[int, Any]:
        parts = [p for p in path.split("/") if p][1:]  # after "dicom-web"
        if parts == ["studies"]:
            return 200, [
                {"0020000D": {"vr": "UI", "Value": [s.uid]},
                 "00080020": {"vr": "DA", "Value": [s.date]},
                 "00080061": {"vr": "CS", "Value": ["DX"]}}
                for s in self.studies
            ]  # fmt: skip
        study = next((s for s in self.studies if len(parts) > 1 and s.uid == parts[1]), None)
        if study is None:
            return 404, None
        if parts[2:] == ["series"]:
            return 200, [{"0020000E": {"vr": "UI", "Value": [study.series_uid]},
                          "00080060": {"vr": "CS", "Value": ["DX"]}}]  # fmt: skip
        if parts[2:] == ["series", study.series_uid, "instances"]:
            return 200, [{k: i[k] for k in ("00080016", "00080018")} for i in study.instances]
        if parts[2:] == ["series", study.series_uid, "metadata"]:
            return 200, study.instances
        if len(parts) == 7 and parts[6] == "metadata":
            return 200, [i for i in study.instances if i["00080018"]["Value"][0] == parts[5]]
        return 404, None


def _handler(pacs: FakePacs) -> type[BaseHTTPRequestHandler]:
    class Handler(BaseHTTPRequestHandler):
        protocol_version = "HTTP/1.1"

        def do_GET(self) -> None:
            path = urlsplit(self.path).path
            pacs.seen.append((path, self.headers.get("Authorization")))
            if pacs.redirect_to is not None:
                self._send(302, b"", {"Location": pacs.redirect_to + self.path})
                return
            if pacs.basic_auth is not None:
                expected = "Basic " + base64.b64encode(":".join(pacs.basic_auth).encode()).decode()
                if self.headers.get("Authorization") != expected:
                    self._send(401, b"", {"WWW-Authenticate": 'Basic realm="pacs"'})
                    return
            if pacs.status is not None:
                self._send(pacs.status, b"")
                return
            if pacs.huge_bytes and path.endswith("/studies"):
                self._send_huge(pacs.huge_bytes)
                return
            status, body = pacs.answer(path)
            payload = b"" if body is None else json.dumps(body).encode()
            self._send(status if body or status != 200 else 204, payload)

        def _send(self, status: int, payload: bytes, headers: dict[str, str] | None = None) -> None:
            self.send_response(status)
            self.send_header("Content-Type", "application/dicom+json")
            self.send_header("Content-Length", str(len(payload)))
            for key, value in (headers or {}).items():
                self.send_header(key, value)
            self.end_headers()
            if pacs.drip_s:
                for i in range(len(payload)):
                    if pacs.stop.wait(pacs.drip_s):
                        return
                    self.wfile.write(payload[i : i + 1])
                    self.wfile.flush()
            else:
                self.wfile.write(payload)

        def _send_huge(self, size: int) -> None:
            self.send_response(200)
            self.send_header("Content-Type", "application/dicom+json")
            self.send_header("Content-Length", str(size))
            self.end_headers()
            chunk = b"[" + b" " * (1024 * 1024 - 1)
            sent = 0
            try:
                while sent < size and not pacs.stop.is_set():
                    part = chunk[: min(len(chunk), size - sent)]
                    self.wfile.write(part)
                    sent += len(part)
                    chunk = b" " * len(chunk)
            except OSError:
                pass  # the client gave up: what the test wants

        def log_message(self, format: str, *args: Any) -> None:
            pass

    return Handler


@contextmanager
def fake_pacs(**script: Any) -> Iterator[FakePacs]:
    """A running :class:`FakePacs` on 127.0.0.1 (its ``url`` ends in ``/dicom-web``)."""
    pacs = FakePacs(**script)
    server = ThreadingHTTPServer(("127.0.0.1", 0), _handler(pacs))
    server.daemon_threads = True
    pacs.url = f"http://127.0.0.1:{server.server_address[1]}/dicom-web"
    thread = threading.Thread(target=server.serve_forever, daemon=True)
    thread.start()
    try:
        yield pacs
    finally:
        pacs.stop.set()
        server.shutdown()
        server.server_close()
        time.sleep(0)
