"""a record that can be trusted: review runs with their scope, findings with an identity

Review runs keep their period's bounds, their scope (the filters that narrowed them), the process
running them, and an admin's supersede. Findings hold what reviews found, with an identity that
outlives a run, and their triage; each flag is an occurrence of a finding, with what changed in
its numbers since the finding's previous flag.

Existing data: each run's bounds and scope come from its stored parameters; each flag becomes an
occurrence of its finding (the identity from the run's stored result, else from the flag's own
columns), and a finding's triage is the last status change the audit log holds for any of its
flags (else the newest status other than ``open`` among them).

Revision ID: 0002_record
Revises: 0001
"""

from __future__ import annotations

from datetime import date
from typing import Any

import sqlalchemy as sa
from alembic import op

import beamaudit.api.store.base

revision = "0002_record"
down_revision = "0001"
branch_labels = None
depends_on = None

JSON = sa.JSON().with_variant(sa.JSON(), "sqlite")
UTC_TIME = beamaudit.api.store.base.UTCDateTime(timezone=True)
SCOPE_KEYS = ("sites", "rooms", "devices", "exam_types")


def upgrade() -> None:
    op.create_table(
        "findings",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("key", sa.String(), nullable=False),
        sa.Column("kind", sa.String(), nullable=False),
        sa.Column("period", sa.String(), nullable=False),
        sa.Column("subject", JSON, nullable=False),
        sa.Column("status", sa.String(), nullable=False),
        sa.Column("note", sa.Text(), nullable=True),
        sa.Column("status_by", sa.String(), nullable=True),
        sa.Column("status_at", UTC_TIME, nullable=True),
        sa.Column("created_at", UTC_TIME, nullable=False),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_findings")),
        sa.UniqueConstraint("key", name=op.f("uq_findings_key")),
    )
    with op.batch_alter_table("findings", schema=None) as batch_op:
        batch_op.create_index(batch_op.f("ix_findings_period"), ["period"], unique=False)

    # never copied to a new table on SQLite: dropping the old one would delete every flag (the
    # flags' foreign key cascades on delete, and SQLite's DROP TABLE deletes the rows first)
    with op.batch_alter_table("review_runs", schema=None, recreate="never") as batch_op:
        batch_op.add_column(sa.Column("period_start", sa.Date(), nullable=True))
        batch_op.add_column(sa.Column("period_end", sa.Date(), nullable=True))
        batch_op.add_column(sa.Column("scope", JSON, nullable=False, server_default="{}"))
        batch_op.add_column(
            sa.Column("whole_site", sa.Boolean(), nullable=False, server_default=sa.true())
        )
        batch_op.add_column(sa.Column("runner", sa.String(), nullable=True))
        batch_op.add_column(sa.Column("superseded_at", UTC_TIME, nullable=True))
        batch_op.add_column(sa.Column("superseded_by", sa.String(), nullable=True))
        batch_op.add_column(sa.Column("supersede_reason", sa.Text(), nullable=True))
    with op.batch_alter_table("flags", schema=None) as batch_op:
        batch_op.add_column(sa.Column("finding_id", sa.Integer(), nullable=True))
        batch_op.add_column(sa.Column("changes", JSON, nullable=True))

    _runs_and_findings(op.get_bind())

    with op.batch_alter_table("flags", schema=None) as batch_op:
        batch_op.alter_column("finding_id", existing_type=sa.Integer(), nullable=False)
        batch_op.create_index(batch_op.f("ix_flags_finding_id"), ["finding_id"], unique=False)
        batch_op.create_foreign_key(
            batch_op.f("fk_flags_finding_id_findings"), "findings", ["finding_id"], ["id"]
        )
        batch_op.drop_column("status")


def _runs_and_findings(bind: Any) -> None:
    """Bounds and scope of the stored runs; a finding for each stored flag."""
    from beamaudit.api.store.base import utcnow
    from beamaudit.api.store.finding_identity import (
        finding_key,
        finding_period,
        finding_subject,
        number_changes,
    )

    meta = sa.MetaData()
    runs = sa.Table("review_runs", meta, autoload_with=bind)
    flags = sa.Table("flags", meta, autoload_with=bind)
    findings = sa.Table("findings", meta, autoload_with=bind)
    audit = sa.Table("audit_log", meta, autoload_with=bind)
    periods: dict[int, str] = {}
    concerns: dict[int, list[dict[str, Any]]] = {}
    for run in bind.execute(sa.select(runs)).mappings():
        parameters = run["parameters"] or {}
        bounds = parameters.get("period") or {}
        start: date | None
        end: date | None
        try:
            start, end = date.fromisoformat(bounds["start"]), date.fromisoformat(bounds["end"])
        except (KeyError, TypeError, ValueError):
            start = end = None
        scope = {k: list(parameters[k]) for k in SCOPE_KEYS if parameters.get(k)}
        bind.execute(
            runs.update()
            .where(runs.c.id == run["id"])
            .values(period_start=start, period_end=end, scope=scope, whole_site=not scope)
        )
        if start is not None and end is not None:
            periods[run["id"]] = finding_period(start, end)
        else:
            periods[run["id"]] = run["period"] or f"run {run['id']}"
        concerns[run["id"]] = [
            f.get("concerns") or {} for f in (run["result"] or {}).get("flags", [])
        ]
    last_status: dict[int, tuple[Any, int, str, str]] = {}  # flag id -> (at, entry id, status, by)
    for entry in bind.execute(
        sa.select(audit).where(audit.c.entity == "flag").order_by(audit.c.at, audit.c.id)
    ).mappings():
        if str(entry["entity_id"] or "").isdigit() and (entry["after"] or {}).get("status"):
            last_status[int(entry["entity_id"])] = (
                entry["at"], entry["id"], entry["after"]["status"], entry["actor"],
            )  # fmt: skip
    rows = list(
        bind.execute(sa.select(flags).order_by(flags.c.review_run_id, flags.c.id)).mappings()
    )
    position: dict[int, int] = {}
    per_run: dict[int, int] = {}
    for row in rows:
        per_run[row["review_run_id"]] = per_run.get(row["review_run_id"], 0) + 1
    by_key: dict[str, dict[str, Any]] = {}
    for row in rows:
        run_id = row["review_run_id"]
        at = position.get(run_id, 0)
        position[run_id] = at + 1
        stored = concerns.get(run_id) or []
        where = (
            stored[at]
            if len(stored) == per_run[run_id]
            else {
                "room": row["room"], "exam_type": row["exam_type"], "event_id": row["event_id"],
                "study_uid": row["study_instance_uid"],
            }
        )  # fmt: skip
        subject = finding_subject(row["kind"], where, row["numbers"] or {})
        key = finding_key(row["kind"], periods.get(run_id, ""), subject)
        found = by_key.setdefault(
            key, {"kind": row["kind"], "period": periods.get(run_id, ""), "subject": subject,
                  "flags": []},
        )  # fmt: skip
        found["flags"].append(row)
    for key, found in by_key.items():
        occurrences = sorted(found["flags"], key=lambda r: r["id"])
        triaged = [last_status[r["id"]] for r in occurrences if r["id"] in last_status]
        status, by, when = "open", None, None
        if triaged:
            when, _, status, by = max(triaged, key=lambda t: (t[0], t[1]))
        else:
            set_aside = [r["status"] for r in occurrences if r["status"] != "open"]
            status = set_aside[-1] if set_aside else "open"
        finding_id = bind.execute(
            findings.insert().values(
                key=key, kind=found["kind"], period=found["period"], subject=found["subject"],
                status=status, note=None, status_by=by, status_at=when, created_at=utcnow(),
            )
        ).inserted_primary_key[0]  # fmt: skip
        previous = None
        for r in occurrences:
            changes: dict[str, Any] | None = (
                None
                if previous is None
                else number_changes(
                    previous["numbers"] or {}, r["numbers"] or {},
                    severity=(previous["severity"], r["severity"]),
                )
            )  # fmt: skip
            bind.execute(
                flags.update()
                .where(flags.c.id == r["id"])
                .values(finding_id=finding_id, changes=changes)
            )
            previous = r


def downgrade() -> None:
    with op.batch_alter_table("flags", schema=None) as batch_op:
        batch_op.add_column(sa.Column("status", sa.String(), nullable=False, server_default="open"))
    bind = op.get_bind()
    meta = sa.MetaData()
    flags = sa.Table("flags", meta, autoload_with=bind)
    findings = sa.Table("findings", meta, autoload_with=bind)
    bind.execute(
        flags.update().values(
            status=sa.select(findings.c.status)
            .where(findings.c.id == flags.c.finding_id)
            .scalar_subquery()
        )
    )
    with op.batch_alter_table("flags", schema=None) as batch_op:
        batch_op.drop_constraint(batch_op.f("fk_flags_finding_id_findings"), type_="foreignkey")
        batch_op.drop_index(batch_op.f("ix_flags_finding_id"))
        batch_op.drop_column("changes")
        batch_op.drop_column("finding_id")
    with op.batch_alter_table("review_runs", schema=None, recreate="never") as batch_op:
        for column in (
            "supersede_reason", "superseded_by", "superseded_at", "runner", "whole_site",
            "scope", "period_end", "period_start",
        ):  # fmt: skip
            batch_op.drop_column(column)
    with op.batch_alter_table("findings", schema=None) as batch_op:
        batch_op.drop_index(batch_op.f("ix_findings_period"))
    op.drop_table("findings")
