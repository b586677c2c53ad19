"""Sites, rooms with their beam configuration, devices, QA measurements and calibrations."""

from __future__ import annotations

from datetime import date, datetime
from typing import Annotated, Any, Literal

from pydantic import AfterValidator, Field

from beamaudit.api.web.schemas.base import (
    FiniteFloat,
    Id,
    InputModel,
    Name,
    ReadModel,
    ShortText,
    Text,
    clean_text,
    date_within,
    not_null,
)

__all__ = [
    "CalibrationCreate",
    "CalibrationRead",
    "CalibrationUpdate",
    "DeviceRead",
    "DeviceUpdate",
    "FilterLayer",
    "QAMeasurementCreate",
    "QAMeasurementRead",
    "RoomCreate",
    "RoomDetail",
    "RoomRead",
    "RoomUpdate",
    "SiteCreate",
    "SiteRead",
]


def _known_material(name: str) -> str:
    """The name the store keeps for a filter material: the element's name, as ingest writes it
    (``"Al"`` -> ``"aluminium"``), else the model's key (``"PMMA"`` -> ``"pmma"``)."""
    from beamaudit.model.attenuation import material
    from beamaudit.model.errors import ModelError

    try:
        found = material(clean_text(name))
    except ModelError as exc:
        raise ValueError(str(exc)) from None
    try:
        return found.label if material(found.label).key == found.key else found.key
    except ModelError:
        return found.key


def _known_anode(name: str) -> str:
    """The model's own label of an anode material (``"W"`` -> ``"tungsten"``)."""
    from beamaudit.model.errors import ModelError
    from beamaudit.model.spectrum import get_anode

    try:
        return get_anode(clean_text(name), require_supported=False).label
    except ModelError as exc:
        raise ValueError(str(exc)) from None


class FilterLayer(InputModel):
    """One layer of a beam's total filtration (inherent included)."""

    material: Annotated[
        str,
        Field(min_length=1, max_length=40, examples=["aluminium"]),
        AfterValidator(_known_material),
    ]
    thickness_mm: Annotated[FiniteFloat, Field(gt=0, le=50)]


class FilterLayerRead(ReadModel):
    material: str
    thickness_mm: float


# -- sites ----------------------------------------------------------------------------------------
class SiteCreate(InputModel):
    name: Name


class SiteRead(ReadModel):
    id: int
    name: str
    created_at: datetime


# -- rooms ----------------------------------------------------------------------------------------
#: Anode angle: diagnostic tubes use 6-20 degrees (# common practice); 45 bounds typing errors.
AnodeAngle = Annotated[FiniteFloat, Field(gt=0, le=45, description="anode (target) angle, degrees")]
Ripple = Annotated[FiniteFloat, Field(ge=0, le=100, description="voltage ripple, percent")]
Gap = Annotated[
    FiniteFloat,
    Field(ge=0, le=1000, description="patient-exit-surface (table top) to image receptor, mm"),
]
Tolerance = Annotated[
    FiniteFloat,
    Field(
        gt=0,
        le=10,
        description=(
            "allowed relative deviation of the reported-to-reconstructed DAP ratio from 1 "
            "(0.25: within 25 %)"
        ),
    ),
]
Anode = Annotated[str, Field(min_length=1, max_length=40), AfterValidator(_known_anode)]
TubeSide = Annotated[
    Literal["above", "below"],
    Field(description="x-ray tube above or below the table; null: below for XA and RF, above "
          "otherwise (assumed)"),
]  # fmt: skip
TableTransmission = Annotated[
    FiniteFloat,
    Field(gt=0, le=1, description="measured air-kerma transmission of table top and mattress"),
]
Modality = Annotated[ShortText, Field(max_length=16, examples=["DX"])]


class RoomCreate(InputModel):
    site_id: Id
    name: Name
    modality: Modality | None = None


class RoomUpdate(InputModel):
    """Fields to change; a field left out is kept, ``null`` clears a nullable one."""

    name: Name | None = None
    modality: Modality | None = None
    anode_material: Anode | None = None
    anode_angle_deg: AnodeAngle | None = None
    ripple_percent: Ripple | None = None
    filtration: Annotated[list[FilterLayer], Field(max_length=10)] | None = Field(
        default=None,
        description="total filtration layers, inherent included; null: default assumed",
    )
    table_to_detector_mm: Gap | None = None
    dap_ratio_tolerance: Tolerance | None = None
    tube_side: TubeSide | None = None
    table_filtration: Annotated[list[FilterLayer], Field(max_length=5)] | None = Field(
        default=None,
        description="table top and mattress of a tube below the table, as layers; null: the "
        "measured transmission, else a documented default (assumed)",
    )
    table_transmission: TableTransmission | None = None

    _not_null = not_null("name", "anode_material", "anode_angle_deg", "ripple_percent")


class RoomRead(ReadModel):
    id: int
    site_id: int
    name: str
    modality: str | None
    anode_material: str
    anode_angle_deg: float
    ripple_percent: float
    filtration: list[FilterLayerRead] | None
    table_to_detector_mm: float | None
    dap_ratio_tolerance: float | None
    tube_side: str | None = None
    table_filtration: list[FilterLayerRead] | None = None
    table_transmission: float | None = None
    created_at: datetime


# -- devices --------------------------------------------------------------------------------------
class DeviceRead(ReadModel):
    id: int
    room_id: int | None
    station_name: str
    manufacturer: str
    model_name: str
    serial_number: str
    device_observer_uid: str | None
    institution_name: str | None
    first_seen_at: datetime


class DeviceUpdate(InputModel):
    room_id: Id = Field(description="the room the device stands in")
    reassign_events: bool = Field(
        default=True,
        description="also move the device's stored exposure events to the room",
    )


# -- QA measurements and calibrations -------------------------------------------------------------
class QAMeasurementCreate(InputModel):
    """A measured tube output (and optionally HVL) at one kVp.

    ``filtration`` follows the calibration's convention: when the measurements of a calibration
    include an HVL, the room's inherent filtration is fitted and ``filtration`` lists the *added*
    filters (null: none); otherwise it is the *total* filtration (null: the room's, else the
    model's default, marked assumed).
    """

    measured_on: date
    # ARCHITECTURE.md: kVp outside 20-150 kV is rejected, never clamped
    kvp_kv: Annotated[FiniteFloat, Field(ge=20, le=150)]
    filtration: Annotated[list[FilterLayer], Field(max_length=10)] | None = Field(
        default=None, description="filters in the beam during the measurement (see above)"
    )
    distance_mm: Annotated[FiniteFloat, Field(gt=0, le=5000, description="focus to detector")]
    output_ugy_per_mas: Annotated[
        FiniteFloat, Field(gt=0, le=2000, description="air kerma per mAs at distance_mm, µGy/mAs")
    ]
    hvl_mm_al: Annotated[FiniteFloat, Field(gt=0, le=20)] | None = None
    note: Text | None = None

    _plausible_date = date_within("measured_on")


class QAMeasurementRead(ReadModel):
    id: int
    room_id: int
    measured_on: date
    kvp_kv: float
    filtration: list[FilterLayerRead] | None
    distance_mm: float
    output_ugy_per_mas: float
    hvl_mm_al: float | None
    note: str | None


class CalibrationRead(ReadModel):
    id: int
    room_id: int
    created_at: datetime
    output_scale: float
    inherent_filtration_mm_al: float | None
    residuals: list[dict[str, Any]]
    n_measurements: int
    active: bool


class CalibrationCreate(InputModel):
    """Fit the room's beam model to its QA measurements."""

    measurement_ids: Annotated[list[Id], Field(min_length=1, max_length=200)] | None = Field(
        default=None, description="the measurements to use; null: all of the room's"
    )
    activate: bool = Field(default=True, description="make it the room's active calibration")


class CalibrationUpdate(InputModel):
    active: bool = Field(description="true: the room's active calibration (the others stop being)")


class RoomDetail(RoomRead):
    """A room with its devices and its active calibration."""

    site_name: str
    devices: list[DeviceRead]
    active_calibration: CalibrationRead | None
