"""The digest of new findings: what one recipient is told, as JSON and as plain text.

A finding is *new* for a recipient when it was created after the newest finding of the last
digest ``sent`` to that recipient (``notification_deliveries.last_finding_id``), is not closed,
and passes the recipient's rules (kinds, least severity, rooms). Each item carries the kind, the
severity, the numbers the review stored with its latest flag, and a link to the flags page.

No patient identifier goes into a digest: no event id, no Study Instance UID (a UID in a flag's
reason is replaced by a word), no patient pseudonym; only the room, exam type, quantity, period
and the numbers of the review.
"""

from __future__ import annotations

import hashlib
import json
import re
from dataclasses import dataclass, field
from datetime import datetime
from typing import Any
from urllib.parse import urlencode

from sqlalchemy import func, select
from sqlalchemy.orm import Session

from beamaudit.api.settings import NotifyRecipient
from beamaudit.api.store import models as m
from beamaudit.api.store.base import utcnow

__all__ = ["SCHEMA", "SEVERITY_RANK", "Digest", "DigestItem", "build_digest", "last_sent_finding"]

#: the digest's format, in its ``schema`` field; a receiver checks it
SCHEMA = "beamaudit.findings-digest/1"
#: severities from least to most urgent (the review's own three)
SEVERITY_RANK = {"info": 0, "warning": 1, "action": 2}
# a DICOM UID (PS3.5 9.1): digit components joined by dots; a flag's reason may name a study
_MONTH = re.compile(r"\d{4}-(0[1-9]|1[0-2])")
_UID = re.compile(r"\b[0-9]+(?:\.[0-9]+){3,}\b")


@dataclass(frozen=True)
class DigestItem:
    """One new finding as a recipient reads it."""

    finding_id: int
    kind: str
    severity: str
    period: str
    room: str | None
    exam_type: str | None
    quantity: str | None
    reason: str
    numbers: dict[str, Any]
    status: str
    first_seen: str
    link: str
    #: the catalogue's name of ``exam_type`` (its code where the catalogue has none)
    exam_name: str | None = None

    def as_dict(self) -> dict[str, Any]:
        return dict(self.__dict__)


@dataclass
class Digest:
    """What one recipient is sent: the new findings (the first ``max_items``) and their count."""

    recipient: str
    role: str | None
    trigger: str
    review_run_id: int | None
    generated_at: datetime
    items: list[DigestItem]
    total: int
    last_finding_id: int | None
    flags_link: str
    caution: str
    software_version: str = ""
    counts: dict[str, int] = field(default_factory=dict)

    @property
    def quiet(self) -> bool:
        """Nothing new."""
        return self.total == 0

    def subject(self) -> str:
        if self.quiet:
            return "beamaudit: no new findings"
        urgent = self.counts.get("action", 0)
        extra = f", {urgent} needing action" if urgent else ""
        return f"beamaudit: {self.total} new finding{'s' if self.total != 1 else ''}{extra}"

    def as_json(self) -> dict[str, Any]:
        return {
            "schema": SCHEMA,
            "service": "beamaudit",
            "software_version": self.software_version,
            "recipient": self.recipient,
            "role": self.role,
            "trigger": self.trigger,
            "review_run_id": self.review_run_id,
            "generated_at": self.generated_at.isoformat(timespec="seconds"),
            "new_findings": self.total,
            "by_severity": self.counts,
            "listed": len(self.items),
            "findings": [i.as_dict() for i in self.items],
            "flags_link": self.flags_link,
            "caution": self.caution,
        }

    def body(self) -> bytes:
        """The JSON body as sent (compact, keys in a fixed order): what a webhook signs."""
        return json.dumps(self.as_json(), separators=(",", ":"), default=str).encode("utf-8")

    def sha256(self) -> str:
        return hashlib.sha256(self.body()).hexdigest()

    def text(self) -> str:
        """The e-mail's plain text."""
        lines = [self.subject(), ""]
        if self.quiet:
            lines.append("No new finding since the last digest.")
        for item in self.items:
            lines.append(_heading(item))
            lines.append(f"  {item.reason}")
            if item.numbers:
                numbers = "; ".join(f"{_key(k)} {_number(v)}" for k, v in item.numbers.items())
                lines.append(f"  numbers: {numbers}")
            lines.append(f"  {item.link}")
            lines.append("")
        if self.total > len(self.items):
            lines.append(f"... and {self.total - len(self.items)} more: {self.flags_link}")
            lines.append("")
        trigger = self.trigger + (
            f", review run {self.review_run_id}" if self.review_run_id else ""
        )
        lines.append(f"Sent after: {trigger}. All findings: {self.flags_link}")
        lines.append("")
        lines.append(self.caution)
        return "\n".join(lines) + "\n"


def _heading(item: DigestItem) -> str:
    """One finding's first line in words: severity, kind, period, room, examination, quantity
    (``[Action] Median above a level (November 2026): RAD A, Chest PA, DAP (Gy·cm²)``)."""
    from beamaudit.dashboards.wording import FLAG_KIND_WORDS, SEVERITY_WORDS, quantity_short
    from beamaudit.dashboards.wording import words_for as words

    period = item.period
    if _MONTH.fullmatch(period):
        period = datetime.strptime(period, "%Y-%m").strftime("%B %Y")
    quantity = quantity_short(item.quantity) if item.quantity else None
    where = ", ".join(x for x in (item.room, item.exam_name or item.exam_type, quantity) if x)
    kind = words(FLAG_KIND_WORDS, item.kind)
    severity = words(SEVERITY_WORDS, item.severity)
    return f"[{severity}] {kind} ({period})" + (f": {where}" if where else "")


def _key(name: str) -> str:
    from beamaudit.dashboards.wording import words_for

    return words_for({}, name).lower()


def _number(value: Any) -> str:
    if isinstance(value, float):
        return f"{value:.3g}"
    return str(value)


def last_sent_finding(session: Session, recipient: str) -> int | None:
    """The newest finding covered by the last digest sent to ``recipient`` (None: never)."""
    return session.scalar(
        select(func.max(m.NotificationDelivery.last_finding_id)).where(
            m.NotificationDelivery.recipient == recipient,
            m.NotificationDelivery.status == "sent",
        )
    )


def _passes(rule: NotifyRecipient, kind: str, severity: str, room: str | None) -> bool:
    if rule.kinds and kind not in rule.kinds:
        return False
    if SEVERITY_RANK.get(severity, 0) < SEVERITY_RANK[rule.min_severity]:
        return False
    return not (rule.rooms and room not in rule.rooms)


def build_digest(
    session: Session,
    name: str,
    rule: NotifyRecipient,
    *,
    base_url: str,
    trigger: str,
    review_run_id: int | None = None,
    max_items: int = 50,
) -> Digest:
    """The digest of findings new for recipient ``name`` under ``rule`` (most urgent first)."""
    from beamaudit import __version__
    from beamaudit.api.runs.export import CAUTION

    after = last_sent_finding(session, name) or 0
    newest_flag = (
        select(func.max(m.FlagRow.id).label("flag_id"))
        .where(m.FlagRow.finding_id > after)
        .group_by(m.FlagRow.finding_id)
        .subquery()
    )
    rows = session.execute(
        select(m.FlagRow, m.Finding)
        .join(newest_flag, newest_flag.c.flag_id == m.FlagRow.id)
        .join(m.Finding, m.Finding.id == m.FlagRow.finding_id)
        .order_by(m.Finding.id)
    ).all()
    newest = max((finding.id for _, finding in rows), default=None)
    catalogue = session.execute(select(m.ExamTypeRow.code, m.ExamTypeRow.name))
    exam_names = {code: name for code, name in catalogue}
    base = base_url.rstrip("/")
    items: list[DigestItem] = []
    for flag, finding in rows:
        if finding.status == "closed" or not _passes(rule, flag.kind, flag.severity, flag.room):
            continue
        query = {"kind": flag.kind}
        if _MONTH.fullmatch(finding.period):
            query["period"] = finding.period
        if flag.room:
            query["room"] = flag.room
        items.append(
            DigestItem(
                finding_id=finding.id,
                kind=flag.kind,
                severity=flag.severity,
                period=finding.period,
                room=flag.room,
                exam_type=flag.exam_type,
                exam_name=exam_names.get(flag.exam_type or "") or flag.exam_type,
                quantity=(finding.subject or {}).get("quantity"),
                reason=_UID.sub("(a study: see the link)", flag.reason),
                numbers=dict(flag.numbers or {}),
                status=finding.status,
                first_seen=finding.created_at.isoformat(timespec="seconds"),
                link=f"{base}/flags?{urlencode(query)}#finding-{finding.id}",
            )
        )
    items.sort(key=lambda i: (-SEVERITY_RANK.get(i.severity, 0), i.finding_id))
    counts: dict[str, int] = {}
    for item in items:
        counts[item.severity] = counts.get(item.severity, 0) + 1
    return Digest(
        recipient=name,
        role=rule.role,
        trigger=trigger,
        review_run_id=review_run_id,
        generated_at=utcnow(),
        items=items[:max_items],
        total=len(items),
        last_finding_id=newest if newest is not None else (after or None),
        flags_link=f"{base}/flags",
        caution=CAUTION,
        software_version=__version__,
        counts=counts,
    )
