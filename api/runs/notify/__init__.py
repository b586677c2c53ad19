"""Notifications of new findings: digests by e-mail, signed webhook, or the outbox file.

See :mod:`.deliver` for the rules, :mod:`.digest` for what a digest holds (never a patient
identifier) and :mod:`.channels` for the webhook's signature.
"""

from beamaudit.api.runs.notify.channels import (
    SIGNATURE_HEADER,
    TIMESTAMP_HEADER,
    DeliveryError,
    sign,
    verify_signature,
)
from beamaudit.api.runs.notify.deliver import (
    OUTBOX_RECIPIENT,
    Delivery,
    notify_and_log,
    notify_new_findings,
)
from beamaudit.api.runs.notify.digest import SCHEMA, Digest, build_digest

__all__ = [
    "OUTBOX_RECIPIENT",
    "SCHEMA",
    "SIGNATURE_HEADER",
    "TIMESTAMP_HEADER",
    "Delivery",
    "DeliveryError",
    "Digest",
    "build_digest",
    "notify_and_log",
    "notify_new_findings",
    "sign",
    "verify_signature",
]
