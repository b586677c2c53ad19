"""A finding's identity as the store keys it, and what changed between two of its flags.

Shared by the review runs (:mod:`beamaudit.api.runs.findings`) and the migration that gave the
stored flags their findings (``0002_record``); see :mod:`beamaudit.api.runs.findings` for what
the identity is.
"""

from __future__ import annotations

import hashlib
import json
import math
from collections.abc import Mapping
from datetime import date, timedelta
from typing import Any

__all__ = [
    "IDENTITY_FIELDS",
    "finding_key",
    "finding_period",
    "finding_subject",
    "number_changes",
]

#: the concern fields that name a flag's subject
IDENTITY_FIELDS = (
    "site",
    "room",
    "device",
    "exam_type",
    "quantity",
    "event_id",
    "study_uid",
    "date",
    "clinical_indication",
    "patient_group",
)
#: relative difference below which two stored numbers are the same (JSON round trips)
_SAME = 1e-12


def finding_period(start: date, end: date) -> str:
    """The period a finding of a run of ``[start, end)`` belongs to: ``YYYY-MM`` when the period
    lies within one calendar month, else ``start/end``."""
    last = end - timedelta(days=1)
    if (start.year, start.month) == (last.year, last.month):
        return f"{start.year:04d}-{start.month:02d}"
    return f"{start.isoformat()}/{end.isoformat()}"


def finding_subject(
    kind: str, concerns: Mapping[str, Any], numbers: Mapping[str, Any]
) -> dict[str, Any]:
    """What a flag is about: its concern's identity fields, and for a group above a level the
    level set (by name: a new version of the same set is the same finding, its numbers changed)."""
    subject = {k: concerns[k] for k in IDENTITY_FIELDS if concerns.get(k) is not None}
    if kind == "group_above_level" and numbers.get("level_set") is not None:
        subject["level_set"] = numbers["level_set"]
    return subject


def finding_key(kind: str, period: str, subject: Mapping[str, Any]) -> str:
    """The SHA-256 (hex) of the finding's identity in canonical JSON."""
    identity = {"kind": kind, "period": period, "subject": dict(subject)}
    text = json.dumps(identity, sort_keys=True, separators=(",", ":"), default=str)
    return hashlib.sha256(text.encode("utf-8")).hexdigest()


def _same(a: Any, b: Any) -> bool:
    if isinstance(a, int | float) and isinstance(b, int | float):
        if isinstance(a, bool) or isinstance(b, bool):
            return a == b
        x, y = float(a), float(b)
        if math.isnan(x) or math.isnan(y):
            return math.isnan(x) and math.isnan(y)
        return abs(x - y) <= _SAME * max(abs(x), abs(y))
    return bool(a == b)


def number_changes(
    before: Mapping[str, Any], after: Mapping[str, Any], *, severity: tuple[str, str] | None = None
) -> dict[str, Any]:
    """The numbers that differ between two flags of one finding (``{name: {before, after}}``,
    a number missing on one side as None), and the severity if it changed."""
    changes: dict[str, Any] = {}
    for name in [*before, *(k for k in after if k not in before)]:
        old, new = before.get(name), after.get(name)
        if not _same(old, new):
            changes[name] = {"before": old, "after": new}
    if severity is not None and severity[0] != severity[1]:
        changes["severity"] = {"before": severity[0], "after": severity[1]}
    return changes
