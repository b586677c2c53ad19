"""Findings: the identity of what a review found, and a review's flags stored as occurrences.

Flag contents are invented; what is checked is the identity rule (kind, subject, period), the
changes recorded between two occurrences, and that two runs storing a new finding at once end
with one finding.
"""

from __future__ import annotations

from datetime import date
from typing import Any

import pytest
from sqlalchemy import func, select

import beamaudit.api.runs.findings as findings
from beamaudit.api.runs.findings import store_flags
from beamaudit.api.store import models as m
from beamaudit.api.store.finding_identity import (
    finding_key,
    finding_period,
    finding_subject,
    number_changes,
)

GROUP = {"site": "Hollowbrook (invented)", "room": "RAD A", "exam_type": "chest_pa",
         "quantity": "dap_gy_cm2"}  # fmt: skip


@pytest.mark.parametrize(
    ("start", "end", "period"),
    [
        (date(2026, 11, 1), date(2026, 12, 1), "2026-11"),  # the month
        (date(2026, 11, 1), date(2026, 11, 18), "2026-11"),  # the nightly run, month to date
        (date(2026, 12, 1), date(2027, 1, 1), "2026-12"),
        (date(2026, 8, 1), date(2026, 11, 1), "2026-08-01/2026-11-01"),  # a range: its own
    ],
)
def test_a_run_within_one_month_finds_that_months_findings(start, end, period) -> None:
    assert finding_period(start, end) == period


def test_the_subject_is_what_the_flag_is_about() -> None:
    numbers = {"median": 0.2, "level_set": "Local (invented)", "level_version": "2"}
    subject = finding_subject("group_above_level", {**GROUP, "event_id": None}, numbers)
    assert subject == {**GROUP, "level_set": "Local (invented)"}  # not the version, no None
    assert finding_subject("no_dose_data", {"study_uid": "1.2.3"}, numbers) == {
        "study_uid": "1.2.3"
    }
    key = finding_key("group_above_level", "2026-11", subject)
    assert key == finding_key("group_above_level", "2026-11", dict(reversed(subject.items())))
    assert key != finding_key("group_above_level", "2026-10", subject)
    assert key != finding_key("exam_above_investigation_level", "2026-11", subject)


def test_changes_list_only_what_differs() -> None:
    before = {"median": 0.2, "n_used": 30, "level_set": "L", "ci_low": None}
    after = {"median": 0.2 * (1 + 1e-15), "n_used": 35, "level_set": "L", "ci_low": 0.1}
    assert number_changes(before, after, severity=("warning", "action")) == {
        "n_used": {"before": 30, "after": 35},
        "ci_low": {"before": None, "after": 0.1},
        "severity": {"before": "warning", "after": "action"},
    }
    assert number_changes(before, dict(before), severity=("action", "action")) == {}


def _run(session: Any, period: str = "2026-11") -> m.ReviewRun:
    run = m.ReviewRun(
        kind="monthly", period=period, period_start=date(2026, 11, 1),
        period_end=date(2026, 12, 1), software_version="test", status="done",
    )  # fmt: skip
    session.add(run)
    session.flush()
    return run


def _flag(median: float) -> dict[str, Any]:
    return {"kind": "group_above_level", "severity": "action", "reason": "above (invented)",
            "numbers": {"median": median, "level_set": "L"}, "concerns": GROUP}  # fmt: skip


def test_a_finding_found_again_gets_a_flag_with_its_changes(store) -> None:
    with store.session_factory.begin() as session:
        first = store_flags(session, _run(session), [_flag(0.2)])
        again = store_flags(session, _run(session), [_flag(0.25), _flag(0.25)])
        rows = session.scalars(select(m.FlagRow).order_by(m.FlagRow.id)).all()
    assert first.as_dict() == {"new": 1, "again": 0, "changed": 0}
    assert again.as_dict() == {"new": 0, "again": 2, "changed": 1}
    assert len({r.finding_id for r in rows}) == 1
    assert [r.changes for r in rows] == [
        None,
        {"median": {"before": 0.2, "after": 0.25}},
        {},  # the same finding twice in one run: the second compares to the first
    ]


def test_two_runs_storing_one_new_finding_at_once_share_it(store, monkeypatch) -> None:
    # the second run looked for the finding before the first committed it (a review of the same
    # month by hand while the nightly one runs): its insert meets the first's, and is dropped
    with store.session_factory.begin() as session:
        store_flags(session, _run(session), [_flag(0.2)])
    existing = findings._existing
    calls: list[int] = []

    def stale_once(session: Any, keys: Any) -> Any:
        calls.append(1)
        return {} if len(calls) == 1 else existing(session, keys)

    monkeypatch.setattr(findings, "_existing", stale_once)
    with store.session_factory.begin() as session:
        counts = store_flags(session, _run(session), [_flag(0.21)])
    with store.session_factory() as session:
        assert session.scalar(select(func.count()).select_from(m.Finding)) == 1
        assert len(set(session.scalars(select(m.FlagRow.finding_id)))) == 1
    assert counts.new == 1  # new to this run, which had not seen it
