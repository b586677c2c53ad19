"""Where a digest goes: a mail server (SMTP), a webhook (HTTPS POST signed with HMAC-SHA256), or
the outbox file. Each ``send_*`` raises :class:`DeliveryError` with a one-line reason, saying
whether another attempt may help (``temporary``); it never logs a secret or the digest.

The webhook's signature
-----------------------
Headers ``X-Beamaudit-Timestamp`` (Unix seconds) and ``X-Beamaudit-Signature``
(``sha256=`` + hex HMAC-SHA256, RFC 2104 with SHA-256 of FIPS 180-4) computed with the shared
secret over the bytes ``timestamp + "." + body``. A receiver recomputes it over the body as
received, compares in constant time and refuses a timestamp older than a few minutes (a
replayed request): :func:`verify_signature` does exactly that.
"""

from __future__ import annotations

import hashlib
import hmac
import json
import os
import smtplib
import ssl
import time
from email.message import EmailMessage
from email.utils import formatdate, make_msgid
from pathlib import Path

from beamaudit.api.errors import ApiError
from beamaudit.api.runs.notify.digest import Digest
from beamaudit.api.settings import SmtpSettings, WebhookSettings

__all__ = [
    "SIGNATURE_HEADER",
    "TIMESTAMP_HEADER",
    "DeliveryError",
    "post_webhook",
    "send_smtp",
    "sign",
    "verify_signature",
    "write_outbox",
]

SIGNATURE_HEADER = "X-Beamaudit-Signature"
TIMESTAMP_HEADER = "X-Beamaudit-Timestamp"
#: HTTP answers after which another attempt may succeed
_RETRY_STATUSES = frozenset({408, 425, 429, 500, 502, 503, 504})


class DeliveryError(ApiError):
    """A digest could not be delivered; ``reason`` is one line, ``temporary`` says whether a
    later attempt may succeed."""

    def __init__(self, reason: str, *, temporary: bool) -> None:
        super().__init__(reason)
        self.reason = reason
        self.temporary = temporary


def sign(key: bytes, timestamp: int, body: bytes) -> str:
    """The signature header's value: ``sha256=`` + HMAC-SHA256(key, timestamp "." body)."""
    mac = hmac.new(key, str(timestamp).encode("ascii") + b"." + body, hashlib.sha256)
    return "sha256=" + mac.hexdigest()


def verify_signature(
    key: bytes,
    timestamp: str,
    body: bytes,
    signature: str,
    *,
    tolerance_s: float = 300.0,
    now: float | None = None,
) -> tuple[bool, str]:
    """Check a received digest: ``(True, "")``, or ``(False, why)``."""
    if not timestamp.isdigit():
        return False, "the timestamp is not a number of seconds"
    age = (time.time() if now is None else now) - int(timestamp)
    if abs(age) > tolerance_s:
        return False, f"the timestamp is {age:.0f} s away from now"
    if not hmac.compare_digest(sign(key, int(timestamp), body), signature):
        return False, "the signature does not match the body"
    return True, ""


def send_smtp(smtp: SmtpSettings, to: list[str], digest: Digest) -> None:
    """Mail the digest (plain text, the JSON attached) to ``to`` through ``smtp``."""
    message = EmailMessage()
    message["From"] = smtp.sender
    message["To"] = ", ".join(to)
    message["Subject"] = digest.subject()
    message["Date"] = formatdate(localtime=False)
    message["Message-ID"] = make_msgid(domain=smtp.sender.rpartition("@")[2] or None)
    message.set_content(digest.text())
    message.add_attachment(
        digest.body(), maintype="application", subtype="json", filename="findings-digest.json"
    )
    context = ssl.create_default_context(cafile=str(smtp.ca_file) if smtp.ca_file else None)
    try:
        client: smtplib.SMTP
        if smtp.security == "tls":
            client = smtplib.SMTP_SSL(smtp.host, smtp.port, timeout=smtp.timeout_s, context=context)
        else:
            client = smtplib.SMTP(smtp.host, smtp.port, timeout=smtp.timeout_s)
        with client:
            client.ehlo()
            if smtp.security == "starttls":
                if not client.has_extn("starttls"):
                    raise DeliveryError(
                        f"the mail server {smtp.host}:{smtp.port} offers no STARTTLS",
                        temporary=False,
                    )
                client.starttls(context=context)
                client.ehlo()
            password = smtp.secret()
            if smtp.username and password is not None:
                client.login(smtp.username, password)
            refused = client.send_message(message)
    except smtplib.SMTPAuthenticationError as exc:
        raise DeliveryError(
            f"the mail server {smtp.host} refused the login ({exc.smtp_code})", temporary=False
        ) from None
    except smtplib.SMTPResponseException as exc:
        raise DeliveryError(
            f"the mail server {smtp.host} answered {exc.smtp_code}",
            temporary=400 <= exc.smtp_code < 500,
        ) from None
    except smtplib.SMTPRecipientsRefused as exc:
        raise DeliveryError(
            f"the mail server {smtp.host} refused every recipient ({len(exc.recipients)})",
            temporary=False,
        ) from None
    except ssl.SSLError as exc:
        raise DeliveryError(
            f"TLS with the mail server {smtp.host} failed: {exc.reason or 'handshake'}",
            temporary=False,
        ) from None
    except (OSError, smtplib.SMTPException) as exc:
        what = getattr(exc, "strerror", None) or type(exc).__name__
        raise DeliveryError(
            f"cannot reach the mail server {smtp.host}:{smtp.port}: {what}", temporary=True
        ) from None
    if refused:
        raise DeliveryError(
            f"the mail server {smtp.host} refused {len(refused)} of {len(to)} recipients",
            temporary=False,
        )


def post_webhook(hook: WebhookSettings, digest: Digest, *, now: float | None = None) -> int:
    """POST the digest's JSON to the webhook, signed; returns the HTTP status (2xx)."""
    import requests

    body = digest.body()
    timestamp = int(time.time() if now is None else now)
    headers = {
        "Content-Type": "application/json",
        "User-Agent": f"beamaudit/{digest.software_version}",
        TIMESTAMP_HEADER: str(timestamp),
        SIGNATURE_HEADER: sign(hook.key(), timestamp, body),
    }
    verify: str | bool = str(hook.ca_file) if hook.ca_file else True
    host = _host(hook.url)
    try:
        reply = requests.post(
            hook.url, data=body, headers=headers, timeout=hook.timeout_s, verify=verify,
            allow_redirects=False,  # the signed digest goes to the configured address only
        )  # fmt: skip
    except requests.exceptions.SSLError:
        raise DeliveryError(f"TLS with the webhook {host} failed", temporary=False) from None
    except requests.RequestException as exc:
        raise DeliveryError(
            f"cannot reach the webhook {host}: {type(exc).__name__}", temporary=True
        ) from None
    if not 200 <= reply.status_code < 300:
        raise DeliveryError(
            f"the webhook {host} answered {reply.status_code}",
            temporary=reply.status_code in _RETRY_STATUSES,
        )
    return reply.status_code


def _host(url: str) -> str:
    """The URL without its path and query (which may carry a token of the receiver's)."""
    from urllib.parse import urlsplit

    parts = urlsplit(url)
    return f"{parts.scheme}://{parts.netloc}"


def write_outbox(path: Path, digest: Digest, *, reason: str) -> None:
    """Append the digest as one JSON line to the outbox file (created readable by its owner
    only), with why it is there."""
    line = json.dumps(
        {"outbox_reason": reason, "subject": digest.subject(), **digest.as_json()}, default=str
    )
    try:
        path.parent.mkdir(parents=True, exist_ok=True)
        fd = os.open(path, os.O_WRONLY | os.O_APPEND | os.O_CREAT, 0o600)
        with os.fdopen(fd, "a", encoding="utf-8") as out:
            out.write(line + "\n")
    except OSError as exc:
        raise DeliveryError(
            f"cannot write the outbox {path}: {exc.strerror}", temporary=False
        ) from None
