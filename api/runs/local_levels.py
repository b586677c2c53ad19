"""Proposed local DRLs of a stored review run, and adopting them as a new version of a local set.

A review run keeps ICRP 135's typical values and proposed local DRLs in its result
(``site_values``: the 75th percentile of the room medians of a site, proposed only when enough
rooms contribute). A proposal is never adopted by itself: a physicist picks the rows of one site,
and :func:`adopt_proposals` stores a new version of a local set, the newest version in force with
those levels replaced or added, each citing the run and its numbers; one audit entry records
what was adopted from which run, and the set's levels before and after.
"""

from __future__ import annotations

import math
from collections.abc import Iterable, Mapping
from dataclasses import asdict, dataclass
from datetime import date
from typing import Any

from sqlalchemy.orm import Session

from beamaudit.api.review import ReviewError
from beamaudit.api.review.levels import LevelEntry, ReferenceLevelSet, check_level_sets
from beamaudit.api.store import models as m
from beamaudit.api.store.auth import record_change
from beamaudit.api.store.review_rows import level_rows, level_sets_from_store

__all__ = ["AdoptionError", "ProposalKey", "adopt_proposals", "proposal_rows", "record_run"]


class AdoptionError(ReviewError):
    """Proposals that cannot be adopted (none chosen, not proposed, a clash of versions)."""


@dataclass(frozen=True, slots=True)
class ProposalKey:
    """Which proposal: exam type, quantity, paediatric band ('' adults), indication ('' none)."""

    exam_type: str
    quantity: str
    patient_group: str = ""
    clinical_indication: str = ""


def _key(row: Mapping[str, Any]) -> ProposalKey:
    return ProposalKey(
        str(row["exam_type"]),
        str(row["quantity"]),
        str(row.get("patient_group") or ""),
        str(row.get("clinical_indication") or ""),
    )


def record_run(session: Session, run_id: int | None = None) -> m.ReviewRun | None:
    """The run ``run_id`` when it is done, else (None) the record of the newest month
    (:func:`beamaudit.api.runs.record_run`)."""
    from beamaudit.api.runs.record import record_run as month_record

    if run_id is None:
        return month_record(session, None)
    run = session.get(m.ReviewRun, run_id)
    return run if run is not None and run.status == "done" and run.result else None


def proposal_rows(run: m.ReviewRun) -> list[dict[str, Any]]:
    """The run's typical values and proposed local DRLs (``site_values`` of its result)."""
    return [dict(r) for r in (run.result or {}).get("site_values") or []]


def _finite(value: Any) -> bool:
    return isinstance(value, int | float) and math.isfinite(value) and value > 0


def adopt_proposals(
    session: Session,
    *,
    run: m.ReviewRun,
    site: str,
    set_name: str,
    version: str,
    effective_from: date,
    source: str,
    keys: Iterable[ProposalKey] | None = None,
    actor: str,
) -> m.ReferenceLevelSetRow:
    """Store a new version of the local set ``set_name``: its newest version in force (if any)
    with the chosen proposals of ``site`` (all proposed rows when ``keys`` is None) as levels.

    Raises
    ------
    AdoptionError
        No proposed row chosen, a chosen row that is not a proposal of the run's site, a set
        of that name that is national, or a version clash (name and version, or date).
    """
    rows = [r for r in proposal_rows(run) if r.get("site") == site]
    proposed = {_key(r): r for r in rows if r.get("proposal_status") == "proposed"}
    wanted = list(proposed) if keys is None else list(dict.fromkeys(keys))
    missing = [k for k in wanted if k not in proposed]
    if missing:
        k = missing[0]
        raise AdoptionError(
            f"review run {run.id} has no proposed local level for {k.exam_type} {k.quantity}"
            f"{' ' + k.patient_group if k.patient_group else ''}"
            f"{' ' + k.clinical_indication if k.clinical_indication else ''} at {site!r}"
        )
    if not wanted:
        raise AdoptionError(
            f"review run {run.id} proposes no local level at {site!r} (too few rooms)"
        )
    stored = level_sets_from_store(session)
    versions = [(row, s) for row, s in stored if s.name == set_name]
    if any(s.kind != "local" for _, s in versions):
        raise AdoptionError(f"level set {set_name!r} is not a local set")
    in_force = [s for _, s in versions if s.effective_from <= effective_from]
    base = in_force[-1] if in_force else None
    entries = {e.key: e for e in (base.entries if base is not None else ())}
    before = {"|".join(k): e.value for k, e in entries.items()}
    adopted = []
    for k in wanted:
        r = proposed[k]
        raw: Any = r.get("proposed_local_drl")
        if not _finite(raw):
            raise AdoptionError(f"the proposal for {k.exam_type} {k.quantity} has no value")
        value = float(raw)
        cite = (
            f"proposed local DRL of review run {run.id} ({run.period}, {site}): 75th percentile "
            f"of {r.get('n_rooms')} room medians (ICRP 135)"
        )
        entry = LevelEntry(
            k.exam_type,
            k.quantity,
            value,
            str(r.get("unit") or ""),
            cite,
            patient_group=k.patient_group,
            clinical_indication=k.clinical_indication,
        )
        entries[entry.key] = entry
        adopted.append({**asdict(k), "value": value, "n_rooms": r.get("n_rooms")})
    candidate = ReferenceLevelSet(
        name=set_name,
        kind="local",
        version=version,
        effective_from=effective_from,
        source=source,
        entries=tuple(entries[k] for k in sorted(entries)),
    )
    try:
        check_level_sets([*(s for _, s in versions), candidate])
    except ReviewError as exc:
        raise AdoptionError(str(exc)) from None
    if any(s.version == version for _, s in versions):
        raise AdoptionError(f"level set {set_name!r} has a version {version!r} already")
    row = m.ReferenceLevelSetRow(
        name=set_name, kind="local", version=version, effective_from=effective_from, source=source
    )
    session.add(row)
    session.flush()
    session.add_all(level_rows(row.id, candidate.entries))
    session.flush()
    record_change(
        session,
        actor=actor,
        action="adopt_proposals",
        entity="reference_level_set",
        entity_id=row.id,
        before={"set": set_name, "version": base.version if base else None, "levels": before},
        after={
            "set": set_name,
            "version": version,
            "effective_from": effective_from.isoformat(),
            "review_run": run.id,
            "site": site,
            "adopted": adopted,
            "levels": {"|".join(e.key): e.value for e in candidate.entries},
        },
    )
    return row
