"""The data of the reference-levels page (``/levels``): the proposals of the newest record, the
levels in force, and for physicists the recurrent-exposure list.

Words for people are added here (exam-type names, quantity labels, paediatric band labels), so
that :func:`beamaudit.dashboards.render_levels` takes plain records.
"""

from __future__ import annotations

from datetime import date
from typing import Any

from sqlalchemy.orm import Session

from beamaudit.api.review.bands import PatientGroups, load_default_patient_groups
from beamaudit.api.review.levels import levels_in_effect
from beamaudit.api.review.mammography import ANY_THICKNESS_BAND
from beamaudit.api.review.quantities import QUANTITIES
from beamaudit.api.runs.local_levels import proposal_rows, record_run
from beamaudit.api.store.review_rows import catalogue_from_store, level_sets_from_store

__all__ = ["ADOPT_PATH", "levels_page_data"]

#: where the page sends adopted proposals
ADOPT_PATH = "/api/v1/local-level-proposals/adopt"


def _display_unit(name: str, unit: Any) -> str:
    q = QUANTITIES.get(name)
    return q.display_unit if q is not None else str(unit or "")


def _quantity_label(name: str) -> str:
    q = QUANTITIES.get(name)
    return f"{q.label} ({q.display_unit})" if q is not None else name


def _level_group(bands: PatientGroups, group: str, *, mammography: bool) -> str:
    """A level's patient group for people: a band's label; a mammography level that names no
    band applies to the review's thickness band; "" for adults."""
    if group:
        return bands.label(group)
    return ANY_THICKNESS_BAND if mammography else ""


def levels_page_data(session: Session, *, physicist: bool, today: date) -> dict[str, Any]:
    """Keyword arguments of :func:`beamaudit.dashboards.render_levels` (context aside)."""
    catalogue = catalogue_from_store(session)
    names = {t.exam_type: t.name for t in catalogue.types}
    mammography = {t.exam_type for t in catalogue.types if t.modality_group == "mammography"}
    bands = load_default_patient_groups()
    run = record_run(session)
    proposals = []
    for r in proposal_rows(run) if run is not None else []:
        proposals.append(
            {
                **r,
                "exam_name": names.get(str(r.get("exam_type")), r.get("exam_type")),
                "quantity_label": _quantity_label(str(r.get("quantity"))),
                "unit": _display_unit(str(r.get("quantity")), r.get("unit")),
                "patient_group_label": bands.label(r.get("patient_group")).replace(
                    "adults and patients of unrecorded age", "adults"
                ),
            }
        )
    levels = []
    local_names: list[str] = []
    stored = level_sets_from_store(session)
    in_force = {id(s) for s in levels_in_effect([s for _, s in stored], today)}
    for _, s in stored:
        if id(s) not in in_force:
            continue
        if s.kind == "local" and s.name not in local_names:
            local_names.append(s.name)
        for e in s.entries:
            levels.append(
                {
                    "set": s.name,
                    "kind": s.kind,
                    "version": s.version,
                    "effective_from": s.effective_from.isoformat(),
                    "exam_type": e.exam_type,
                    "exam_name": names.get(e.exam_type, e.exam_type),
                    "quantity": e.quantity,
                    "quantity_label": _quantity_label(e.quantity),
                    "patient_group": _level_group(
                        bands, e.patient_group, mammography=e.exam_type in mammography
                    ),
                    "clinical_indication": e.clinical_indication,
                    "value": e.value,
                    "unit": _display_unit(e.quantity, e.unit),
                    "source": e.source,
                }
            )
    recurrent = None
    if physicist:
        from beamaudit.api.runs.recurrent import recurrent_exposure

        found = recurrent_exposure(session, as_of=today)
        recurrent = {**found.__dict__, "as_of": found.as_of.isoformat()}
    return {
        "proposals": proposals,
        "levels": levels,
        "run_label": f"review run {run.id} of {run.period}" if run is not None else "",
        "run_id": run.id if run is not None else None,
        "can_adopt": physicist,
        "adopt_path": ADOPT_PATH,
        "local_set_names": local_names,
        "recurrent": recurrent,
    }
