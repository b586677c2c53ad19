"""Skin dose of fluoroscopy and interventional procedures: a study's map record, the NCRP 168
follow-up list with cumulative skin dose, and follow-up steps (issue #21). Physicists only:
these rows concern single patients."""

from __future__ import annotations

from typing import Annotated, Any

from fastapi import Depends, HTTPException, Path, Response, status
from sqlalchemy import select

from beamaudit import CAUTION
from beamaudit.api.settings import Settings
from beamaudit.api.store import models as m
from beamaudit.api.store.auth import record_change
from beamaudit.api.store.skin_doses import (
    CumulativeEntry,
    cumulative_skin_doses,
    followup_rows,
    patient_skin_dose,
    set_followup,
)
from beamaudit.api.web.deps import DbSession, Physicist, get_settings
from beamaudit.api.web.routes._common import (
    AUTH_RESPONSES,
    NOT_FOUND,
    IdPath,
    get_or_404,
    not_found,
)
from beamaudit.api.web.routing import Router
from beamaudit.api.web.schemas.base import ErrorBody
from beamaudit.api.web.schemas.skin import (
    CumulativeSkinDoseRead,
    FollowUpItem,
    FollowUpList,
    FollowUpUpdate,
    PatientSkinDoseRead,
    SkinDoseRead,
)
from beamaudit.api.web.skin_image import SkinImageError, exam_skin_png, patient_skin_png

__all__ = ["router"]

router = Router(tags=["skin dose"], responses=AUTH_RESPONSES)


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


#: the answer of a map image, for the OpenAPI schema
PNG_ANSWER: dict[int | str, dict[str, Any]] = {
    200: {
        "content": {"image/png": {"schema": {"type": "string", "format": "binary"}}},
        "description": "The skin-dose map as a PNG image (A4 upright, 150 dpi).",
    },
    409: {"model": ErrorBody, "description": "There is no map to draw; the reason."},
}
PatientPath = Annotated[
    str, Path(min_length=1, max_length=128, description="pseudonymised patient id as stored")
]


def _png(data: bytes, filename: str) -> Response:
    return Response(
        data,
        media_type="image/png",
        headers={"Content-Disposition": f'inline; filename="{filename}"'},
    )


@router.get(
    "/exams/{exam_id}/skin-dose/map.png",
    operation_id="get_exam_skin_dose_map_png",
    response_class=Response,
    responses={**NOT_FOUND, **PNG_ANSWER},
)
def get_exam_skin_dose_map_png(exam_id: IdPath, session: DbSession, _: Physicist) -> Response:
    """A procedure's skin-dose map as a PNG image for the patient's record or a follow-up letter:
    back and front unrolled, dose in Gy, isodose lines at 2, 3 and 5 Gy, the peak marked,
    orientation and the caution; the patient named by the pseudonymised id only. 409 when the
    map could not be computed."""
    skin, study = _skin(session, exam_id)
    try:
        data = exam_skin_png(skin, study)
    except SkinImageError as exc:
        raise HTTPException(status.HTTP_409_CONFLICT, detail=str(exc)) from None
    return _png(data, f"skin-dose-map-exam-{study.id}.png")


def _patient_entry(
    session: DbSession, patient: str, settings: Settings
) -> tuple[CumulativeEntry, float]:
    window = settings.skin_dose_window_days
    entry = patient_skin_dose(session, patient, window_days=window)
    if entry is None:
        raise HTTPException(
            status.HTTP_404_NOT_FOUND,
            detail=f"no procedure with a skin-dose estimate in the last {window:g} days "
            "for this patient",
        )
    return entry, window


@router.get(
    "/skin-doses/patients/{patient_pseudo_id}",
    operation_id="get_patient_skin_dose",
    response_model=PatientSkinDoseRead,
    responses=NOT_FOUND,
)
def get_patient_skin_dose(
    patient_pseudo_id: PatientPath,
    session: DbSession,
    _: Physicist,
    settings: Annotated[Settings, Depends(get_settings)],
) -> PatientSkinDoseRead:
    """One pseudonymised patient's cumulative peak skin dose over the follow-up window
    (``skin_dose_window_days``), and how it was made (``method``, ``notes``)."""
    entry, window = _patient_entry(session, patient_pseudo_id, settings)
    return PatientSkinDoseRead.model_validate(
        {**entry.summary(), "window_days": window, "caution": CAUTION}
    )


@router.get(
    "/skin-doses/patients/{patient_pseudo_id}/map.png",
    operation_id="get_patient_skin_dose_map_png",
    response_class=Response,
    responses={**NOT_FOUND, **PNG_ANSWER},
)
def get_patient_skin_dose_map_png(
    patient_pseudo_id: PatientPath,
    session: DbSession,
    _: Physicist,
    settings: Annotated[Settings, Depends(get_settings)],
) -> Response:
    """One pseudonymised patient's cumulative skin-dose map over the follow-up window as a PNG
    image. 409 when the maps cannot be added (different patient models: the sum of the peaks
    is given by ``GET /skin-doses/patients/{patient_pseudo_id}`` instead)."""
    entry, window = _patient_entry(session, patient_pseudo_id, settings)
    try:
        data = patient_skin_png(entry, window_days=window)
    except SkinImageError as exc:
        raise HTTPException(status.HTTP_409_CONFLICT, detail=str(exc)) from None
    return _png(data, "skin-dose-map-cumulative.png")
