"""Real peers on loopback for the notification tests: an SMTP server (aiosmtpd) that requires
STARTTLS and a login, with a certificate made by openssl for 127.0.0.1; and a webhook receiver
(http.server) that checks the HMAC-SHA256 signature by itself, as a receiver would."""

from __future__ import annotations

import hashlib
import hmac
import json
import ssl
import subprocess
import threading
from collections.abc import Iterator
from contextlib import contextmanager
from dataclasses import dataclass, field
from http.server import BaseHTTPRequestHandler, ThreadingHTTPServer
from pathlib import Path
from typing import Any

from peers import free_port, require_peer, which_or_none


def self_signed(folder: Path) -> tuple[Path, Path]:
    """A certificate and key for 127.0.0.1 (openssl, one day)."""
    openssl = which_or_none("openssl")
    require_peer("openssl", openssl is not None, "apt-get install -y openssl")
    cert, key = folder / "smtp-cert.pem", folder / "smtp-key.pem"
    subprocess.run(
        [str(openssl), "req", "-x509", "-newkey", "rsa:2048", "-nodes", "-days", "1",
         "-subj", "/CN=127.0.0.1", "-addext", "subjectAltName=IP:127.0.0.1,DNS:localhost",
         "-keyout", str(key), "-out", str(cert)],
        check=True, capture_output=True, timeout=60,
    )  # fmt: skip
    return cert, key


@dataclass
class SmtpPeer:
    port: int
    cert: Path
    messages: list[Any] = field(default_factory=list)
    logins: list[str] = field(default_factory=list)


@contextmanager
def smtp_server(folder: Path, *, login: str, password: str) -> Iterator[SmtpPeer]:
    """aiosmtpd on 127.0.0.1: STARTTLS required, AUTH only after it, one login accepted."""
    from aiosmtpd.controller import Controller
    from aiosmtpd.smtp import AuthResult, LoginPassword

    cert, key = self_signed(folder)
    peer = SmtpPeer(free_port(), cert)

    class Handler:
        async def handle_DATA(self, server: Any, session: Any, envelope: Any) -> str:
            peer.messages.append(envelope)
            return "250 OK"

    def authenticator(server: Any, session: Any, envelope: Any, mechanism: str, data: Any) -> Any:
        ok = (
            isinstance(data, LoginPassword)
            and data.login == login.encode()
            and data.password == password.encode()
        )
        if ok:
            peer.logins.append(login)
        return AuthResult(success=ok, handled=False)  # the server answers 535 itself

    context = ssl.create_default_context(ssl.Purpose.CLIENT_AUTH)
    context.load_cert_chain(str(cert), str(key))
    controller = Controller(
        Handler(), hostname="127.0.0.1", port=peer.port, tls_context=context,
        require_starttls=True, authenticator=authenticator, auth_require_tls=True,
        server_hostname="127.0.0.1", ready_timeout=10,
    )  # fmt: skip
    controller.start()
    try:
        yield peer
    finally:
        controller.stop()


@dataclass
class WebhookPeer:
    url: str
    secret: bytes
    received: list[dict[str, Any]] = field(default_factory=list)
    verdicts: list[str] = field(default_factory=list)
    #: statuses to answer first, in order (then 204)
    script: list[int] = field(default_factory=list)


@contextmanager
def webhook_receiver(secret: bytes, script: list[int] | None = None) -> Iterator[WebhookPeer]:
    """An HTTP receiver on 127.0.0.1 that checks each POST's signature with ``secret``:
    HMAC-SHA256 over ``timestamp + "." + body``, written ``sha256=<hex>``."""
    port = free_port()
    url = f"http://127.0.0.1:{port}/hooks/beamaudit"
    peer = WebhookPeer(url, secret, script=list(script or []))

    class Receiver(BaseHTTPRequestHandler):
        def do_POST(self) -> None:
            body = self.rfile.read(int(self.headers.get("Content-Length", "0")))
            stamp = self.headers.get("X-Beamaudit-Timestamp", "")
            given = self.headers.get("X-Beamaudit-Signature", "")
            expected = (
                "sha256="
                + hmac.new(secret, stamp.encode() + b"." + body, hashlib.sha256).hexdigest()
            )
            if not hmac.compare_digest(given, expected):
                peer.verdicts.append("bad signature")
                self.send_response(401)
                self.end_headers()
                return
            peer.verdicts.append("good")
            status = peer.script.pop(0) if peer.script else 204
            if status < 300:
                peer.received.append(json.loads(body))
            self.send_response(status)
            self.end_headers()

        def log_message(self, format: str, *args: Any) -> None:
            pass

    server = ThreadingHTTPServer(("127.0.0.1", port), Receiver)
    thread = threading.Thread(target=server.serve_forever, daemon=True)
    thread.start()
    try:
        yield peer
    finally:
        server.shutdown()
        server.server_close()
