"""The one writer of reference-level sets: every check a stored set must pass, then its rows.

``beamaudit levels import``, the REST routes (one set, a CSV file, a change) and the demo all go
through here, so a set the command line accepts is a set the API accepts and a review can use:

* every exam type is in the stored catalogue;
* the versions of one set name, the stored ones (not retired) and the new ones together, agree on
  their kind and never share a version or an effective date (:func:`check_level_sets`), and a
  name and version is never stored twice (a retired version included).

The caller owns the transaction; every set added is audited.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any, cast

from sqlalchemy import select
from sqlalchemy.orm import Session

from beamaudit.api.review.errors import ReviewError
from beamaudit.api.review.levels import ReferenceLevelSet, check_level_sets
from beamaudit.api.store import models as m
from beamaudit.api.store.auth import record_change
from beamaudit.api.store.review_rows import ensure_catalogue, level_rows

__all__ = [
    "LevelSetConflict",
    "add_level_sets",
    "check_stored_versions",
    "level_set_view",
    "unknown_exam_types",
]

S = m.ReferenceLevelSetRow
L = m.ReferenceLevelRow
_VIEW_FIELDS = ("exam_type", "quantity", "value", "unit", "source")


class LevelSetConflict(ReviewError):
    """A set version that clashes with the stored versions of its name (kind, version, date)."""


def unknown_exam_types(session: Session, sets: Sequence[ReferenceLevelSet]) -> str | None:
    """Why ``sets`` name exam types the stored catalogue lacks, or ``None``."""
    known = set(session.scalars(select(m.ExamTypeRow.code)))
    for s in sets:
        unknown = sorted({e.exam_type for e in s.entries} - known)
        if unknown:
            return (
                f"set {s.name!r} {s.version}: exam types not in the catalogue: {', '.join(unknown)}"
            )
    return None


def check_stored_versions(
    session: Session, sets: Sequence[ReferenceLevelSet], *, replacing: int | None = None
) -> None:
    """``sets`` against each other and the stored versions of their names.

    ``replacing`` is the id of a stored version that ``sets`` (one set) will replace.

    Raises
    ------
    LevelSetConflict
        Naming the set and the clash.
    """
    names = sorted({s.name for s in sets})
    stored = list(session.scalars(select(S).where(S.name.in_(names)).order_by(S.effective_from)))
    for s in sets:
        for row in stored:
            if row.id != replacing and (row.name, row.version) == (s.name, s.version):
                raise LevelSetConflict(
                    f"level set {s.name!r} version {s.version!r} is stored already (id {row.id})"
                )
    others = [
        ReferenceLevelSet(
            name=row.name,
            kind=cast(Any, row.kind),
            version=row.version,
            effective_from=row.effective_from,
            source="",
            entries=(),
        )
        for row in stored
        if row.id != replacing and row.retired_at is None
    ]
    try:
        check_level_sets([*others, *sets])
    except ReviewError as exc:
        raise LevelSetConflict(str(exc)) from None


def level_set_view(session: Session, row: m.ReferenceLevelSetRow) -> dict[str, Any]:
    """A stored version as the audit log shows it (before and after a change)."""
    levels = session.scalars(select(L).where(L.set_id == row.id).order_by(L.exam_type, L.quantity))
    return {
        "name": row.name,
        "kind": row.kind,
        "version": row.version,
        "effective_from": row.effective_from.isoformat(),
        "source": row.source,
        "retired_at": None if row.retired_at is None else row.retired_at.isoformat(),
        "levels": [
            {name: getattr(x, name) for name in _VIEW_FIELDS}
            | {k: v for k in ("patient_group", "clinical_indication") if (v := getattr(x, k, None))}
            for x in levels
        ],
    }


def add_level_sets(
    session: Session,
    sets: Sequence[ReferenceLevelSet],
    *,
    actor: str = "system",
    action: str = "create",
    audit: dict[str, Any] | None = None,
) -> list[m.ReferenceLevelSetRow]:
    """Add reference-level set versions, all or none (the caller owns the transaction).

    Each version is audited as ``action`` with its view as ``after``; ``audit`` (``before`` and
    ``after``) replaces that record for a caller that knows more (an adoption of proposals).

    Raises
    ------
    LevelSetConflict
        A version that clashes with a stored one or with another of ``sets``.
    ReviewError
        An exam type the catalogue lacks.
    """
    ensure_catalogue(session, actor=actor)
    refusal = unknown_exam_types(session, sets)
    if refusal is not None:
        raise ReviewError(refusal)
    check_stored_versions(session, sets)
    rows = []
    for s in sets:
        row = S(
            name=s.name,
            kind=s.kind,
            version=s.version,
            effective_from=s.effective_from,
            source=s.source or None,
        )
        session.add(row)
        session.flush()
        session.add_all(level_rows(row.id, s.entries))
        session.flush()
        record_change(
            session,
            actor=actor,
            action=action,
            entity="reference_level_set",
            entity_id=row.id,
            before=(audit or {}).get("before"),
            after=(audit or {}).get("after") or level_set_view(session, row),
        )
        rows.append(row)
    return rows
