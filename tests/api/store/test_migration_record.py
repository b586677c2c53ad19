"""Migration ``0002_record`` on a store holding reviews from before it: runs get their bounds and
scope, every flag becomes an occurrence of its finding, and a finding's triage is the last status
change the audit log holds for any of its flags; downgrading puts each flag's status back.

The rows are invented, written as the code before the migration wrote them (two reviews of one
month whose second run forgot the first run's acknowledgement, and a review of one room).
"""

from __future__ import annotations

import json

from sqlalchemy import text

from beamaudit.api.store import current_revision, head_revision
from beamaudit.api.store.migrate import upgrade

LEVEL = {"level_set": "Hollowbrook local DRLs (invented)", "level_version": "1"}
GROUP = {"site": "Hollowbrook (invented)", "room": "RAD A", "exam_type": "chest_pa",
         "quantity": "dap_gy_cm2"}  # fmt: skip
STUDY = {"study_uid": "1.2.826.0.1.3680043.8.498.7", "room": "RAD A", "exam_type": "chest_pa"}


def _flag(kind: str, concerns: dict, numbers: dict) -> dict:
    return {"kind": kind, "severity": "warning", "reason": f"{kind} (invented)",
            "numbers": numbers, "concerns": concerns}  # fmt: skip


def _old_run(conn, run_id: int, parameters: dict, flags: list[dict]) -> None:
    conn.execute(
        text(
            "INSERT INTO review_runs (id, kind, period, parameters, level_sets, software_version,"
            " status, started_at, result) VALUES (:id, 'monthly', :period, :parameters, '[]',"
            " '0.1.0', 'done', '2026-11-02 08:00:00', :result)"
        ),
        {"id": run_id, "period": "2026-10", "parameters": json.dumps(parameters),
         "result": json.dumps({"flags": flags})},
    )  # fmt: skip


def _old_flag(conn, flag_id: int, run_id: int, flag: dict, status: str) -> None:
    conn.execute(
        text(
            "INSERT INTO flags (id, review_run_id, kind, severity, reason, numbers, room,"
            " exam_type, study_instance_uid, status, created_at) VALUES (:id, :run, :kind,"
            " :severity, :reason, :numbers, :room, :exam, :study, :status, '2026-11-02 08:00:01')"
        ),
        {"id": flag_id, "run": run_id, "kind": flag["kind"], "severity": flag["severity"],
         "reason": flag["reason"], "numbers": json.dumps(flag["numbers"]),
         "room": flag["concerns"].get("room"), "exam": flag["concerns"].get("exam_type"),
         "study": flag["concerns"].get("study_uid"), "status": status},
    )  # fmt: skip


def test_reviews_from_before_become_runs_with_scope_and_findings_with_triage(store) -> None:
    engine = store.engine
    from alembic import command

    from beamaudit.api.store.migrate import alembic_config

    command.downgrade(alembic_config(engine), "0001")
    month = {"period": {"start": "2026-10-01", "end": "2026-11-01", "label": "2026-10"}}
    group_1 = _flag("group_above_level", GROUP, {"median": 0.2, **LEVEL})
    group_2 = _flag("group_above_level", GROUP, {"median": 0.25, **LEVEL})
    exam = _flag("no_dose_data", STUDY, {"n_events": 2})
    with engine.begin() as conn:
        _old_run(conn, 1, month, [group_1, exam])
        _old_flag(conn, 11, 1, group_1, "acknowledged")
        _old_flag(conn, 12, 1, exam, "open")
        _old_run(conn, 2, month, [group_2, exam])  # the month reviewed again
        _old_flag(conn, 21, 2, group_2, "open")  # the acknowledgement forgotten
        _old_flag(conn, 22, 2, exam, "open")
        _old_run(conn, 3, {**month, "rooms": ["RAD A"]}, [group_2])
        _old_flag(conn, 31, 3, group_2, "open")
        conn.execute(
            text(
                "INSERT INTO audit_log (at, actor, action, entity, entity_id, before, after)"
                " VALUES ('2026-11-03 09:00:00', 'token:3 (physicist)', 'update', 'flag', '11',"
                " :before, :after)"
            ),
            {"before": json.dumps({"status": "open"}),
             "after": json.dumps({"status": "acknowledged"})},
        )  # fmt: skip
    upgrade(engine)
    assert current_revision(engine) == head_revision()
    from beamaudit.api.store import models as m

    with store.session_factory() as session:
        runs = {r.id: r for r in session.query(m.ReviewRun)}
        assert [str(runs[1].period_start), str(runs[1].period_end)] == ["2026-10-01", "2026-11-01"]
        assert (runs[1].scope, runs[1].whole_site) == ({}, True)
        assert (runs[3].scope, runs[3].whole_site) == ({"rooms": ["RAD A"]}, False)
        flags = {f.id: f for f in session.query(m.FlagRow)}
        group = flags[11].finding
        assert flags[21].finding_id == flags[31].finding_id == group.id
        assert (group.status, group.status_by) == ("acknowledged", "token:3 (physicist)")
        assert group.subject["level_set"] == LEVEL["level_set"]
        assert flags[11].changes is None
        assert flags[21].changes == {"median": {"before": 0.2, "after": 0.25}}
        assert flags[31].changes == {}
        assert flags[12].finding_id == flags[22].finding_id != group.id
        assert flags[22].finding.status == "open"
        assert session.query(m.Finding).count() == 2
    command.downgrade(alembic_config(engine), "0001")
    with engine.connect() as conn:
        statuses = dict(conn.execute(text("SELECT id, status FROM flags")).all())
    assert statuses == {11: "acknowledged", 12: "open", 21: "acknowledged", 22: "open",
                        31: "acknowledged"}  # fmt: skip
    upgrade(engine)
