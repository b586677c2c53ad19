"""Findings: what reviews found, with an identity that outlives the run that found it.

A review run raises flags; each flag is an occurrence of a :class:`~beamaudit.api.store.models.
Finding`, the same finding whenever a later run finds it again. Its identity is

* its **kind** (``group_above_level``, ``exam_above_investigation_level``, ...);
* its **subject**: the fields of the flag's concern that name what it is about (site, room,
  device, exam type, quantity, event, study, and the month a DAP ratio or a change-point is
  dated, a group's clinical indication and paediatric band when it has them), and for a group
  above a level the level set it is above (a group above both the local
  and the national level is two findings);
* its **period**: the calendar month when the run's period lies within one month (a month
  reviewed again by hand, or month-to-date by the nightly run, finds the same findings), else
  the run's ``start/end``.

The triage (status, who, when, a note) belongs to the finding, so it carries over to every later
run; each flag keeps what changed in its numbers since the finding's previous flag. Acknowledging
or closing needs a note (the committee asks why); every change is written to the audit log.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

from sqlalchemy import func, select
from sqlalchemy.orm import Session

from beamaudit.api.errors import ApiError
from beamaudit.api.store import models as m
from beamaudit.api.store.auth import record_change
from beamaudit.api.store.base import utcnow
from beamaudit.api.store.finding_identity import (
    finding_key,
    finding_period,
    finding_subject,
    number_changes,
)

__all__ = [
    "STATUSES",
    "FindingCounts",
    "TriageError",
    "store_flags",
    "triage",
]

#: triage states; those that need a note say why the finding is set aside
STATUSES = ("open", "acknowledged", "closed")
NEEDS_A_NOTE = ("acknowledged", "closed")
#: keys per ``IN`` list
_CHUNK = 500


class TriageError(ApiError, ValueError):
    """A triage that cannot be recorded (an unknown status, a missing note)."""


@dataclass(frozen=True, slots=True)
class FindingCounts:
    """What a run's flags were: findings new, found again, found again with other numbers."""

    new: int
    again: int
    changed: int

    def as_dict(self) -> dict[str, int]:
        return {"new": self.new, "again": self.again, "changed": self.changed}


def _existing(session: Session, keys: Sequence[str]) -> dict[str, m.Finding]:
    found: dict[str, m.Finding] = {}
    for first in range(0, len(keys), _CHUNK):
        chunk = list(keys[first : first + _CHUNK])
        found.update(
            (f.key, f) for f in session.scalars(select(m.Finding).where(m.Finding.key.in_(chunk)))
        )
    return found


def _previous_flags(session: Session, finding_ids: Sequence[int]) -> dict[int, m.FlagRow]:
    """Each finding's newest flag."""
    out: dict[int, m.FlagRow] = {}
    for first in range(0, len(finding_ids), _CHUNK):
        chunk = list(finding_ids[first : first + _CHUNK])
        newest = (
            select(func.max(m.FlagRow.id))
            .where(m.FlagRow.finding_id.in_(chunk))
            .group_by(m.FlagRow.finding_id)
        )
        out.update(
            (f.finding_id, f)
            for f in session.scalars(select(m.FlagRow).where(m.FlagRow.id.in_(newest)))
        )
    return out


def _add_findings(session: Session, period: str, fresh: Mapping[str, tuple[str, Any]]) -> None:
    """Insert the findings of ``fresh`` (key -> kind, subject) as ``open``; a key another
    transaction inserted meanwhile (a review of the same month at the same time) is kept as it is,
    so both runs' flags are occurrences of the one finding."""
    from sqlalchemy.dialects import postgresql, sqlite

    dialect = session.get_bind().dialect.name
    insert = postgresql.insert if dialect == "postgresql" else sqlite.insert
    rows = [
        {"key": key, "kind": kind, "period": period, "subject": subject, "status": "open",
         "created_at": utcnow()}
        for key, (kind, subject) in fresh.items()
    ]  # fmt: skip
    for first in range(0, len(rows), _CHUNK):
        session.execute(
            insert(m.Finding)
            .values(rows[first : first + _CHUNK])
            .on_conflict_do_nothing(index_elements=["key"])
        )


def store_flags(
    session: Session, run: m.ReviewRun, flags: Sequence[Mapping[str, Any]]
) -> FindingCounts:
    """Store a run's flags (the core's JSON, study UIDs in place), each as an occurrence of its
    finding: a finding found before keeps its triage, and the flag records what changed in its
    numbers since the finding's previous flag; a new finding starts ``open``."""
    assert run.period_start is not None and run.period_end is not None
    period = finding_period(run.period_start, run.period_end)
    keyed = []
    for flag in flags:
        concerns = flag.get("concerns") or {}
        numbers = flag.get("numbers") or {}
        subject = finding_subject(flag["kind"], concerns, numbers)
        keyed.append((finding_key(flag["kind"], period, subject), subject, flag))
    found = _existing(session, sorted({k for k, _, _ in keyed}))
    known = set(found)
    previous = _previous_flags(session, [f.id for f in found.values()])
    fresh = {key: (flag["kind"], subject) for key, subject, flag in keyed if key not in known}
    if fresh:
        _add_findings(session, period, fresh)
        found.update(_existing(session, sorted(fresh)))
    new = again = changed = 0
    for key, _, flag in keyed:
        finding = found[key]
        numbers = dict(flag.get("numbers") or {})
        severity = flag.get("severity") or "info"
        before = previous.get(finding.id)
        changes: dict[str, Any] | None
        if before is not None:
            changes = number_changes(
                before.numbers or {}, numbers, severity=(before.severity, severity)
            )
        else:  # found for the first time (or its earlier runs were deleted: nothing to compare)
            changes = None if key not in known else {}
        if changes is None:
            new += 1
        else:
            again += 1
            changed += bool(changes)
        where = flag.get("concerns") or {}
        row = m.FlagRow(
            review_run_id=run.id, finding_id=finding.id, kind=flag["kind"], severity=severity,
            reason=flag["reason"], numbers=numbers, changes=changes,
            event_id=where.get("event_id"), study_instance_uid=where.get("study_uid"),
            room=where.get("room"), exam_type=where.get("exam_type"),
        )  # fmt: skip
        session.add(row)
        previous[finding.id] = row  # a second flag of one finding in one run compares to this
    session.flush()
    return FindingCounts(new=new, again=again, changed=changed)


def triage(
    session: Session, flag: m.FlagRow, *, status: str, note: str | None, actor: str
) -> m.Finding:
    """Set the triage of ``flag``'s finding (the caller owns the transaction); audited.

    Raises
    ------
    TriageError
        An unknown status, or acknowledging or closing without a note.
    """
    if status not in STATUSES:
        raise TriageError(f"status must be one of {', '.join(STATUSES)}, not {status!r}")
    note = (note or "").strip() or None
    if status in NEEDS_A_NOTE and note is None:
        raise TriageError(f"a note is needed to set a finding {status}: say why")
    finding = flag.finding
    if (finding.status, finding.note) == (status, note):
        return finding
    before = {"status": finding.status, "note": finding.note}
    finding.status, finding.note = status, note
    finding.status_by, finding.status_at = actor, utcnow()
    record_change(
        session, actor=actor, action="triage", entity="finding", entity_id=finding.id,
        before=before, after={"status": status, "note": note, "flag_id": flag.id},
    )  # fmt: skip
    return finding
