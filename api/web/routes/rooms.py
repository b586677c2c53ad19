"""Sites, rooms with their beam configuration, and devices (which room each stands in).

A device seen for the first time gets a room named by its station name (the pipeline does that);
here a physicist renames rooms, sets their beam configuration, and moves devices. Every change is
written to the audit log with the values before and after.
"""

from __future__ import annotations

from typing import Annotated

from fastapi import Query, status
from sqlalchemy import func, select, update

from beamaudit.api.store import models as m
from beamaudit.api.web.deps import DbSession, Physicist
from beamaudit.api.web.routes._common import (
    AUTH_RESPONSES,
    CONFLICT,
    NOT_FOUND,
    IdPath,
    audit,
    flush,
    get_or_404,
    snapshot,
)
from beamaudit.api.web.routing import Router
from beamaudit.api.web.schemas.base import Id
from beamaudit.api.web.schemas.rooms import (
    CalibrationRead,
    DeviceRead,
    DeviceUpdate,
    RoomCreate,
    RoomDetail,
    RoomRead,
    RoomUpdate,
    SiteCreate,
    SiteRead,
)

__all__ = ["ROOM_FIELDS", "router"]

router = Router(tags=["rooms"], responses=AUTH_RESPONSES)

#: what the audit log keeps of a room
ROOM_FIELDS = (
    "site_id",
    "name",
    "modality",
    "anode_material",
    "anode_angle_deg",
    "ripple_percent",
    "filtration",
    "table_to_detector_mm",
    "dap_ratio_tolerance",
    "tube_side",
    "table_filtration",
    "table_transmission",
)


# -- sites ----------------------------------------------------------------------------------------
@router.get("/sites", operation_id="list_sites", response_model=list[SiteRead])
def list_sites(session: DbSession, _: Physicist) -> list[SiteRead]:
    """Every site (hospital or clinic), by name."""
    rows = session.scalars(select(m.Site).order_by(m.Site.name))
    return [SiteRead.model_validate(r) for r in rows]


@router.post(
    "/sites",
    operation_id="create_site",
    response_model=SiteRead,
    status_code=status.HTTP_201_CREATED,
    responses=CONFLICT,
)
def create_site(body: SiteCreate, session: DbSession, who: Physicist) -> SiteRead:
    """Add a site; names are unique."""
    row = m.Site(name=body.name)
    session.add(row)
    flush(session, f"a site named {body.name!r} exists already")
    audit(session, who, action="create", entity="site", entity_id=row.id, after={"name": row.name})
    session.commit()
    return SiteRead.model_validate(row)


# -- rooms ----------------------------------------------------------------------------------------
@router.get("/rooms", operation_id="list_rooms", response_model=list[RoomRead])
def list_rooms(
    session: DbSession,
    _: Physicist,
    site_id: Annotated[Id | None, Query(description="only this site's rooms")] = None,
) -> list[RoomRead]:
    """Rooms with their beam configuration, by site and name."""
    stmt = select(m.Room).order_by(m.Room.site_id, m.Room.name)
    if site_id is not None:
        stmt = stmt.where(m.Room.site_id == site_id)
    return [RoomRead.model_validate(r) for r in session.scalars(stmt)]


@router.post(
    "/rooms",
    operation_id="create_room",
    response_model=RoomRead,
    status_code=status.HTTP_201_CREATED,
    responses={**NOT_FOUND, **CONFLICT},
)
def create_room(body: RoomCreate, session: DbSession, who: Physicist) -> RoomRead:
    """Add a room to a site (its beam configuration starts at the model's defaults)."""
    get_or_404(session, m.Site, body.site_id, "site")
    row = m.Room(site_id=body.site_id, name=body.name, modality=body.modality)
    session.add(row)
    flush(session, f"site {body.site_id} has a room named {body.name!r} already")
    audit(
        session,
        who,
        action="create",
        entity="room",
        entity_id=row.id,
        after=snapshot(row, ROOM_FIELDS),
    )
    session.commit()
    return RoomRead.model_validate(row)


def _active_calibration(session: DbSession, room_id: int) -> m.RoomCalibrationRow | None:
    return session.scalar(
        select(m.RoomCalibrationRow)
        .where(m.RoomCalibrationRow.room_id == room_id, m.RoomCalibrationRow.active.is_(True))
        .order_by(m.RoomCalibrationRow.id.desc())
        .limit(1)
    )


def _room_detail(session: DbSession, row: m.Room) -> RoomDetail:
    site = session.get(m.Site, row.site_id)
    devices = session.scalars(
        select(m.Device).where(m.Device.room_id == row.id).order_by(m.Device.id)
    )
    calibration = _active_calibration(session, row.id)
    return RoomDetail(
        **RoomRead.model_validate(row).model_dump(),
        site_name=site.name if site else "",
        devices=[DeviceRead.model_validate(d) for d in devices],
        active_calibration=CalibrationRead.model_validate(calibration) if calibration else None,
    )


@router.get(
    "/rooms/{room_id}", operation_id="get_room", response_model=RoomDetail, responses=NOT_FOUND
)
def get_room(room_id: IdPath, session: DbSession, _: Physicist) -> RoomDetail:
    """One room: beam configuration, devices, active QA calibration."""
    return _room_detail(session, get_or_404(session, m.Room, room_id, "room"))


@router.patch(
    "/rooms/{room_id}",
    operation_id="update_room",
    response_model=RoomDetail,
    responses={**NOT_FOUND, **CONFLICT},
)
def update_room(
    room_id: IdPath, body: RoomUpdate, session: DbSession, who: Physicist
) -> RoomDetail:
    """Change a room's name or beam configuration (fields left out are kept).

    Stored reconstructions are not redone here; the next reconstruction run uses the new values.
    """
    row = get_or_404(session, m.Room, room_id, "room")
    before = snapshot(row, ROOM_FIELDS)
    changes = body.model_dump(exclude_unset=True)
    for name, value in changes.items():
        setattr(row, name, value)
    flush(session, f"site {row.site_id} has a room named {changes.get('name')!r} already")
    after = snapshot(row, ROOM_FIELDS)
    if after != before:
        audit(
            session,
            who,
            action="update",
            entity="room",
            entity_id=row.id,
            before=before,
            after=after,
        )
    session.commit()
    return _room_detail(session, row)


# -- devices --------------------------------------------------------------------------------------
@router.get("/devices", operation_id="list_devices", response_model=list[DeviceRead])
def list_devices(
    session: DbSession,
    _: Physicist,
    room_id: Annotated[Id | None, Query(description="only the devices of this room")] = None,
) -> list[DeviceRead]:
    """Imaging devices as they name themselves in DICOM, with the room each stands in."""
    stmt = select(m.Device).order_by(m.Device.id)
    if room_id is not None:
        stmt = stmt.where(m.Device.room_id == room_id)
    return [DeviceRead.model_validate(r) for r in session.scalars(stmt)]


@router.get(
    "/devices/{device_id}",
    operation_id="get_device",
    response_model=DeviceRead,
    responses=NOT_FOUND,
)
def get_device(device_id: IdPath, session: DbSession, _: Physicist) -> DeviceRead:
    """One device."""
    return DeviceRead.model_validate(get_or_404(session, m.Device, device_id, "device"))


@router.patch(
    "/devices/{device_id}",
    operation_id="assign_device",
    response_model=DeviceRead,
    responses=NOT_FOUND,
)
def assign_device(
    device_id: IdPath, body: DeviceUpdate, session: DbSession, who: Physicist
) -> DeviceRead:
    """Put a device in a room; by default its stored events move with it."""
    row = get_or_404(session, m.Device, device_id, "device")
    get_or_404(session, m.Room, body.room_id, "room")
    before = {"room_id": row.room_id}
    moved = 0
    if body.reassign_events:
        E = m.ExposureEventRow
        moved = (
            session.scalar(
                select(func.count())
                .select_from(E)
                .where(E.device_id == row.id, E.room_id.is_distinct_from(body.room_id))
            )
            or 0
        )
        session.execute(update(E).where(E.device_id == row.id).values(room_id=body.room_id))
    row.room_id = body.room_id
    if before["room_id"] != body.room_id or moved:
        audit(
            session,
            who,
            action="assign",
            entity="device",
            entity_id=row.id,
            before=before,
            after={"room_id": body.room_id, "events_moved": moved},
        )
    session.commit()
    return DeviceRead.model_validate(row)
