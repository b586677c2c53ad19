"""A room's QA measurements and the calibrations fitted to them (beamaudit.model.calibration).

The fit runs the beam model many times: the route is a plain (sync) function, so FastAPI runs it
in its thread pool and the event loop stays free.
"""

from __future__ import annotations

from typing import Any

from fastapi import status
from sqlalchemy import select, update

from beamaudit.api.store import models as m
from beamaudit.api.web.deps import DbSession, Physicist
from beamaudit.api.web.routes._common import (
    AUTH_RESPONSES,
    NOT_FOUND,
    IdPath,
    audit,
    flush,
    get_or_404,
    invalid,
    not_found,
    snapshot,
)
from beamaudit.api.web.routing import Router
from beamaudit.api.web.schemas.rooms import (
    CalibrationCreate,
    CalibrationRead,
    CalibrationUpdate,
    QAMeasurementCreate,
    QAMeasurementRead,
)

__all__ = ["router"]

router = Router(tags=["rooms"], responses=AUTH_RESPONSES)

QA_FIELDS = (
    "room_id",
    "measured_on",
    "kvp_kv",
    "filtration",
    "distance_mm",
    "output_ugy_per_mas",
    "hvl_mm_al",
    "note",
)
CALIBRATION_FIELDS = (
    "room_id",
    "output_scale",
    "inherent_filtration_mm_al",
    "n_measurements",
    "active",
)

Q = m.QAMeasurementRow
C = m.RoomCalibrationRow


@router.get(
    "/rooms/{room_id}/qa-measurements",
    operation_id="list_qa_measurements",
    response_model=list[QAMeasurementRead],
    responses=NOT_FOUND,
)
def list_qa_measurements(
    room_id: IdPath, session: DbSession, _: Physicist
) -> list[QAMeasurementRead]:
    """A room's QA measurements, newest first."""
    get_or_404(session, m.Room, room_id, "room")
    rows = session.scalars(
        select(Q).where(Q.room_id == room_id).order_by(Q.measured_on.desc(), Q.id.desc())
    )
    return [QAMeasurementRead.model_validate(r) for r in rows]


@router.post(
    "/rooms/{room_id}/qa-measurements",
    operation_id="add_qa_measurement",
    response_model=QAMeasurementRead,
    status_code=status.HTTP_201_CREATED,
    responses=NOT_FOUND,
)
def add_qa_measurement(
    room_id: IdPath, body: QAMeasurementCreate, session: DbSession, who: Physicist
) -> QAMeasurementRead:
    """Record a QA measurement of the room's tube output (and HVL)."""
    get_or_404(session, m.Room, room_id, "room")
    row = Q(room_id=room_id, **body.model_dump())
    session.add(row)
    flush(session, "the measurement cannot be stored")
    audit(
        session,
        who,
        action="create",
        entity="qa_measurement",
        entity_id=row.id,
        after=snapshot(row, QA_FIELDS),
    )
    session.commit()
    return QAMeasurementRead.model_validate(row)


@router.delete(
    "/rooms/{room_id}/qa-measurements/{measurement_id}",
    operation_id="delete_qa_measurement",
    status_code=status.HTTP_204_NO_CONTENT,
    responses=NOT_FOUND,
)
def delete_qa_measurement(
    room_id: IdPath, measurement_id: IdPath, session: DbSession, who: Physicist
) -> None:
    """Remove a mistaken measurement (calibrations already fitted keep their residuals)."""
    row = session.get(Q, measurement_id)
    if row is None or row.room_id != room_id:
        not_found(f"QA measurement of room {room_id}", measurement_id)
    audit(
        session,
        who,
        action="delete",
        entity="qa_measurement",
        entity_id=row.id,
        before=snapshot(row, QA_FIELDS),
    )
    session.delete(row)
    session.commit()


@router.get(
    "/rooms/{room_id}/calibrations",
    operation_id="list_calibrations",
    response_model=list[CalibrationRead],
    responses=NOT_FOUND,
)
def list_calibrations(room_id: IdPath, session: DbSession, _: Physicist) -> list[CalibrationRead]:
    """A room's calibrations, newest first (at most one is active)."""
    get_or_404(session, m.Room, room_id, "room")
    rows = session.scalars(select(C).where(C.room_id == room_id).order_by(C.id.desc()))
    return [CalibrationRead.model_validate(r) for r in rows]


def _filters(layers: list[dict[str, Any]] | None) -> tuple[Any, ...] | None:
    from beamaudit.model.filtration import FilterSpec

    if not layers:
        return None
    return tuple(FilterSpec(f["material"], f["thickness_mm"]) for f in layers)


def _model_measurements(rows: list[m.QAMeasurementRow], room: m.Room) -> list[Any]:
    """The model's measurements; without HVLs a measurement's filters default to the room's."""
    from beamaudit.model.calibration import QAMeasurement

    with_hvl = any(r.hvl_mm_al is not None for r in rows)
    room_total = None if with_hvl else _filters(room.filtration)
    return [
        QAMeasurement(
            kv=r.kvp_kv,
            filters=_filters(r.filtration) or room_total,
            distance_mm=r.distance_mm,
            measured_output_ugy_per_mas=r.output_ugy_per_mas,
            measured_hvl_mm_al=r.hvl_mm_al,
        )
        for r in rows
    ]


@router.post(
    "/rooms/{room_id}/calibrations",
    operation_id="calibrate_room",
    response_model=CalibrationRead,
    status_code=status.HTTP_201_CREATED,
    responses=NOT_FOUND,
)
def calibrate_room(
    room_id: IdPath, body: CalibrationCreate, session: DbSession, who: Physicist
) -> CalibrationRead:
    """Fit the room's output scale (and, with HVLs, its inherent filtration) to QA measurements.

    The fit uses the room's tube (anode, angle, ripple). Without HVLs the measurements' filters
    are the total filtration (else the room's); with HVLs they are the added filters.
    """
    from beamaudit.model.calibration import calibrate_room as fit
    from beamaudit.model.errors import ModelError

    room = get_or_404(session, m.Room, room_id, "room")
    stmt = select(Q).where(Q.room_id == room_id).order_by(Q.id)
    if body.measurement_ids is not None:
        stmt = stmt.where(Q.id.in_(body.measurement_ids))
    rows = list(session.scalars(stmt))
    if body.measurement_ids is not None:
        missing = sorted(set(body.measurement_ids) - {r.id for r in rows})
        if missing:
            invalid(
                ("body", "measurement_ids"), f"not QA measurements of room {room_id}: {missing}"
            )
    if not rows:
        invalid(("body", "measurement_ids"), f"room {room_id} has no QA measurements to fit")
    try:
        result = fit(
            _model_measurements(rows, room),
            anode=room.anode_material,
            anode_angle_deg=room.anode_angle_deg,
            ripple_percent=room.ripple_percent,
        )
    except ModelError as exc:
        invalid(("body", "measurement_ids"), f"the calibration cannot be fitted: {exc}")
    if body.activate:
        session.execute(
            update(C).where(C.room_id == room_id, C.active.is_(True)).values(active=False)
        )
    row = C(
        room_id=room_id,
        output_scale=result.output_scale,
        inherent_filtration_mm_al=result.inherent_filtration_mm_al,
        residuals=[r.as_dict() for r in result.residuals],
        n_measurements=len(rows),
        active=body.activate,
    )
    session.add(row)
    flush(session, "the calibration cannot be stored")
    audit(
        session,
        who,
        action="calibrate",
        entity="room_calibration",
        entity_id=row.id,
        after={
            **snapshot(row, CALIBRATION_FIELDS),
            "measurement_ids": [r.id for r in rows],
            "output_scale_uncertainty_rel": result.output_scale_uncertainty_rel,
            "inherent_filtration_uncertainty_mm_al": result.inherent_filtration_uncertainty_mm_al,
            "source": result.source,
        },
    )
    session.commit()
    return CalibrationRead.model_validate(row)


@router.patch(
    "/rooms/{room_id}/calibrations/{calibration_id}",
    operation_id="update_calibration",
    response_model=CalibrationRead,
    responses=NOT_FOUND,
)
def update_calibration(
    room_id: IdPath,
    calibration_id: IdPath,
    body: CalibrationUpdate,
    session: DbSession,
    who: Physicist,
) -> CalibrationRead:
    """Make a calibration the room's active one, or stop using it."""
    row = session.get(C, calibration_id)
    if row is None or row.room_id != room_id:
        not_found(f"calibration of room {room_id}", calibration_id)
    before = snapshot(row, CALIBRATION_FIELDS)
    if body.active:
        session.execute(
            update(C)
            .where(C.room_id == room_id, C.id != row.id, C.active.is_(True))
            .values(active=False)
        )
    row.active = body.active
    if before["active"] != body.active:
        audit(
            session,
            who,
            action="update",
            entity="room_calibration",
            entity_id=row.id,
            before=before,
            after=snapshot(row, CALIBRATION_FIELDS),
        )
    session.commit()
    return CalibrationRead.model_validate(row)
