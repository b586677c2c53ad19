"""Review runs as a record: their scope, the record of a month, runs cut short, and an admin's
supersede and delete.

* **Scope.** A run keeps the filters that narrowed it (sites, rooms, devices, exam types) and its
  period. The **record** of a calendar month, what the overview, the flags page and the committee
  report show, is the month's newest ``monthly`` run that is ``done``, whole-site (no filter) and
  not superseded (:func:`record_run`); runs of a room, an exam type or a date range are listed as
  what they are and never replace it.
* **Refusals.** A scope naming a room, site, device or exam type the store does not know is refused
  naming the closest known name (:class:`UnknownNameError`); a period with no event in scope is
  refused before anything is stored (:class:`NoEventsError`).
* **Runs cut short.** A run records the process running it (host, boot, pid and the process's start
  time). When the service starts (``beamaudit serve``, and every command that opens the store to
  write), :func:`fail_interrupted_runs` marks ``failed``, with the reason, each run still
  ``running`` whose process is gone on this host; a run of a process still alive, or of another
  host, is left alone.
* **Supersede and delete** (admins): a superseded run stays, marked, and stops being the record;
  a deleted run goes with its flags (the findings and their triage stay). Both are audited.
"""

from __future__ import annotations

import difflib
import os
import socket
from collections.abc import Iterable, Mapping, Sequence
from datetime import timedelta
from pathlib import Path
from typing import Any

from sqlalchemy import delete, func, select
from sqlalchemy.orm import Session, sessionmaker

from beamaudit.api.review import ReviewError
from beamaudit.api.store import models as m
from beamaudit.api.store.auth import record_change
from beamaudit.api.store.base import utcnow

__all__ = [
    "SCOPE_KEYS",
    "NoEventsError",
    "RunStateError",
    "UnknownNameError",
    "closest_name",
    "delete_run",
    "fail_interrupted_runs",
    "record_periods",
    "record_run",
    "record_run_ids",
    "scope_of",
    "scope_text",
    "scope_words",
    "supersede_run",
    "this_process",
]

R = m.ReviewRun
#: the review parameters that narrow a run's scope, with their names in words
SCOPE_KEYS = {
    "sites": ("site", "sites"),
    "rooms": ("room", "rooms"),
    "devices": ("device", "devices"),
    "exam_types": ("exam type", "exam types"),
}


class UnknownNameError(ReviewError):
    """A scope names a room, site, device or exam type the store does not know."""

    def __init__(self, what: str, name: str, known: Sequence[str]) -> None:
        self.what, self.name, self.closest = what, name, closest_name(name, known)
        if self.closest is None:
            message = f"no {what} {name!r}: the store knows none yet"
        else:
            message = f"no {what} {name!r} in the store; the closest is {self.closest!r}"
        super().__init__(message)


class NoEventsError(ReviewError):
    """The period holds no event in the run's scope: nothing to review, nothing stored."""


class RunStateError(ReviewError):
    """A run cannot be superseded or deleted in its present state."""


def closest_name(name: str, known: Iterable[str]) -> str | None:
    """The known name most like ``name`` (case aside), or None when nothing is known."""
    names = sorted(set(known))
    if not names:
        return None
    lowered = {n.lower(): n for n in names}
    match = difflib.get_close_matches(name.lower(), list(lowered), n=1, cutoff=0.0)
    return lowered[match[0]] if match else names[0]


# -- scope ----------------------------------------------------------------------------------------
def scope_of(parameters: Mapping[str, Any]) -> dict[str, list[str]]:
    """The filters of review parameters (their JSON form) that narrow the run."""
    return {k: list(parameters[k]) for k in SCOPE_KEYS if parameters.get(k)}


def scope_words(scope: Mapping[str, Sequence[str]]) -> str:
    """Scope filters in words: ``room RAD A; exam types chest_pa, chest_lat``, or ``whole site``."""
    parts = []
    for key, (one, many) in SCOPE_KEYS.items():
        values = scope.get(key) or []
        if values:
            parts.append(f"{one if len(values) == 1 else many} {', '.join(values)}")
    return "; ".join(parts) or "whole site"


def scope_text(run: m.ReviewRun) -> str:
    """The run's scope in words: ``whole site, 2026-11``, ``room RAD A, 2026-11``,
    ``whole site, 2026-08-01 to 2026-10-31``."""
    where = scope_words(run.scope or {})
    period = run.period or ""
    if "/" in period and run.period_start is not None and run.period_end is not None:
        last = run.period_end - timedelta(days=1)
        period = f"{run.period_start.isoformat()} to {last.isoformat()}"
    return f"{where}, {period}"


# -- the record of a month ------------------------------------------------------------------------
def _is_record() -> list[Any]:
    return [
        R.kind == "monthly",
        R.status == "done",
        R.whole_site.is_(True),
        R.superseded_at.is_(None),
        R.period.is_not(None),
        R.period.not_like("%/%"),  # a calendar month, not a date range
    ]


def record_run(session: Session, period: str | None) -> m.ReviewRun | None:
    """The record of ``period`` (``YYYY-MM``), or of the newest period with one."""
    stmt = select(R).where(*_is_record())
    stmt = stmt.where(R.period == period) if period else stmt.order_by(R.period.desc())
    return session.scalar(stmt.order_by(R.id.desc()).limit(1))


def record_run_ids(session: Session) -> dict[str, int]:
    """Each period's record: period -> run id."""
    ids = select(func.max(R.id)).where(*_is_record()).group_by(R.period)
    return {
        period: run_id
        for period, run_id in session.execute(select(R.period, R.id).where(R.id.in_(ids)))
        if period is not None
    }


def record_periods(session: Session) -> list[str]:
    """Periods with a record, newest first."""
    return sorted(record_run_ids(session), reverse=True)


# -- runs cut short -------------------------------------------------------------------------------
def _read(path: str) -> str:
    try:
        return Path(path).read_text(encoding="ascii", errors="replace").strip()
    except OSError:
        return ""


def _process_start(pid: int) -> tuple[str, str]:
    """The process's start time (clock ticks since boot) and state letter, from ``/proc``;
    empty where ``/proc`` does not tell."""
    stat = _read(f"/proc/{pid}/stat")
    fields = stat.rpartition(")")[2].split()  # after the command name, which may hold spaces
    if len(fields) < 20:
        return "", ""
    return fields[19], fields[0]


def this_process() -> str:
    """This process as a run's runner: ``host boot-id pid start-ticks``."""
    start, _ = _process_start(os.getpid())
    boot = _read("/proc/sys/kernel/random/boot_id") or "-"
    return f"{socket.gethostname()} {boot} {os.getpid()} {start or '-'}"


def _runner_gone(runner: str | None) -> str | None:
    """Why the runner is known to be gone, or None (alive, or on another host: cannot tell)."""
    if not runner:
        return "no record of the process that ran it"
    parts = runner.split()
    if len(parts) != 4 or not parts[2].isdigit():
        return "no record of the process that ran it"
    host, boot, pid_text, start = parts
    pid = int(pid_text)
    where = f"pid {pid} on {host}"
    if host != socket.gethostname():
        return None
    if boot != "-" and boot != (_read("/proc/sys/kernel/random/boot_id") or "-"):
        return f"the machine restarted since it ran ({where})"
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return f"the process that ran it ({where}) ended before it finished"
    except PermissionError:  # alive, under another user
        pass
    now_start, state = _process_start(pid)
    if start != "-" and now_start and now_start != start:
        return f"the process that ran it ({where}) ended before it finished"
    if state in ("Z", "X"):  # killed, not yet reaped by its parent
        return f"the process that ran it ({where}) ended before it finished"
    return None


def fail_interrupted_runs(sessions: sessionmaker[Session], *, started: str) -> list[int]:
    """Mark ``failed`` each run still ``running`` whose process is gone; returns their ids.

    ``started`` names what found them (``beamaudit serve``), for the reason and the audit log.
    """
    failed = []
    with sessions.begin() as session:
        for run in session.scalars(select(R).where(R.status == "running").with_for_update()):
            gone = _runner_gone(run.runner)
            if gone is None:
                continue
            run.status = "failed"
            run.finished_at = utcnow()
            run.error = (
                f"did not finish: {gone}; marked failed when {started} started "
                f"({run.finished_at:%Y-%m-%d %H:%M} UTC)"
            )
            record_change(
                session, actor=f"system ({started})", action="fail", entity="review_run",
                entity_id=run.id, before={"status": "running"},
                after={"status": "failed", "error": run.error},
            )  # fmt: skip
            failed.append(run.id)
    return failed


# -- supersede and delete -------------------------------------------------------------------------
def supersede_run(session: Session, run: m.ReviewRun, *, reason: str, actor: str) -> None:
    """Mark a finished run superseded (it stops being its period's record); audited.

    Raises
    ------
    RunStateError
        The run is not ``done``, or is superseded already.
    """
    if run.status != "done":
        raise RunStateError(
            f"review run {run.id} is {run.status}: only a finished run is superseded"
        )
    if run.superseded_at is not None:
        raise RunStateError(
            f"review run {run.id} was superseded already ({run.superseded_at:%Y-%m-%d})"
        )
    run.superseded_at, run.superseded_by, run.supersede_reason = utcnow(), actor, reason
    record_change(
        session, actor=actor, action="supersede", entity="review_run", entity_id=run.id,
        before={"superseded": False}, after={"superseded": True, "reason": reason},
    )  # fmt: skip


def delete_run(session: Session, run: m.ReviewRun, *, reason: str, actor: str) -> None:
    """Delete a run and its flags (its findings and their triage stay); audited.

    Raises
    ------
    RunStateError
        The run is still running.
    """
    if run.status == "running":
        raise RunStateError(f"review run {run.id} is running: it cannot be deleted now")
    n_flags = session.scalar(
        select(func.count()).select_from(m.FlagRow).where(m.FlagRow.review_run_id == run.id)
    )
    before = {
        "kind": run.kind, "period": run.period, "scope": run.scope, "status": run.status,
        "started_at": run.started_at.isoformat(), "n_flags": n_flags,
    }  # fmt: skip
    session.execute(delete(m.FlagRow).where(m.FlagRow.review_run_id == run.id))
    record_change(session, actor=actor, action="delete", entity="review_run", entity_id=run.id,
                  before=before, after={"reason": reason})  # fmt: skip
    session.delete(run)
