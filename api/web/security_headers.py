"""Security headers on every answer of the web application (pages, API, files).

* ``Content-Security-Policy``: everything from the service itself (``'self'``); no other
  origin's scripts, styles, images or frames; no plugins; forms post only here; the pages may
  not be framed (``frame-ancestors 'none'``). Inline scripts and styles stay allowed: the pages
  draw their figures with inline plotly calls, whose data are escaped (JSON in ``<script>``,
  markup in figure texts, :func:`beamaudit.dashboards.figure_text`).
* ``X-Frame-Options: DENY`` (older browsers), ``X-Content-Type-Options: nosniff``,
  ``Referrer-Policy: same-origin``, ``Cross-Origin-Opener-Policy: same-origin``.
* ``Cache-Control: no-store`` on every answer that did not set its own (answers carry dose
  records: no shared or browser cache keeps them); the static files keep theirs.

A plain ASGI middleware: it adds headers to the response start and touches nothing else.
"""

from __future__ import annotations

from collections.abc import Awaitable, Callable, MutableMapping
from typing import Any

__all__ = ["CONTENT_SECURITY_POLICY", "SECURITY_HEADERS", "SecurityHeaders"]

CONTENT_SECURITY_POLICY = "; ".join(
    (
        "default-src 'self'",
        "script-src 'self' 'unsafe-inline'",
        "style-src 'self' 'unsafe-inline'",
        "img-src 'self' data: blob:",
        "font-src 'self' data:",
        "connect-src 'self'",
        "object-src 'none'",
        "base-uri 'none'",
        "form-action 'self'",
        "frame-ancestors 'none'",
    )
)

SECURITY_HEADERS: tuple[tuple[bytes, bytes], ...] = (
    (b"content-security-policy", CONTENT_SECURITY_POLICY.encode()),
    (b"x-frame-options", b"DENY"),
    (b"x-content-type-options", b"nosniff"),
    (b"referrer-policy", b"same-origin"),
    (b"cross-origin-opener-policy", b"same-origin"),
)

Scope = MutableMapping[str, Any]
Message = MutableMapping[str, Any]
Receive = Callable[[], Awaitable[Message]]
Send = Callable[[Message], Awaitable[None]]


class SecurityHeaders:
    """ASGI middleware adding :data:`SECURITY_HEADERS` (and ``Cache-Control: no-store`` where
    the answer set none) to every HTTP response."""

    def __init__(self, app: Callable[[Scope, Receive, Send], Awaitable[None]]) -> None:
        self.app = app

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if scope["type"] != "http":
            await self.app(scope, receive, send)
            return

        async def send_with_headers(message: Message) -> None:
            if message["type"] == "http.response.start":
                headers = list(message.get("headers", []))
                present = {name.lower() for name, _ in headers}
                headers.extend(h for h in SECURITY_HEADERS if h[0] not in present)
                if b"cache-control" not in present:
                    headers.append((b"cache-control", b"no-store"))
                message["headers"] = headers
            await send(message)

        await self.app(scope, receive, send_with_headers)
