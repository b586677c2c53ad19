"""names19: one name per quantity in stored levels, exam types, findings, flags and review results

``ref_point_air_kerma_mgy`` becomes ``reference_point_air_kerma_mgy`` (the stored column's and
the dose report's name) and ``agd_mgy`` becomes ``mgd_mgy`` (mean glandular dose, beside its
reconstruction ``recon_mgd_mgy``): wherever a quantity's name is stored as data, in a level, an
exam type's quantities and aggregation, a finding's subject (its key computed again, so triage
carries over), a flag's numbers and changes, and a review run's parameters and result. The
downgrade writes the old names back. Columns do not change.

Revision ID: 0010_names19
Revises: 0009_ct_size
Create Date: 2026-12-05 07:30:00
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

import sqlalchemy as sa
from alembic import op

revision = "0010_names19"
down_revision = "0009_ct_size"
branch_labels = None
depends_on = None

#: old name -> name (the review core's ``QUANTITY_ALIASES`` as of this revision, written out so
#: that the migration does not change when the code does)
_RENAMED = {
    "ref_point_air_kerma_mgy": "reference_point_air_kerma_mgy",
    "agd_mgy": "mgd_mgy",
}
#: JSON columns that may hold a quantity's name: table -> (primary key, columns)
_JSON_COLUMNS = {
    "exam_types": ("code", ("quantities", "details")),
    "flags": ("id", ("numbers", "changes")),
    "review_runs": ("id", ("parameters", "result")),
}


def _key(key: str, names: Mapping[str, str]) -> str:
    """A key named after a quantity (``ref_point_air_kerma_mgy_srdl``) with its new name."""
    for old, new in names.items():
        if key == old or key.startswith(old + "_"):
            return new + key[len(old) :]
    return key


def _renamed(value: Any, names: Mapping[str, str]) -> Any:
    """``value`` with every text equal to an old name, and every key named after one, renamed."""
    if isinstance(value, str):
        return names.get(value, value)
    if isinstance(value, list):
        return [_renamed(v, names) for v in value]
    if isinstance(value, dict):
        return {_key(k, names): _renamed(v, names) for k, v in value.items()}
    return value


def _rename(names: Mapping[str, str]) -> None:
    from beamaudit.api.store.finding_identity import finding_key

    bind = op.get_bind()
    levels = sa.table("reference_levels", sa.column("quantity", sa.String()))
    for old, new in names.items():
        bind.execute(levels.update().where(levels.c.quantity == old).values(quantity=new))
    for name, (key, columns) in _JSON_COLUMNS.items():
        table = sa.table(name, sa.column(key), *(sa.column(c, sa.JSON()) for c in columns))
        for row in bind.execute(sa.select(table)).mappings().all():
            values = {c: _renamed(row[c], names) for c in columns}
            changed = {c: v for c, v in values.items() if v != row[c]}
            if changed:
                bind.execute(table.update().where(table.c[key] == row[key]).values(**changed))
    findings = sa.table(
        "findings",
        sa.column("id", sa.Integer()),
        sa.column("key", sa.String()),
        sa.column("kind", sa.String()),
        sa.column("period", sa.String()),
        sa.column("subject", sa.JSON()),
    )
    for row in bind.execute(sa.select(findings)).mappings().all():
        subject = _renamed(row["subject"] or {}, names)
        if subject != (row["subject"] or {}):
            bind.execute(
                findings.update()
                .where(findings.c.id == row["id"])
                .values(subject=subject, key=finding_key(row["kind"], row["period"], subject))
            )


def upgrade() -> None:
    _rename(_RENAMED)


def downgrade() -> None:
    _rename({new: old for old, new in _RENAMED.items()})
