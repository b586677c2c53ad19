"""The exam-type catalogue and mapping rules in the store: its one writer of exam types.

An empty store is seeded with the shipped catalogue and rules on first use (and says so in the
audit log); ``exam_type_row_values`` is the one way an exam type becomes the column values of its
row, used by the seed, the REST routes and their CSV import alike.
"""

from __future__ import annotations

from sqlalchemy import func, select
from sqlalchemy.orm import Session

from beamaudit.api.auth import record_change
from beamaudit.api.review import (
    ExamCatalogue,
    MappingRules,
    load_default_catalogue,
    load_default_rules,
)
from beamaudit.api.routes._review_rows import (
    catalogue_from_store,
    exam_type_row_values,
    rules_from_store,
)
from beamaudit.api.store import models as m

__all__ = ["ensure_catalogue"]


def ensure_catalogue(
    session: Session, *, actor: str = "system"
) -> tuple[ExamCatalogue, MappingRules]:
    """The stored catalogue and rules; seeds the shipped ones into an empty store."""
    if session.scalar(select(func.count()).select_from(m.ExamTypeRow)) == 0:
        catalogue = load_default_catalogue()
        for t in catalogue.types:
            session.add(m.ExamTypeRow(**exam_type_row_values(t)))
        rules = load_default_rules(catalogue)
        for r in rules.rules:
            session.add(
                m.MappingRuleRow(
                    priority=r.priority,
                    exam_type=r.exam_type,
                    patterns=dict(r.patterns),
                    note=r.note,
                )
            )
        session.flush()
        record_change(
            session,
            actor=actor,
            action="seed",
            entity="exam_catalogue",
            after={"exam_types": len(catalogue.types), "mapping_rules": len(rules.rules)},
        )
    return catalogue_from_store(session), rules_from_store(session)
