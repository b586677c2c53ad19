"""Send each recipient the digest of its new findings, retrying with backoff, and log each
delivery in ``notification_deliveries``.

Rules: a recipient with e-mail addresses is mailed through ``[notify.smtp]`` (when no mail server
is configured, the digest goes to the outbox instead); a recipient with a webhook is POSTed to;
with no recipient configured at all, one digest of every new finding goes to the outbox. A quiet
digest (nothing new) is sent only to recipients that ask for it (``quiet_digest``); the outbox
default writes none. A failed delivery is logged with its one-line reason and changes nothing
else: the review is stored already, and the next digest to that recipient lists the same
findings again.
"""

from __future__ import annotations

import logging
import time
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path

from sqlalchemy.orm import Session, sessionmaker

from beamaudit.api.runs.notify.channels import DeliveryError, post_webhook, send_smtp, write_outbox
from beamaudit.api.runs.notify.digest import Digest, build_digest
from beamaudit.api.settings import OUTBOX_NAME, NotifyRecipient, NotifySettings
from beamaudit.api.store import models as m

__all__ = ["OUTBOX_RECIPIENT", "Delivery", "notify_and_log", "notify_new_findings"]

log = logging.getLogger(__name__)

#: the recipient name of the outbox default (no recipient configured)
OUTBOX_RECIPIENT = "outbox"


@dataclass(frozen=True)
class Delivery:
    """What became of one digest."""

    recipient: str
    channel: str
    target: str
    status: str  # sent | failed
    findings: int
    attempts: int
    error: str | None = None

    def line(self) -> str:
        """One line for the console."""
        what = f"{self.findings} new finding{'s' if self.findings != 1 else ''}"
        if self.status == "sent":
            return f"notified {self.recipient} by {self.channel} ({self.target}): {what}"
        return (
            f"notifying {self.recipient} by {self.channel} failed after {self.attempts} "
            f"attempt{'s' if self.attempts != 1 else ''}: {self.error}"
        )


def outbox_file(notify: NotifySettings) -> Path:
    """The outbox file: the setting (``Settings`` puts it beside the store by default)."""
    return notify.outbox if notify.outbox is not None else Path(OUTBOX_NAME)


def _routes(notify: NotifySettings, rule: NotifyRecipient) -> list[tuple[str, str]]:
    """(channel, target) pairs of one recipient."""
    routes: list[tuple[str, str]] = []
    if rule.emails:
        if notify.smtp is not None:
            routes.append(("smtp", ", ".join(rule.emails)))
        else:
            routes.append(("outbox", str(outbox_file(notify))))
    if rule.webhook is not None:
        routes.append(("webhook", rule.webhook.url.split("?", 1)[0]))
    if not routes:
        routes.append(("outbox", str(outbox_file(notify))))
    return routes


def _attempt(
    send: Callable[[], object], attempts: int, backoff_s: float, sleep: Callable[[float], None]
) -> tuple[int, str | None]:
    """Try ``send`` up to ``attempts`` times (waiting backoff, 2 x backoff, ...) while its
    failure is temporary; (attempts made, None) or (attempts made, the last reason)."""
    for n in range(1, attempts + 1):
        try:
            send()
            return n, None
        except DeliveryError as exc:
            if not exc.temporary or n == attempts:
                return n, exc.reason
            sleep(backoff_s * 2 ** (n - 1))
    raise AssertionError("unreachable")


def notify_new_findings(
    sessions: sessionmaker[Session],
    notify: NotifySettings,
    *,
    trigger: str,
    review_run_id: int | None = None,
    sleep: Callable[[float], None] = time.sleep,
) -> list[Delivery]:
    """Build and send every recipient's digest; returns one :class:`Delivery` per route.

    Never raises for a delivery that failed (its reason is in the result and the log); a
    database that cannot be read raises as usual.
    """
    if not notify.enabled:
        return []
    recipients = dict(notify.recipients) or {
        OUTBOX_RECIPIENT: NotifyRecipient(role="outbox", min_severity="info")
    }
    done: list[Delivery] = []
    for name, rule in recipients.items():
        with sessions() as session:
            digest = build_digest(
                session, name, rule, base_url=notify.public_base_url, trigger=trigger,
                review_run_id=review_run_id, max_items=notify.max_items,
            )  # fmt: skip
        if digest.quiet and not rule.quiet_digest:
            continue
        for channel, target in _routes(notify, rule):
            attempts, error = _attempt(
                _sender(notify, rule, channel, digest), notify.attempts, notify.backoff_s, sleep
            )
            delivery = Delivery(
                name, channel, target, "failed" if error else "sent", digest.total, attempts, error
            )
            with sessions.begin() as session:
                session.add(
                    m.NotificationDelivery(
                        recipient=name, channel=channel, target=target, trigger=trigger,
                        review_run_id=review_run_id, status=delivery.status, attempts=attempts,
                        error=error, findings=digest.total,
                        last_finding_id=digest.last_finding_id, digest_sha256=digest.sha256(),
                    )
                )  # fmt: skip
            # the caller shows failures (one line on the console, a warning in the service's log)
            log.info("%s", delivery.line())
            done.append(delivery)
    return done


def notify_and_log(
    sessions: sessionmaker[Session],
    notify: NotifySettings,
    *,
    trigger: str,
    review_run_id: int | None = None,
) -> None:
    """:func:`notify_new_findings` for the service (after a review started through the API, in
    the background): each failure becomes one warning in the log; never raises."""
    from sqlalchemy.exc import SQLAlchemyError

    try:
        deliveries = notify_new_findings(
            sessions, notify, trigger=trigger, review_run_id=review_run_id
        )
    except SQLAlchemyError as exc:
        log.warning(
            "notifications after review run %s not sent: the database failed (%s)",
            review_run_id, type(exc).__name__,
        )  # fmt: skip
        return
    for d in deliveries:
        if d.status != "sent":
            log.warning("%s", d.line())


def _sender(
    notify: NotifySettings, rule: NotifyRecipient, channel: str, digest: Digest
) -> Callable[[], object]:
    if channel == "smtp":
        assert notify.smtp is not None
        smtp = notify.smtp
        return lambda: send_smtp(smtp, list(rule.emails), digest)
    if channel == "webhook":
        assert rule.webhook is not None
        hook = rule.webhook
        return lambda: post_webhook(hook, digest)
    reason = (
        "no mail server configured ([notify.smtp])" if rule.emails else "no recipient configured"
    )
    return lambda: write_outbox(outbox_file(notify), digest, reason=reason)
