"""Skin dose of fluoroscopy and interventional procedures: a study's map record, the NCRP 168
follow-up list with cumulative skin dose, and follow-up steps (issue #21). Physicists only:
these rows concern single patients."""

from __future__ import annotations

from typing import Annotated

from fastapi import APIRouter, Depends
from sqlalchemy import select

from beamaudit import CAUTION
from beamaudit.api.settings import Settings
from beamaudit.api.store import models as m
from beamaudit.api.store.auth import record_change
from beamaudit.api.store.skin_doses import cumulative_skin_doses, followup_rows, set_followup
from beamaudit.api.web.deps import DbSession, Physicist, get_settings
from beamaudit.api.web.routes._common import (
    AUTH_RESPONSES,
    NOT_FOUND,
    IdPath,
    get_or_404,
    not_found,
)
from beamaudit.api.web.schemas.skin import (
    CumulativeSkinDoseRead,
    FollowUpItem,
    FollowUpList,
    FollowUpUpdate,
    SkinDoseRead,
)

__all__ = ["router"]

router = APIRouter(tags=["skin dose"], responses=AUTH_RESPONSES)


def _read(skin: m.SkinDoseRow, study: m.Study) -> SkinDoseRead:
    return SkinDoseRead(
        exam_id=study.id,
        study_instance_uid=study.study_instance_uid,
        status=skin.status,
        reason=skin.reason,
        computed_at=skin.computed_at,
        peak_skin_dose_mgy=skin.peak_skin_dose_mgy,
        area_above_2gy_cm2=skin.area_above_2gy_cm2,
        area_above_3gy_cm2=skin.area_above_3gy_cm2,
        area_above_5gy_cm2=skin.area_above_5gy_cm2,
        uncertainty_pct=skin.uncertainty_pct,
        events_used=skin.events_used,
        events_at_peak=list(skin.events_at_peak or []),
        levels_crossed=list(skin.levels_crossed or []),
        level_checks=list(skin.level_checks or []),
        followup_status=skin.followup_status,  # type: ignore[arg-type]
        followup_note=skin.followup_note,
        followup_by=skin.followup_by,
        followup_at=skin.followup_at,
        record=skin.record,
        caution=CAUTION,
    )


def _skin(session: DbSession, exam_id: int) -> tuple[m.SkinDoseRow, m.Study]:
    study = get_or_404(session, m.Study, exam_id, "exam")
    skin = session.scalar(select(m.SkinDoseRow).where(m.SkinDoseRow.study_id == study.id))
    if skin is None:
        not_found("skin-dose estimate of exam", exam_id)
    return skin, study


@router.get(
    "/exams/{exam_id}/skin-dose",
    operation_id="get_exam_skin_dose",
    response_model=SkinDoseRead,
    responses=NOT_FOUND,
)
def get_exam_skin_dose(exam_id: IdPath, session: DbSession, _: Physicist) -> SkinDoseRead:
    """A fluoroscopy or interventional procedure's skin-dose map record: PSD, areas above 2, 3
    and 5 Gy, events at the peak, uncertainty, NCRP 168 levels reached, follow-up, and the map
    (cells and dose per cell). 404 when the exam has no event with geometry."""
    return _read(*_skin(session, exam_id))


@router.patch(
    "/exams/{exam_id}/skin-dose/follow-up",
    operation_id="update_skin_dose_follow_up",
    response_model=SkinDoseRead,
    responses=NOT_FOUND,
)
def update_skin_dose_follow_up(
    exam_id: IdPath, body: FollowUpUpdate, session: DbSession, who: Physicist
) -> SkinDoseRead:
    """Record a follow-up step (patient informed, follow-up booked, closed) with a note.
    Audited."""
    skin, study = _skin(session, exam_id)
    before = {"status": skin.followup_status, "note": skin.followup_note}
    set_followup(session, study.id, status=body.status, note=body.note, by=who.actor)
    record_change(
        session,
        actor=who.actor,
        action="skin_dose_follow_up",
        entity="skin_doses",
        entity_id=skin.id,
        before=before,
        after={"status": body.status, "note": body.note},
    )
    session.commit()
    return _read(skin, study)


@router.get(
    "/skin-doses/follow-up", operation_id="list_skin_dose_follow_up", response_model=FollowUpList
)
def list_skin_dose_follow_up(
    session: DbSession,
    _: Physicist,
    settings: Annotated[Settings, Depends(get_settings)],
    include_closed: bool = False,
) -> FollowUpList:
    """Procedures at or above an NCRP 168 substantial radiation dose level (newest first) with
    their follow-up state, and the cumulative peak skin dose of each pseudonymised patient with
    more than one procedure in the window (``skin_dose_window_days``)."""
    window = settings.skin_dose_window_days
    return FollowUpList(
        items=[
            FollowUpItem.model_validate(r)
            for r in followup_rows(session, include_closed=include_closed)
        ],
        window_days=window,
        cumulative=[
            CumulativeSkinDoseRead.model_validate(e.summary())
            for e in cumulative_skin_doses(session, window_days=window)
        ],
        caution=CAUTION,
    )
