"""The review core's records (:mod:`beamaudit.api.review`) from and to the store's rows.

Exam types are kept in ``exam_types`` with the modality group in ``modality`` and the DICOM
modalities, aggregation rules and description in ``details``; mapping rules keep their non-empty
pattern cells in ``patterns``; a reference-level set is one ``reference_level_sets`` row with its
``reference_levels`` rows.
"""

from __future__ import annotations

from collections.abc import Iterable
from typing import Any, cast

from sqlalchemy import select
from sqlalchemy.orm import Session

from beamaudit.api.review.examtypes import ExamCatalogue, ExamType, MappingRule, MappingRules
from beamaudit.api.review.levels import LevelEntry, ReferenceLevelSet
from beamaudit.api.store import models as m

__all__ = [
    "LEVEL_FIELDS",
    "catalogue_from_store",
    "exam_type_from_row",
    "exam_type_row_values",
    "level_rows",
    "level_set_from_rows",
    "level_sets_from_store",
    "level_values",
    "rules_from_store",
]


def exam_type_from_row(row: m.ExamTypeRow) -> ExamType:
    details = row.details or {}
    return ExamType(
        exam_type=row.code,
        name=row.name,
        modality_group=row.modality,
        dicom_modalities=tuple(details.get("dicom_modalities", ())),
        level_applies_per=cast(Any, row.level_applies_per),
        quantities=tuple(row.quantities or ()),
        aggregation=tuple((q, cast(Any, r)) for q, r in (details.get("aggregation") or {}).items()),
        description=details.get("description", ""),
        paediatric_bands=details.get("paediatric_bands", ""),
    )


def exam_type_row_values(t: ExamType) -> dict[str, Any]:
    """Column values of the row that keeps ``t``."""
    return {
        "code": t.exam_type,
        "name": t.name,
        "modality": t.modality_group,
        "level_applies_per": t.level_applies_per,
        "quantities": list(t.quantities),
        "details": {
            "dicom_modalities": list(t.dicom_modalities),
            "aggregation": dict(t.aggregation),
            "description": t.description,
            "paediatric_bands": t.paediatric_bands,
        },
    }


def catalogue_from_store(session: Session) -> ExamCatalogue:
    rows = session.scalars(select(m.ExamTypeRow).order_by(m.ExamTypeRow.code))
    return ExamCatalogue(types=tuple(exam_type_from_row(r) for r in rows))


def rules_from_store(session: Session) -> MappingRules:
    rows = session.scalars(select(m.MappingRuleRow).order_by(m.MappingRuleRow.priority))
    return MappingRules(
        rules=tuple(
            MappingRule(
                r.priority,
                r.exam_type,
                tuple((r.patterns or {}).items()),
                r.note or "",
                clinical_indication=r.clinical_indication or "",
            )
            for r in rows
        ),
        source="the store",
    )


def level_set_from_rows(
    row: m.ReferenceLevelSetRow, levels: Iterable[m.ReferenceLevelRow]
) -> ReferenceLevelSet:
    return ReferenceLevelSet(
        name=row.name,
        kind=cast(Any, row.kind),
        version=row.version,
        effective_from=row.effective_from,
        source=row.source or "",
        entries=tuple(
            LevelEntry(
                l.exam_type,
                l.quantity,
                l.value,
                l.unit,
                l.source or "",
                patient_group=l.patient_group or "",
                clinical_indication=l.clinical_indication or "",
            )
            for l in levels  # noqa: E741
        ),
    )


#: what a stored level keeps of its :class:`LevelEntry` (an empty source kept as null)
LEVEL_FIELDS = (
    "exam_type",
    "quantity",
    "value",
    "unit",
    "source",
    "patient_group",
    "clinical_indication",
)


def level_values(entry: LevelEntry) -> dict[str, Any]:
    """The stored columns of ``entry`` (also the fields of the API's level schema)."""
    values = {name: getattr(entry, name) for name in LEVEL_FIELDS}
    values["source"] = entry.source or None
    return values


def level_rows(set_id: int, entries: Iterable[LevelEntry]) -> list[m.ReferenceLevelRow]:
    """The ``reference_levels`` rows that keep ``entries`` in the set ``set_id``."""
    return [m.ReferenceLevelRow(set_id=set_id, **level_values(e)) for e in entries]


def level_sets_from_store(
    session: Session, *, ids: Iterable[int] | None = None, include_retired: bool = False
) -> list[tuple[m.ReferenceLevelSetRow, ReferenceLevelSet]]:
    """Stored sets (by name, then effective date) as review-core records."""
    S, L = m.ReferenceLevelSetRow, m.ReferenceLevelRow
    stmt = select(S).order_by(S.name, S.effective_from, S.id)
    if ids is not None:
        stmt = stmt.where(S.id.in_(list(ids)))
    if not include_retired:
        stmt = stmt.where(S.retired_at.is_(None))
    out = []
    for row in session.scalars(stmt):
        levels = session.scalars(
            select(L)
            .where(L.set_id == row.id)
            .order_by(L.exam_type, L.quantity, L.patient_group, L.clinical_indication)
        )
        out.append((row, level_set_from_rows(row, levels)))
    return out
