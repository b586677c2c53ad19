"""The review core's records (:mod:`beamaudit.api.review`) from and to the store's rows.

Exam types are kept in ``exam_types`` with the modality group in ``modality`` and the DICOM
modalities, aggregation rules and description in ``details``; mapping rules keep their non-empty
pattern cells in ``patterns``; a reference-level set is one ``reference_level_sets`` row with its
``reference_levels`` rows.

The queries more than one room needs on these rows live here too: the catalogue seeded on first
use (:func:`ensure_catalogue`), and the exam type of stored events set from the stored rules
(:func:`map_stored_events`).
"""

from __future__ import annotations

from collections.abc import Iterable
from typing import Any, cast

import pandas as pd
from sqlalchemy import Table, func, select
from sqlalchemy.orm import Session

from beamaudit.api.review.examtypes import (
    ExamCatalogue,
    ExamType,
    MappingRule,
    MappingRules,
    load_default_catalogue,
    load_default_rules,
    map_events_with_indication,
)
from beamaudit.api.review.levels import LevelEntry, ReferenceLevelSet
from beamaudit.api.store import models as m
from beamaudit.api.store.auth import record_change

__all__ = [
    "LEVEL_FIELDS",
    "catalogue_from_store",
    "ensure_catalogue",
    "exam_type_from_row",
    "exam_type_row_values",
    "exam_types_and_indications_of",
    "exam_types_of",
    "level_rows",
    "level_set_from_rows",
    "level_sets_from_store",
    "level_values",
    "map_stored_events",
    "room_and_device_names",
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


def room_and_device_names(session: Session) -> tuple[dict[int, tuple[str, str]], dict[int, str]]:
    """Each room's (name, site name) and each device's display name, by id."""
    rooms = {
        r.id: (r.name, site)
        for r, site in session.execute(
            select(m.Room, m.Site.name).join(m.Site, m.Site.id == m.Room.site_id)
        )
    }
    devices = {
        d.id: " ".join(x for x in (d.manufacturer, d.model_name, d.serial_number) if x)
        or d.station_name
        or f"device {d.id}"
        for d in session.scalars(select(m.Device))
    }
    return rooms, devices


def exam_types_of(events: pd.DataFrame, rules: MappingRules) -> list[str | None]:
    """The exam type of each event by the rules (:func:`beamaudit.api.review.map_events`),
    ``None`` where no rule matches."""
    return [exam_type for exam_type, _ in exam_types_and_indications_of(events, rules)]


def exam_types_and_indications_of(
    events: pd.DataFrame, rules: MappingRules
) -> list[tuple[str | None, str | None]]:
    """The exam type and clinical indication of each event by its first matching rule
    (:func:`beamaudit.api.review.examtypes.map_events_with_indication`); ``None`` where no rule
    matches or the rule sets no indication."""
    mapped = map_events_with_indication(events, rules)
    out: list[tuple[str | None, str | None]] = []
    for exam_type, indication in zip(
        mapped["exam_type"], mapped["clinical_indication"], strict=True
    ):
        if exam_type is None or isinstance(exam_type, float):
            out.append((None, None))
        else:
            out.append((str(exam_type), indication if isinstance(indication, str) else None))
    return out


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
                    clinical_indication=r.clinical_indication or None,
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


def map_stored_events(session: Session, event_ids: list[int] | None = None) -> int:
    """Set ``exam_type`` of stored events from the mapping rules; returns how many were mapped.

    With ``event_ids`` None, every event is (re)mapped (after the rules changed).
    """
    _, rules = ensure_catalogue(session)
    cols = [
        m.ExposureEventRow.id,
        m.ExposureEventRow.modality,
        m.ExposureEventRow.room_id,
        m.ExposureEventRow.study_description,
        m.ExposureEventRow.series_description,
        m.ExposureEventRow.protocol_name,
        m.ExposureEventRow.body_part,
        m.ExposureEventRow.view_position,
        m.ExposureEventRow.mammography_acquisition,
        m.ExposureEventRow.mammography_intent,
    ]
    stmt = select(*cols)
    if event_ids is not None:
        if not event_ids:
            return 0
        stmt = stmt.where(m.ExposureEventRow.id.in_(event_ids))
    rows = session.execute(stmt).fetchall()
    if not rows:
        return 0
    rooms, _ = room_and_device_names(session)
    frame = pd.DataFrame(rows, columns=[c.key for c in cols])
    frame["room"] = [rooms.get(i, ("", ""))[0] if pd.notna(i) else None for i in frame["room_id"]]
    events_table = m.ExposureEventRow.__table__
    assert isinstance(events_table, Table)  # a declarative class maps one Table
    by_value: dict[tuple[str | None, str | None], list[int]] = {}
    mapped = exam_types_and_indications_of(frame, rules)
    for event_id, pair in zip(frame["id"], mapped, strict=True):
        by_value.setdefault(pair, []).append(int(event_id))
    # one UPDATE per exam type and indication (in chunks of ids), not one per event
    for (value, indication), ids in by_value.items():
        for start in range(0, len(ids), 900):
            session.execute(
                events_table.update()
                .where(m.ExposureEventRow.id.in_(ids[start : start + 900]))
                .values(exam_type=value, clinical_indication=indication)
            )
    return sum(len(ids) for (value, _), ids in by_value.items() if value is not None)
