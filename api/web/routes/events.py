"""Exams (studies) and exposure events: filtered cursor pages, and one event's dose breakdown.

Reading events, exams and their UIDs needs the physicist role: viewers read reviews and
aggregates only.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Annotated, Any

from fastapi import Depends, Query
from sqlalchemy import ColumnElement, Select, and_, exists, func, or_, select

from beamaudit import CAUTION
from beamaudit.api.intake.mammography import is_mammography
from beamaudit.api.intake.reconstruct import trail_for_event
from beamaudit.api.review.quantities import QUANTITIES
from beamaudit.api.store import models as m
from beamaudit.api.web.deps import DbSession, Physicist
from beamaudit.api.web.routes._common import (
    AUTH_RESPONSES,
    NOT_FOUND,
    IdPath,
    PageParams,
    Period,
    get_or_404,
    page_params,
    paginate,
    period_params,
)
from beamaudit.api.web.routing import Router, reads_only
from beamaudit.api.web.schemas.base import Id, ShortText
from beamaudit.api.web.schemas.events import (
    AccumulatedDoseRead,
    DoseComparison,
    EventDetail,
    EventEffectiveDose,
    EventFlag,
    EventGeometry,
    EventPage,
    EventPatient,
    EventReconstructed,
    EventReported,
    EventSize,
    EventSummary,
    EventTechnique,
    ExamDetail,
    ExamPage,
    ExamSummary,
)
from beamaudit.api.web.schemas.mammography import EventMammography

__all__ = ["router"]

router = Router(tags=["events"], responses=AUTH_RESPONSES)

E = m.ExposureEventRow


def _reviewed(quantity: str, u_col: str | None) -> tuple[str, str, str | None, str, str | None]:
    """A reviewed quantity's row of :data:`_COMPARED`, its columns from the one mapping."""
    q = QUANTITIES[quantity]
    assert q.reconstructed_column is not None
    reported = q.column if q.column != q.reconstructed_column else None
    return (quantity, q.display_unit, reported, q.reconstructed_column, u_col)


#: (quantity, unit, reported column, reconstructed column, uncertainty column)
_COMPARED: tuple[tuple[str, str, str | None, str, str | None], ...] = (
    _reviewed("dap_gy_cm2", "recon_dap_u_gy_cm2"),
    ("hvl_mm_al", "mm Al", "hvl_mm_al", "recon_hvl1_mm_al", None),
    ("output_ugy_per_mas_1m", "µGy/mAs at 1 m", None, "recon_output_ugy_per_mas_1m", None),
    ("incident_air_kerma_mgy", "mGy", None, "recon_incident_air_kerma_mgy", None),
    _reviewed("esak_mgy", "recon_esak_u_mgy"),
    ("entrance_dose_mgy", "mGy", None, "recon_entrance_dose_mgy", None),
    # mammography: the device's AGD (Organ Dose) beside our D_G (Dance method)
    _reviewed("mgd_mgy", "recon_mgd_u_mgy"),
    # CT: the scanner's SSDE beside SSDE from our Dw (api/intake/ct_sizing.py)
    ("ssde_mgy", "mGy", "ssde_mgy", "size_ssde_mgy", None),
)
#: Reported-only quantities shown in the breakdown when present.
_REPORTED_ONLY = ("reference_point_air_kerma_mgy", "ctdivol_mgy", "dlp_mgy_cm")


@dataclass(frozen=True, slots=True)
class EventFilters:
    site_id: int | None
    room_id: int | None
    device_id: int | None
    exam_type: str | None
    flag: str | None
    modality: str | None


async def event_filters(
    site_id: Annotated[Id | None, Query(description="site (hospital) id")] = None,
    room_id: Annotated[Id | None, Query(description="room id")] = None,
    device_id: Annotated[Id | None, Query(description="device id")] = None,
    exam_type: Annotated[ShortText | None, Query(description="exam-type code")] = None,
    flag: Annotated[
        ShortText | None, Query(description="only items a review flagged with this kind")
    ] = None,
    modality: Annotated[ShortText | None, Query(description="DICOM modality, e.g. DX")] = None,
) -> EventFilters:
    return EventFilters(site_id, room_id, device_id, exam_type, flag, modality)


Filters = Annotated[EventFilters, Depends(event_filters)]
Periods = Annotated[Period, Depends(period_params)]
Pages = Annotated[PageParams, Depends(page_params)]


def _event_conditions(f: EventFilters) -> list[ColumnElement[bool]]:
    conditions: list[ColumnElement[bool]] = []
    if f.site_id is not None:
        conditions.append(E.room_id.in_(select(m.Room.id).where(m.Room.site_id == f.site_id)))
    if f.room_id is not None:
        conditions.append(E.room_id == f.room_id)
    if f.device_id is not None:
        conditions.append(E.device_id == f.device_id)
    if f.modality is not None:
        conditions.append(E.modality == f.modality)
    return conditions


def _in_period(column: Any, period: Period) -> list[ColumnElement[bool]]:
    out: list[ColumnElement[bool]] = []
    if period.start is not None:
        out.append(column >= period.start)
    if period.end is not None:
        out.append(column < period.end)
    return out


# -- events ---------------------------------------------------------------------------------------
#: The columns an event list needs: the summary's own columns (never the whole row with its JSON
#: trail), the study's and source object's UIDs joined in the same query.
_SUMMARY_UIDS = {"study_instance_uid", "sop_instance_uid"}


def _summary_columns() -> list[Any]:
    own = [E.__table__.c[name] for name in EventSummary.model_fields if name not in _SUMMARY_UIDS]
    return [
        *own,
        m.Study.study_instance_uid.label("study_instance_uid"),
        m.SourceObjectRow.sop_instance_uid.label("sop_instance_uid"),
    ]


def _events_query(f: EventFilters, period: Period, superseded: bool | None) -> Select[Any]:
    stmt = (
        select(*_summary_columns())
        .outerjoin(m.Study, m.Study.id == E.study_id)
        .outerjoin(m.SourceObjectRow, m.SourceObjectRow.id == E.source_object_id)
        .where(*_event_conditions(f))
    )
    stmt = stmt.where(*_in_period(func.coalesce(E.event_datetime, E.study_datetime), period))
    if f.exam_type is not None:
        stmt = stmt.where(E.exam_type == f.exam_type)
    if superseded is not None:
        stmt = stmt.where(E.superseded.is_(superseded))
    if f.flag is not None:
        study_uid = select(m.Study.study_instance_uid).where(m.Study.id == E.study_id).correlate(E)
        stmt = stmt.where(
            exists().where(
                m.FlagRow.kind == f.flag,
                or_(
                    m.FlagRow.event_id == E.id,
                    and_(
                        m.FlagRow.event_id.is_(None),
                        m.FlagRow.study_instance_uid == study_uid.scalar_subquery(),
                    ),
                ),
            )
        )
    return stmt


@router.get("/events", operation_id="list_events", response_model=EventPage)
@reads_only
def list_events(
    session: DbSession,
    _: Physicist,
    filters: Filters,
    period: Periods,
    page: Pages,
    superseded: Annotated[
        bool | None,
        Query(description="true: only events a dose report supersedes; false: only the others"),
    ] = None,
) -> EventPage:
    """Exposure events, newest first; the period applies to the event's time (else its study's)."""
    rows, cursor = paginate(
        session, _events_query(filters, period, superseded), E.id, page, columns=True
    )
    items = [EventSummary.model_validate(dict(r._mapping)) for r in rows]
    return EventPage(items=items, next_cursor=cursor)


def _ratio(reported: float | None, reconstructed: float | None) -> float | None:
    if reported is None or reconstructed is None or reconstructed <= 0:
        return None
    return reported / reconstructed


def dose_breakdown(row: m.ExposureEventRow) -> list[DoseComparison]:
    """Each dose quantity of ``row``, reported beside reconstructed (quantities with a value)."""
    out: list[DoseComparison] = []
    for quantity, unit, reported_col, recon_col, u_col in _COMPARED:
        reported = getattr(row, reported_col) if reported_col else None
        recon = getattr(row, recon_col)
        if reported is None and recon is None:
            continue
        ratio = _ratio(reported, recon)
        if quantity == "dap_gy_cm2" and row.dap_ratio_reported_to_recon is not None:
            ratio = row.dap_ratio_reported_to_recon
        if quantity == "mgd_mgy":
            ratio = row.agd_ratio_reported_to_recon  # None for a dose of another organ
        if quantity == "ssde_mgy" and row.ssde_ratio_reported_to_size is not None:
            ratio = row.ssde_ratio_reported_to_size
        out.append(
            DoseComparison(
                quantity=quantity,
                unit=unit,
                reported=reported,
                reconstructed=recon,
                reconstructed_uncertainty=getattr(row, u_col) if u_col else None,
                ratio_reported_to_reconstructed=ratio,
            )
        )
    for quantity in _REPORTED_ONLY:
        value = getattr(row, QUANTITIES[quantity].column)
        if value is not None:
            out.append(
                DoseComparison(
                    quantity=quantity,
                    unit=QUANTITIES[quantity].display_unit,
                    reported=value,
                    reconstructed=None,
                    reconstructed_uncertainty=None,
                    ratio_reported_to_reconstructed=None,
                )
            )
    return out


def event_mammography(row: m.ExposureEventRow) -> EventMammography:
    """The mammography fields of ``row``, recorded beside reconstructed."""
    return EventMammography(
        view_position=row.view_position,
        image_laterality=row.image_laterality,
        acquisition=row.mammography_acquisition,
        intent=row.mammography_intent,
        intent_from=(row.provenance or {}).get("mammography_intent")
        if row.mammography_intent
        else None,
        compressed_thickness_mm=row.body_part_thickness_mm,
        compression_force_n=row.compression_force_n,
        compression_pressure_kpa=row.compression_pressure_kpa,
        compression_contact_area_mm2=row.compression_contact_area_mm2,
        paddle_description=row.paddle_description,
        breast_implant_present=row.breast_implant_present,
        organ_exposed=row.organ_exposed,
        tomo_scan_arc_deg=row.tomo_scan_arc_deg,
        tomo_projections=row.tomo_projections,
        reported_mgd_mgy=row.organ_dose_mgy,
        mgd_mgy=row.recon_mgd_mgy,
        mgd_u_mgy=row.recon_mgd_u_mgy,
        ratio_reported_to_reconstructed=row.agd_ratio_reported_to_recon,
        target_filter=row.recon_target_filter,
        hvl1_mm_al=row.recon_hvl1_mm_al,
        incident_air_kerma_mgy=row.recon_incident_air_kerma_mgy,
        glandularity_percent=row.recon_glandularity_percent,
        glandularity_assumed=row.recon_glandularity_assumed,
        g=row.recon_mgd_g,
        c=row.recon_mgd_c,
        s=row.recon_mgd_s,
        t=row.recon_mgd_t,
        coefficients=row.recon_mgd_coefficients,
        method=row.recon_mgd_method,
    )


def event_size(row: m.ExposureEventRow) -> EventSize:
    """The patient size of ``row``: ours from the images beside the scanner's."""
    return EventSize(
        dw_mean_cm=row.size_dw_mean_cm,
        dw_centre_cm=row.size_dw_centre_cm,
        method=row.size_method,
        images_used=row.size_images_used,
        truncated_share=row.size_truncated_share,
        ssde_mgy=row.size_ssde_mgy,
        ssde_report=row.size_ssde_report,
        ssde_ratio_reported_to_size=row.ssde_ratio_reported_to_size,
        scanner_dw_mm=row.water_equivalent_diameter_mm,
        scanner_dw_method=row.water_equivalent_diameter_method,
        scanner_ssde_method=row.ssde_method,
        scanner_effective_diameter_mm=row.effective_diameter_mm,
        scan_z_top_mm=row.ct_scan_z_top_mm,
        scan_z_bottom_mm=row.ct_scan_z_bottom_mm,
    )


def _group(model: type[Any], row: Any, prefix: str = "") -> Any:
    return model.model_validate({name: getattr(row, prefix + name) for name in model.model_fields})


@router.get(
    "/events/{event_id}", operation_id="get_event", response_model=EventDetail, responses=NOT_FOUND
)
@reads_only
def get_event(event_id: IdPath, session: DbSession, _: Physicist) -> EventDetail:
    """One exposure event: reported beside reconstructed, the ratio, and the why trail."""
    row = get_or_404(session, E, event_id, "exposure event")
    study = session.get(m.Study, row.study_id) if row.study_id else None
    source = session.get(m.SourceObjectRow, row.source_object_id)
    flag_conditions = [m.FlagRow.event_id == row.id]
    if study is not None:
        flag_conditions.append(
            and_(
                m.FlagRow.event_id.is_(None),
                m.FlagRow.study_instance_uid == study.study_instance_uid,
            )
        )
    flags = session.scalars(select(m.FlagRow).where(or_(*flag_conditions)).order_by(m.FlagRow.id))
    identification = {
        name: getattr(row, name)
        for name in EventDetail.model_fields
        if name in E.__table__.columns and name not in {"recon_trail", "provenance", "notes"}
    }
    return EventDetail(
        **identification,
        study_instance_uid=study.study_instance_uid if study else None,
        sop_instance_uid=source.sop_instance_uid if source else "",
        patient=_group(EventPatient, row),
        technique=_group(EventTechnique, row),
        geometry=_group(EventGeometry, row),
        reported=_group(EventReported, row),
        reconstructed=_group(EventReconstructed, row, prefix="recon_"),
        size=event_size(row),
        effective_dose=_group(EventEffectiveDose, row),
        dose_breakdown=dose_breakdown(row),
        mammography=event_mammography(row) if is_mammography(row) else None,
        recon_trail=trail_for_event(session, row),
        provenance=row.provenance or {},
        notes=row.notes or [],
        flags=[EventFlag.model_validate(f) for f in flags],
        caution=CAUTION,
    )


# -- exams ----------------------------------------------------------------------------------------
def _exams_query(f: EventFilters, period: Period) -> Select[Any]:
    S = m.Study
    stmt = select(S).where(*_in_period(S.study_datetime, period))
    event_conditions = _event_conditions(f)
    if event_conditions:
        stmt = stmt.where(exists().where(E.study_id == S.id, *event_conditions))
    if f.exam_type is not None:
        stmt = stmt.where(
            or_(
                S.exam_type == f.exam_type,
                exists().where(E.study_id == S.id, E.exam_type == f.exam_type),
            )
        )
    if f.flag is not None:
        stmt = stmt.where(
            exists().where(
                m.FlagRow.kind == f.flag,
                or_(
                    m.FlagRow.study_instance_uid == S.study_instance_uid,
                    m.FlagRow.event_id.in_(select(E.id).where(E.study_id == S.id).correlate(S)),
                ),
            )
        )
    return stmt


@router.get("/exams", operation_id="list_exams", response_model=ExamPage)
@reads_only
def list_exams(
    session: DbSession, _: Physicist, filters: Filters, period: Periods, page: Pages
) -> ExamPage:
    """Examinations (DICOM studies), newest stored first; the period applies to the study time.

    Room, device, site and modality select exams with at least one such event.
    """
    rows, cursor = paginate(session, _exams_query(filters, period), m.Study.id, page)
    return ExamPage(items=[ExamSummary.model_validate(r) for r in rows], next_cursor=cursor)


@router.get(
    "/exams/{exam_id}", operation_id="get_exam", response_model=ExamDetail, responses=NOT_FOUND
)
@reads_only
def get_exam(exam_id: IdPath, session: DbSession, _: Physicist) -> ExamDetail:
    """One examination with its events and a dose report's accumulated totals."""
    study = get_or_404(session, m.Study, exam_id, "exam")
    events = session.scalars(select(E).where(E.study_id == study.id).order_by(E.id))
    accumulated = session.scalars(
        select(m.AccumulatedDoseRow)
        .where(m.AccumulatedDoseRow.study_id == study.id)
        .order_by(m.AccumulatedDoseRow.id)
    )
    return ExamDetail(
        **ExamSummary.model_validate(study).model_dump(),
        events=[EventSummary.model_validate(e) for e in events],
        accumulated=[AccumulatedDoseRead.model_validate(a) for a in accumulated],
        caution=CAUTION,
    )
