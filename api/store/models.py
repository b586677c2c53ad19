"""The tables of beamaudit's store (SQLAlchemy 2 typed mappings).

Reported and reconstructed values sit side by side in ``exposure_events``:
``dap_gy_cm2`` is what the device said, ``recon_dap_gy_cm2`` what the beam and
dose model made of the same exposure. API schemas live elsewhere
(``beamaudit.api.web.schemas``); these classes are tables only.
"""

from datetime import date, datetime
from typing import Any

from sqlalchemy import (
    Boolean,
    Date,
    Float,
    ForeignKey,
    Index,
    Integer,
    String,
    Text,
    UniqueConstraint,
)
from sqlalchemy.orm import Mapped, mapped_column, relationship

from beamaudit.api.store.base import Base, JSONValue, UTCDateTime, utcnow

__all__ = [
    "AccumulatedDoseRow",
    "ApiToken",
    "AuditLogEntry",
    "Device",
    "DicomwebSource",
    "ExamTypeRow",
    "ExposureEventRow",
    "Finding",
    "FlagRow",
    "IngestError",
    "MappingRuleRow",
    "NotificationDelivery",
    "QAMeasurementRow",
    "ReferenceLevelRow",
    "ReferenceLevelSetRow",
    "ReviewRun",
    "Room",
    "RoomCalibrationRow",
    "Site",
    "SkinDoseRow",
    "SourceObjectRow",
    "Study",
]


class Site(Base):
    """A hospital or clinic (an institution)."""

    __tablename__ = "sites"
    id: Mapped[int] = mapped_column(primary_key=True)
    name: Mapped[str] = mapped_column(String, unique=True)
    created_at: Mapped[datetime] = mapped_column(UTCDateTime(), default=utcnow)


class Room(Base):
    """An x-ray room (or mobile unit) and its beam configuration."""

    __tablename__ = "rooms"
    __table_args__ = (UniqueConstraint("site_id", "name"),)
    id: Mapped[int] = mapped_column(primary_key=True)
    site_id: Mapped[int] = mapped_column(ForeignKey("sites.id"))
    name: Mapped[str] = mapped_column(String)
    modality: Mapped[str | None] = mapped_column(String)
    anode_material: Mapped[str] = mapped_column(String, default="tungsten")
    anode_angle_deg: Mapped[float] = mapped_column(Float, default=12.0)
    ripple_percent: Mapped[float] = mapped_column(Float, default=0.0)
    #: total filtration layers [{material, thickness_mm}], inherent included; null: default assumed
    filtration: Mapped[list[dict[str, Any]] | None] = mapped_column(JSONValue)
    table_to_detector_mm: Mapped[float | None] = mapped_column(Float)
    dap_ratio_tolerance: Mapped[float | None] = mapped_column(Float)
    created_at: Mapped[datetime] = mapped_column(UTCDateTime(), default=utcnow)
    #: "above" or "below" the table; null: below for XA and RF, above otherwise (assumed)
    tube_side: Mapped[str | None] = mapped_column(String)
    #: table top and mattress of a tube below the table, as layers [{material, thickness_mm}]
    table_filtration: Mapped[list[dict[str, Any]] | None] = mapped_column(JSONValue)
    #: measured air-kerma transmission of table top and mattress (used instead of the layers)
    table_transmission: Mapped[float | None] = mapped_column(Float)
    # skin-dose geometry (beamaudit.model.skin_events.SkinRoom; null: its documented default)
    #: the reported table positions (mm) that are the reference; null: the procedure's median
    table_reference_longitudinal_mm: Mapped[float | None] = mapped_column(Float)
    table_reference_lateral_mm: Mapped[float | None] = mapped_column(Float)
    table_reference_height_mm: Mapped[float | None] = mapped_column(Float)
    #: +1 or -1: which way a reported increase moves the table (see skin_geometry)
    table_longitudinal_sign: Mapped[int | None] = mapped_column(Integer)
    table_lateral_sign: Mapped[int | None] = mapped_column(Integer)
    table_height_sign: Mapped[int | None] = mapped_column(Integer)
    #: height of the tabletop below the isocentre at the reference position, mm
    table_top_below_isocenter_mm: Mapped[float | None] = mapped_column(Float)


class Device(Base):
    """One imaging device as it names itself in DICOM (station, serial, observer UID)."""

    __tablename__ = "devices"
    __table_args__ = (
        UniqueConstraint("manufacturer", "model_name", "serial_number", "station_name"),
    )
    id: Mapped[int] = mapped_column(primary_key=True)
    room_id: Mapped[int | None] = mapped_column(ForeignKey("rooms.id"), index=True)
    station_name: Mapped[str] = mapped_column(String, default="")
    manufacturer: Mapped[str] = mapped_column(String, default="")
    model_name: Mapped[str] = mapped_column(String, default="")
    serial_number: Mapped[str] = mapped_column(String, default="")
    device_observer_uid: Mapped[str | None] = mapped_column(String)
    institution_name: Mapped[str | None] = mapped_column(String)
    first_seen_at: Mapped[datetime] = mapped_column(UTCDateTime(), default=utcnow)


class QAMeasurementRow(Base):
    """A quality-assurance measurement of a room's beam (output, optionally HVL)."""

    __tablename__ = "qa_measurements"
    id: Mapped[int] = mapped_column(primary_key=True)
    room_id: Mapped[int] = mapped_column(ForeignKey("rooms.id"), index=True)
    measured_on: Mapped[date] = mapped_column(Date)
    kvp_kv: Mapped[float] = mapped_column(Float)
    filtration: Mapped[list[dict[str, Any]] | None] = mapped_column(JSONValue)
    distance_mm: Mapped[float] = mapped_column(Float)
    output_ugy_per_mas: Mapped[float] = mapped_column(Float)
    hvl_mm_al: Mapped[float | None] = mapped_column(Float)
    note: Mapped[str | None] = mapped_column(Text)


class RoomCalibrationRow(Base):
    """The result of fitting a room's beam model to its QA measurements."""

    __tablename__ = "room_calibrations"
    id: Mapped[int] = mapped_column(primary_key=True)
    room_id: Mapped[int] = mapped_column(ForeignKey("rooms.id"), index=True)
    created_at: Mapped[datetime] = mapped_column(UTCDateTime(), default=utcnow)
    output_scale: Mapped[float] = mapped_column(Float)
    output_scale_uncertainty_rel: Mapped[float | None] = mapped_column(Float)
    inherent_filtration_mm_al: Mapped[float | None] = mapped_column(Float)
    residuals: Mapped[list[dict[str, Any]]] = mapped_column(JSONValue, default=list)
    n_measurements: Mapped[int] = mapped_column(Integer)
    active: Mapped[bool] = mapped_column(Boolean, default=True)


class CtLocalizerCalibrationRow(Base):
    """A CT scanner's localizer calibration to water (IEC 62985:2019), as a physicist measured it:
    pixel value -> water-equivalent path length (mm), for one tube voltage and view (and filter,
    when it matters; empty: any). The newest row of a device, kV, view and filter is used."""

    __tablename__ = "ct_localizer_calibrations"
    id: Mapped[int] = mapped_column(primary_key=True)
    device_id: Mapped[int] = mapped_column(ForeignKey("devices.id"), index=True)
    kvp_kv: Mapped[float] = mapped_column(Float)
    view: Mapped[str] = mapped_column(String)  # frontal | lateral
    filter_type: Mapped[str] = mapped_column(String, default="")
    pixel_values: Mapped[list[float]] = mapped_column(JSONValue)
    water_thickness_mm: Mapped[list[float]] = mapped_column(JSONValue)
    source: Mapped[str] = mapped_column(Text)
    measured_on: Mapped[date] = mapped_column(Date)
    created_at: Mapped[datetime] = mapped_column(UTCDateTime(), default=utcnow)
    created_by: Mapped[str] = mapped_column(String, default="")


class CtSizeSampleRow(Base):
    """Where one CT image of a study lies (acquisition, table position) and, when it was
    measured, the patient's size there (an axial image's Dw, or one localizer row's; ``dw_cm``
    null for an image left header-only), kept so that images arriving after the study was sized
    are merged with the earlier ones."""

    __tablename__ = "ct_size_samples"
    __table_args__ = (UniqueConstraint("sop_instance_uid", "z_mm"),)
    id: Mapped[int] = mapped_column(primary_key=True)
    study_instance_uid: Mapped[str] = mapped_column(String, index=True)
    acquisition_group: Mapped[str] = mapped_column(String)
    sop_instance_uid: Mapped[str] = mapped_column(String)
    method: Mapped[str] = mapped_column(String)  # axial_images | localizer | header
    frame_of_reference_uid: Mapped[str | None] = mapped_column(String)
    z_mm: Mapped[float] = mapped_column(Float)
    dw_cm: Mapped[float | None] = mapped_column(Float)
    truncated: Mapped[bool] = mapped_column(Boolean, default=False)
    pixel_data_bytes: Mapped[int] = mapped_column(Integer, default=0)
    measured_at: Mapped[datetime] = mapped_column(UTCDateTime(), default=utcnow)


class Study(Base):
    """A study: the examination the reference levels per examination apply to."""

    __tablename__ = "studies"
    id: Mapped[int] = mapped_column(primary_key=True)
    study_instance_uid: Mapped[str] = mapped_column(String, unique=True)
    accession_number: Mapped[str | None] = mapped_column(String)
    study_datetime: Mapped[datetime | None] = mapped_column(UTCDateTime(), index=True)
    study_description: Mapped[str | None] = mapped_column(String)
    patient_pseudo_id: Mapped[str | None] = mapped_column(String, index=True)
    patient_age_years: Mapped[float | None] = mapped_column(Float)
    patient_sex: Mapped[str | None] = mapped_column(String)
    patient_weight_kg: Mapped[float | None] = mapped_column(Float)
    patient_height_m: Mapped[float | None] = mapped_column(Float)
    has_dose_report: Mapped[bool] = mapped_column(Boolean, default=False)
    exam_type: Mapped[str | None] = mapped_column(String, index=True)
    created_at: Mapped[datetime] = mapped_column(UTCDateTime(), default=utcnow)


class SourceObjectRow(Base):
    """One DICOM object we read: the unit of idempotence (its SOP Instance UID)."""

    __tablename__ = "source_objects"
    id: Mapped[int] = mapped_column(primary_key=True)
    sop_instance_uid: Mapped[str] = mapped_column(String, unique=True)
    sop_class_uid: Mapped[str] = mapped_column(String)
    kind: Mapped[str] = mapped_column(String)  # image_header | rdsr
    modality: Mapped[str | None] = mapped_column(String)
    study_id: Mapped[int | None] = mapped_column(ForeignKey("studies.id"), index=True)
    series_instance_uid: Mapped[str | None] = mapped_column(String)
    received_via: Mapped[str] = mapped_column(String)  # scan | listen | pull | upload | demo
    received_from: Mapped[str | None] = mapped_column(String)  # path, calling AE, URL
    content_sha256: Mapped[str | None] = mapped_column(String)
    received_at: Mapped[datetime] = mapped_column(UTCDateTime(), default=utcnow)


class ExposureEventRow(Base):
    """One irradiation event: technique, geometry, reported dose and reconstructed dose."""

    __tablename__ = "exposure_events"
    __table_args__ = (
        UniqueConstraint("source_object_id", "event_index"),
        Index("ix_exposure_events_room_time", "room_id", "event_datetime"),
        Index("ix_exposure_events_exam_time", "exam_type", "event_datetime"),
    )
    id: Mapped[int] = mapped_column(primary_key=True)
    #: Irradiation Event UID, else "<SOP Instance UID>#<index>"; shared by the images of one
    #: irradiation and by a dose report's event for it, so not unique (see pipeline docstring)
    event_key: Mapped[str] = mapped_column(String, index=True)
    source_object_id: Mapped[int] = mapped_column(ForeignKey("source_objects.id"))
    study_id: Mapped[int | None] = mapped_column(ForeignKey("studies.id"), index=True)
    device_id: Mapped[int | None] = mapped_column(ForeignKey("devices.id"), index=True)
    room_id: Mapped[int | None] = mapped_column(ForeignKey("rooms.id"))
    source_kind: Mapped[str] = mapped_column(String)
    event_index: Mapped[int] = mapped_column(Integer, default=0)
    exam_type: Mapped[str | None] = mapped_column(String)
    #: true when a dose report of the same study carries this exposure (never counted twice)
    superseded: Mapped[bool] = mapped_column(Boolean, default=False)
    filters: Mapped[list[dict[str, Any]] | None] = mapped_column(JSONValue)
    #: collimator_edges_px, imager_pixel_spacing_mm, detector_dimensions_mm as recorded
    receptor_geometry: Mapped[dict[str, list[float]] | None] = mapped_column(JSONValue)
    #: fluoroscopy and interventional geometry (TID 10003/10003B/10003C) not kept in columns:
    #: positioner angles, table positions and tilts, reference point, patient position
    skin_geometry: Mapped[dict[str, Any] | None] = mapped_column(JSONValue)
    irradiation_event_uid: Mapped[str | None] = mapped_column(String)
    modality: Mapped[str | None] = mapped_column(String)
    modality_family: Mapped[str | None] = mapped_column(String)
    acquisition_key: Mapped[str | None] = mapped_column(String, index=True)
    accession_number: Mapped[str | None] = mapped_column(String)
    study_datetime: Mapped[datetime | None] = mapped_column(UTCDateTime())
    event_datetime: Mapped[datetime | None] = mapped_column(UTCDateTime())
    institution_name: Mapped[str | None] = mapped_column(String)
    station_name: Mapped[str | None] = mapped_column(String)
    manufacturer: Mapped[str | None] = mapped_column(String)
    model_name: Mapped[str | None] = mapped_column(String)
    device_serial_number: Mapped[str | None] = mapped_column(String)
    device_observer_uid: Mapped[str | None] = mapped_column(String)
    protocol_name: Mapped[str | None] = mapped_column(String)
    study_description: Mapped[str | None] = mapped_column(String)
    series_description: Mapped[str | None] = mapped_column(String)
    body_part: Mapped[str | None] = mapped_column(String)
    view_position: Mapped[str | None] = mapped_column(String)
    event_type: Mapped[str | None] = mapped_column(String)
    acquisition_plane: Mapped[str | None] = mapped_column(String)
    acquisition_device_type: Mapped[str | None] = mapped_column(String)
    patient_pseudo_id: Mapped[str | None] = mapped_column(String)
    patient_age_years: Mapped[float | None] = mapped_column(Float)
    patient_sex: Mapped[str | None] = mapped_column(String)
    patient_weight_kg: Mapped[float | None] = mapped_column(Float)
    patient_height_m: Mapped[float | None] = mapped_column(Float)
    kvp_kv: Mapped[float | None] = mapped_column(Float)
    tube_current_ma: Mapped[float | None] = mapped_column(Float)
    exposure_time_ms: Mapped[float | None] = mapped_column(Float)
    exposure_mas: Mapped[float | None] = mapped_column(Float)
    anode_material: Mapped[str | None] = mapped_column(String)
    focal_spot_mm: Mapped[float | None] = mapped_column(Float)
    grid: Mapped[str | None] = mapped_column(String)
    filter_type: Mapped[str | None] = mapped_column(String)
    sid_mm: Mapped[float | None] = mapped_column(Float)
    source_to_patient_mm: Mapped[float | None] = mapped_column(Float)
    source_to_entrance_mm: Mapped[float | None] = mapped_column(Float)
    source_to_isocenter_mm: Mapped[float | None] = mapped_column(Float)
    source_to_table_mm: Mapped[float | None] = mapped_column(Float)
    source_to_reference_point_mm: Mapped[float | None] = mapped_column(Float)
    body_part_thickness_mm: Mapped[float | None] = mapped_column(Float)
    magnification_factor: Mapped[float | None] = mapped_column(Float)
    field_width_mm: Mapped[float | None] = mapped_column(Float)
    field_height_mm: Mapped[float | None] = mapped_column(Float)
    field_area_cm2: Mapped[float | None] = mapped_column(Float)
    field_plane: Mapped[str | None] = mapped_column(String)
    dap_gy_cm2: Mapped[float | None] = mapped_column(Float)
    entrance_dose_mgy: Mapped[float | None] = mapped_column(Float)
    entrance_dose_derivation: Mapped[str | None] = mapped_column(String)
    reference_point_air_kerma_mgy: Mapped[float | None] = mapped_column(Float)
    organ_dose_mgy: Mapped[float | None] = mapped_column(Float)
    hvl_mm_al: Mapped[float | None] = mapped_column(Float)
    xray_output_mgy_per_mas: Mapped[float | None] = mapped_column(Float)
    ctdivol_mgy: Mapped[float | None] = mapped_column(Float)
    dlp_mgy_cm: Mapped[float | None] = mapped_column(Float)
    ct_phantom_diameter_cm: Mapped[float | None] = mapped_column(Float)
    water_equivalent_diameter_mm: Mapped[float | None] = mapped_column(Float)
    ssde_mgy: Mapped[float | None] = mapped_column(Float)
    # the scanner's size figures as reported (CID 10024 / 10023 methods, TID 10013 dimensions)
    water_equivalent_diameter_method: Mapped[str | None] = mapped_column(String)
    ssde_method: Mapped[str | None] = mapped_column(String)
    ct_lateral_dimension_mm: Mapped[float | None] = mapped_column(Float)
    ct_ap_dimension_mm: Mapped[float | None] = mapped_column(Float)
    effective_diameter_mm: Mapped[float | None] = mapped_column(Float)
    # the acquisition's scan range (TID 10014) in patient coordinates of the frame of reference
    ct_scan_z_top_mm: Mapped[float | None] = mapped_column(Float)
    ct_scan_z_bottom_mm: Mapped[float | None] = mapped_column(Float)
    frame_of_reference_uid: Mapped[str | None] = mapped_column(String)
    # our water-equivalent diameter from the images (AAPM 220 / IEC 62985, api/intake/ct_sizing.py)
    size_dw_mean_cm: Mapped[float | None] = mapped_column(Float)  # averaged over the scan range
    size_dw_centre_cm: Mapped[float | None] = mapped_column(Float)  # at the centre of the range
    size_method: Mapped[str | None] = mapped_column(String)  # axial_images | localizer
    size_images_used: Mapped[int | None] = mapped_column(Integer)
    size_truncated_share: Mapped[float | None] = mapped_column(Float)
    size_trail: Mapped[dict[str, Any] | None] = mapped_column(JSONValue)
    # SSDE from our Dw, beside the scanner's ssde_mgy
    size_ssde_mgy: Mapped[float | None] = mapped_column(Float)
    size_ssde_report: Mapped[str | None] = mapped_column(String)  # AAPM Report 204 / 293
    ssde_ratio_reported_to_size: Mapped[float | None] = mapped_column(Float)
    ct_scan_length_mm: Mapped[float | None] = mapped_column(Float)
    ct_pitch_factor: Mapped[float | None] = mapped_column(Float)
    ct_total_collimation_mm: Mapped[float | None] = mapped_column(Float)
    exposure_index: Mapped[float | None] = mapped_column(Float)
    target_exposure_index: Mapped[float | None] = mapped_column(Float)
    deviation_index: Mapped[float | None] = mapped_column(Float)
    fluoro_mode: Mapped[str | None] = mapped_column(String)
    pulse_rate_per_s: Mapped[float | None] = mapped_column(Float)
    number_of_pulses: Mapped[int | None] = mapped_column(Integer)
    irradiation_duration_s: Mapped[float | None] = mapped_column(Float)
    #: set with the exam type by the mapping rule that matched (``acute_stroke``); null: none
    clinical_indication: Mapped[str | None] = mapped_column(String)
    #: population-average estimate (beamaudit.model.effective_dose), with the coefficient's
    #: citation; null with the reason in ``effective_dose_reason`` where none is sourced
    effective_dose_msv: Mapped[float | None] = mapped_column(Float)
    effective_dose_source: Mapped[str | None] = mapped_column(Text)
    effective_dose_reason: Mapped[str | None] = mapped_column(Text)
    # mammography (MG headers, TID 10003 rows of a mammography dose report); the compressed
    # breast thickness is body_part_thickness_mm, the device's AGD organ_dose_mgy
    compression_force_n: Mapped[float | None] = mapped_column(Float)
    compression_pressure_kpa: Mapped[float | None] = mapped_column(Float)
    compression_contact_area_mm2: Mapped[float | None] = mapped_column(Float)
    paddle_description: Mapped[str | None] = mapped_column(String)
    image_laterality: Mapped[str | None] = mapped_column(String)  # L, R, B
    breast_implant_present: Mapped[bool | None] = mapped_column(Boolean)
    organ_exposed: Mapped[str | None] = mapped_column(String)
    mammography_acquisition: Mapped[str | None] = mapped_column(String)  # 2d | tomosynthesis
    #: screening | diagnostic as ingest read it (ingest/headers.py::_read_intent, the dose
    #: report's intent); its provenance names the clue
    mammography_intent: Mapped[str | None] = mapped_column(String)
    tomo_scan_arc_deg: Mapped[float | None] = mapped_column(Float)
    tomo_projections: Mapped[int | None] = mapped_column(Integer)
    # reconstructed by beamaudit.model (recon_*), beside the reported values above
    recon_status: Mapped[str | None] = mapped_column(String)  # ok | no_technique | failed
    recon_hvl1_mm_al: Mapped[float | None] = mapped_column(Float)
    recon_output_ugy_per_mas_1m: Mapped[float | None] = mapped_column(Float)
    recon_incident_air_kerma_mgy: Mapped[float | None] = mapped_column(Float)
    recon_esak_mgy: Mapped[float | None] = mapped_column(Float)
    recon_entrance_dose_mgy: Mapped[float | None] = mapped_column(Float)
    recon_dap_gy_cm2: Mapped[float | None] = mapped_column(Float)
    recon_dap_u_gy_cm2: Mapped[float | None] = mapped_column(Float)
    recon_esak_u_mgy: Mapped[float | None] = mapped_column(Float)
    recon_backscatter_factor: Mapped[float | None] = mapped_column(Float)
    recon_fsd_mm: Mapped[float | None] = mapped_column(Float)
    recon_calibrated: Mapped[bool | None] = mapped_column(Boolean)
    dap_ratio_reported_to_recon: Mapped[float | None] = mapped_column(Float)
    # mammography: mean glandular dose D_G = K g c s (x T) by the Dance method, per view; the
    # HVL (with the paddle) and K are recon_hvl1_mm_al and recon_incident_air_kerma_mgy
    recon_mgd_mgy: Mapped[float | None] = mapped_column(Float)
    recon_mgd_u_mgy: Mapped[float | None] = mapped_column(Float)
    recon_glandularity_percent: Mapped[float | None] = mapped_column(Float)
    recon_glandularity_assumed: Mapped[bool | None] = mapped_column(Boolean)
    recon_target_filter: Mapped[str | None] = mapped_column(String)  # "W/Rh"
    recon_mgd_g: Mapped[float | None] = mapped_column(Float)
    recon_mgd_c: Mapped[float | None] = mapped_column(Float)
    recon_mgd_s: Mapped[float | None] = mapped_column(Float)
    recon_mgd_t: Mapped[float | None] = mapped_column(Float)  # tomosynthesis only
    recon_mgd_coefficients: Mapped[str | None] = mapped_column(String)  # which table
    recon_mgd_method: Mapped[str | None] = mapped_column(String)
    agd_ratio_reported_to_recon: Mapped[float | None] = mapped_column(Float)
    recon_trail: Mapped[dict[str, Any] | None] = mapped_column(JSONValue)
    provenance: Mapped[dict[str, str]] = mapped_column(JSONValue, default=dict)
    notes: Mapped[list[str]] = mapped_column(JSONValue, default=list)
    stored_at: Mapped[datetime] = mapped_column(UTCDateTime(), default=utcnow, index=True)


class AccumulatedDoseRow(Base):
    """A dose report's accumulated totals (TID 10002 / TID 10012)."""

    __tablename__ = "accumulated_doses"
    id: Mapped[int] = mapped_column(primary_key=True)
    source_object_id: Mapped[int] = mapped_column(ForeignKey("source_objects.id"), index=True)
    study_id: Mapped[int | None] = mapped_column(ForeignKey("studies.id"), index=True)
    acquisition_plane: Mapped[str | None] = mapped_column(String)
    dap_total_gy_cm2: Mapped[float | None] = mapped_column(Float)
    fluoro_dap_total_gy_cm2: Mapped[float | None] = mapped_column(Float)
    acquisition_dap_total_gy_cm2: Mapped[float | None] = mapped_column(Float)
    reference_point_air_kerma_total_mgy: Mapped[float | None] = mapped_column(Float)
    fluoro_time_total_s: Mapped[float | None] = mapped_column(Float)
    number_of_events: Mapped[int | None] = mapped_column(Integer)
    dlp_total_mgy_cm: Mapped[float | None] = mapped_column(Float)
    agd_total_mgy: Mapped[float | None] = mapped_column(Float)
    agd_left_mgy: Mapped[float | None] = mapped_column(Float)  # TID 10005, per breast
    agd_right_mgy: Mapped[float | None] = mapped_column(Float)
    details: Mapped[dict[str, Any]] = mapped_column(JSONValue, default=dict)


class SkinDoseRow(Base):
    """A procedure's (study's) skin-dose estimate, its NCRP 168 levels and its follow-up."""

    __tablename__ = "skin_doses"
    id: Mapped[int] = mapped_column(primary_key=True)
    study_id: Mapped[int] = mapped_column(ForeignKey("studies.id"), unique=True)
    computed_at: Mapped[datetime] = mapped_column(UTCDateTime(), default=utcnow)
    #: ok | failed (the reason in ``reason``)
    status: Mapped[str] = mapped_column(String)
    reason: Mapped[str | None] = mapped_column(Text)
    peak_skin_dose_mgy: Mapped[float | None] = mapped_column(Float)
    area_above_2gy_cm2: Mapped[float | None] = mapped_column(Float)
    area_above_3gy_cm2: Mapped[float | None] = mapped_column(Float)
    area_above_5gy_cm2: Mapped[float | None] = mapped_column(Float)
    uncertainty_pct: Mapped[float | None] = mapped_column(Float)
    events_used: Mapped[int | None] = mapped_column(Integer)
    #: [{event_index, label, dose_mgy, share}] at the peak
    events_at_peak: Mapped[list[dict[str, Any]]] = mapped_column(JSONValue, default=list)
    #: keys of the NCRP 168 levels reached (peak_skin_dose, reference_point_air_kerma, ...)
    levels_crossed: Mapped[list[str]] = mapped_column(JSONValue, default=list)
    #: every level beside the procedure's value
    level_checks: Mapped[list[dict[str, Any]]] = mapped_column(JSONValue, default=list)
    #: the map record (SkinDoseMap.as_record())
    record: Mapped[dict[str, Any] | None] = mapped_column(JSONValue)
    #: follow-up: open | patient_informed | follow_up_booked | closed
    followup_status: Mapped[str] = mapped_column(String, default="open")
    followup_note: Mapped[str | None] = mapped_column(Text)
    followup_by: Mapped[str | None] = mapped_column(String)
    followup_at: Mapped[datetime | None] = mapped_column(UTCDateTime())


class IngestError(Base):
    """A file or object we could not use, with its reason; the batch went on."""

    __tablename__ = "ingest_errors"
    id: Mapped[int] = mapped_column(primary_key=True)
    occurred_at: Mapped[datetime] = mapped_column(UTCDateTime(), default=utcnow, index=True)
    received_via: Mapped[str] = mapped_column(String)
    source: Mapped[str] = mapped_column(String)  # path, "AE@host", URL
    sop_instance_uid: Mapped[str | None] = mapped_column(String)
    code: Mapped[str] = mapped_column(String)
    reason: Mapped[str] = mapped_column(Text)


class ExamTypeRow(Base):
    """An entry of the exam-type catalogue."""

    __tablename__ = "exam_types"
    code: Mapped[str] = mapped_column(String, primary_key=True)
    name: Mapped[str] = mapped_column(String)
    modality: Mapped[str] = mapped_column(String)
    level_applies_per: Mapped[str] = mapped_column(String)  # projection | examination
    quantities: Mapped[list[str]] = mapped_column(JSONValue, default=list)
    details: Mapped[dict[str, Any]] = mapped_column(JSONValue, default=dict)


class MappingRuleRow(Base):
    """One ordered rule mapping raw header values to an exam type (first match wins)."""

    __tablename__ = "mapping_rules"
    id: Mapped[int] = mapped_column(primary_key=True)
    priority: Mapped[int] = mapped_column(Integer, index=True)
    exam_type: Mapped[str] = mapped_column(String)
    patterns: Mapped[dict[str, str]] = mapped_column(JSONValue, default=dict)
    note: Mapped[str | None] = mapped_column(Text)
    #: the clinical indication the rule sets with the exam type (``acute_stroke``); null: none
    clinical_indication: Mapped[str | None] = mapped_column(String)


class ReferenceLevelSetRow(Base):
    """A versioned set of reference levels (local or national)."""

    __tablename__ = "reference_level_sets"
    __table_args__ = (UniqueConstraint("name", "version"),)
    id: Mapped[int] = mapped_column(primary_key=True)
    name: Mapped[str] = mapped_column(String)
    kind: Mapped[str] = mapped_column(String)  # local | national | international
    version: Mapped[str] = mapped_column(String)
    effective_from: Mapped[date] = mapped_column(Date)
    source: Mapped[str | None] = mapped_column(Text)
    retired_at: Mapped[datetime | None] = mapped_column(UTCDateTime())
    created_at: Mapped[datetime] = mapped_column(UTCDateTime(), default=utcnow)


class ReferenceLevelRow(Base):
    """One level: exam type, quantity, value and unit, with its source; for adults (empty
    ``patient_group``) or a paediatric band, for every examination of the type (empty
    ``clinical_indication``) or one indication."""

    __tablename__ = "reference_levels"
    __table_args__ = (
        UniqueConstraint(
            "set_id",
            "exam_type",
            "quantity",
            "patient_group",
            "clinical_indication",
            name="uq_reference_levels_level",
        ),
    )
    id: Mapped[int] = mapped_column(primary_key=True)
    set_id: Mapped[int] = mapped_column(ForeignKey("reference_level_sets.id", ondelete="CASCADE"))
    exam_type: Mapped[str] = mapped_column(String)
    quantity: Mapped[str] = mapped_column(String)
    value: Mapped[float] = mapped_column(Float)
    unit: Mapped[str] = mapped_column(String)
    source: Mapped[str | None] = mapped_column(Text)
    patient_group: Mapped[str] = mapped_column(String, default="", server_default="")
    clinical_indication: Mapped[str] = mapped_column(String, default="", server_default="")


class ReviewRun(Base):
    """A review run, stored with everything needed to repeat it, and its scope.

    The record of a calendar month (what the pages and the committee report show) is its newest
    ``monthly`` run that is ``done``, whole-site and not superseded; runs of a room, an exam type
    or a date range are kept beside it and never replace it.
    """

    __tablename__ = "review_runs"
    id: Mapped[int] = mapped_column(primary_key=True)
    kind: Mapped[str] = mapped_column(String)  # monthly | nightly
    #: ``YYYY-MM`` for a calendar month, else ``YYYY-MM-DD/YYYY-MM-DD`` (end exclusive)
    period: Mapped[str | None] = mapped_column(String, index=True)
    period_start: Mapped[date | None] = mapped_column(Date)
    period_end: Mapped[date | None] = mapped_column(Date)  # exclusive
    #: the filters that narrowed the run ({"rooms": [...], "exam_types": [...], ...}); {}: none
    scope: Mapped[dict[str, list[str]]] = mapped_column(JSONValue, default=dict)
    #: no filter narrowed the run (whether its period is a calendar month is its ``period``)
    whole_site: Mapped[bool] = mapped_column(Boolean, default=True)
    parameters: Mapped[dict[str, Any]] = mapped_column(JSONValue, default=dict)
    level_sets: Mapped[list[dict[str, Any]]] = mapped_column(JSONValue, default=list)
    software_version: Mapped[str] = mapped_column(String)
    status: Mapped[str] = mapped_column(String, default="pending")  # pending|running|done|failed
    #: the process running the run ("host boot-id pid start-ticks"), to tell a run cut short
    #: (its process gone) from one still running
    runner: Mapped[str | None] = mapped_column(String)
    started_at: Mapped[datetime] = mapped_column(UTCDateTime(), default=utcnow)
    finished_at: Mapped[datetime | None] = mapped_column(UTCDateTime())
    result: Mapped[dict[str, Any] | None] = mapped_column(JSONValue)
    error: Mapped[str | None] = mapped_column(Text)
    superseded_at: Mapped[datetime | None] = mapped_column(UTCDateTime())
    superseded_by: Mapped[str | None] = mapped_column(String)  # the actor, as the audit log
    supersede_reason: Mapped[str | None] = mapped_column(Text)


class Finding(Base):
    """What reviews found, with an identity that outlives a run: its kind, its subject (room,
    exam type, event or study, quantity, level set as they apply) and its period.

    A later run that finds it again adds a flag to the same finding, so its triage (status, who,
    when, a note) carries over; ``key`` is the SHA-256 of the identity
    (:func:`beamaudit.api.store.finding_identity.finding_key`).
    """

    __tablename__ = "findings"
    id: Mapped[int] = mapped_column(primary_key=True)
    key: Mapped[str] = mapped_column(String, unique=True)
    kind: Mapped[str] = mapped_column(String)
    #: ``YYYY-MM`` (a run within one calendar month), else the run's ``start/end``
    period: Mapped[str] = mapped_column(String, index=True)
    subject: Mapped[dict[str, Any]] = mapped_column(JSONValue, default=dict)
    status: Mapped[str] = mapped_column(String, default="open")  # open | acknowledged | closed
    note: Mapped[str | None] = mapped_column(Text)
    status_by: Mapped[str | None] = mapped_column(String)  # the actor, as the audit log
    status_at: Mapped[datetime | None] = mapped_column(UTCDateTime())
    created_at: Mapped[datetime] = mapped_column(UTCDateTime(), default=utcnow)


class FlagRow(Base):
    """A finding as one review run raised it, with its reason and the numbers behind it."""

    __tablename__ = "flags"
    id: Mapped[int] = mapped_column(primary_key=True)
    review_run_id: Mapped[int] = mapped_column(
        ForeignKey("review_runs.id", ondelete="CASCADE"), index=True
    )
    finding_id: Mapped[int] = mapped_column(ForeignKey("findings.id"), index=True)
    kind: Mapped[str] = mapped_column(String, index=True)
    severity: Mapped[str] = mapped_column(String)
    reason: Mapped[str] = mapped_column(Text)
    numbers: Mapped[dict[str, Any]] = mapped_column(JSONValue, default=dict)
    #: what differs from the finding's previous flag: ``{name: {"before": x, "after": y}}``
    #: (``severity`` too); null when the finding was new
    changes: Mapped[dict[str, Any] | None] = mapped_column(JSONValue)
    event_id: Mapped[int | None] = mapped_column(ForeignKey("exposure_events.id"))
    study_instance_uid: Mapped[str | None] = mapped_column(String)
    room: Mapped[str | None] = mapped_column(String)
    exam_type: Mapped[str | None] = mapped_column(String)
    created_at: Mapped[datetime] = mapped_column(UTCDateTime(), default=utcnow)
    finding: Mapped[Finding] = relationship(lazy="joined", innerjoin=True)

    @property
    def status(self) -> str:
        """The finding's triage status (``open``, ``acknowledged``, ``closed``)."""
        return self.finding.status


class ApiToken(Base):
    """An API token; only its hash is kept."""

    __tablename__ = "api_tokens"
    id: Mapped[int] = mapped_column(primary_key=True)
    name: Mapped[str | None] = mapped_column(String)
    role: Mapped[str] = mapped_column(String)  # viewer | physicist | admin
    token_hash: Mapped[str] = mapped_column(String, unique=True)
    created_at: Mapped[datetime] = mapped_column(UTCDateTime(), default=utcnow)
    revoked_at: Mapped[datetime | None] = mapped_column(UTCDateTime())
    last_used_at: Mapped[datetime | None] = mapped_column(UTCDateTime())
    expires_at: Mapped[datetime | None] = mapped_column(UTCDateTime())  # None: no expiry


class BrowserSession(Base):
    """A signed-in browser: its cookie (kept only as SHA-256), CSRF token and expiry.

    The cookie is a random value of its own, never the API token it was opened with; signing
    out, the token's revocation or expiry, and ``expires_at`` end it.
    """

    __tablename__ = "browser_sessions"
    id: Mapped[int] = mapped_column(primary_key=True)
    session_hash: Mapped[str] = mapped_column(String, unique=True)
    csrf_token: Mapped[str] = mapped_column(String)
    token_id: Mapped[int] = mapped_column(ForeignKey("api_tokens.id"), index=True)
    created_at: Mapped[datetime] = mapped_column(UTCDateTime(), default=utcnow)
    expires_at: Mapped[datetime] = mapped_column(UTCDateTime())
    ended_at: Mapped[datetime | None] = mapped_column(UTCDateTime())


class AuditLogEntry(Base):
    """Who changed what, when, with the values before and after."""

    __tablename__ = "audit_log"
    id: Mapped[int] = mapped_column(primary_key=True)
    at: Mapped[datetime] = mapped_column(UTCDateTime(), default=utcnow, index=True)
    actor: Mapped[str] = mapped_column(String)  # "token:3 (physicist)" or "cli:<user>"
    action: Mapped[str] = mapped_column(String)
    entity: Mapped[str] = mapped_column(String)
    entity_id: Mapped[str | None] = mapped_column(String)
    before: Mapped[dict[str, Any] | None] = mapped_column(JSONValue)
    after: Mapped[dict[str, Any] | None] = mapped_column(JSONValue)


class DicomwebSource(Base):
    """A DICOMweb server we pull from, with its watermark."""

    __tablename__ = "dicomweb_sources"
    id: Mapped[int] = mapped_column(primary_key=True)
    name: Mapped[str] = mapped_column(String, unique=True)
    url: Mapped[str] = mapped_column(String, unique=True)
    modalities: Mapped[list[str]] = mapped_column(JSONValue, default=list)
    watermark_date: Mapped[date | None] = mapped_column(Date)
    last_pull_at: Mapped[datetime | None] = mapped_column(UTCDateTime())
    last_pull_report: Mapped[dict[str, Any] | None] = mapped_column(JSONValue)
    enabled: Mapped[bool] = mapped_column(Boolean, default=True)
    # the name of a login in the settings (pull.credentials.NAME); never the login itself
    credentials: Mapped[str | None] = mapped_column(String)


class NotificationDelivery(Base):
    """One digest of new findings sent (or not) to one recipient: the delivery log.

    ``last_finding_id`` is the newest finding the digest covered: the next digest to the same
    recipient lists findings after the one last ``sent``, so a failed delivery loses nothing.
    The secret a webhook is signed with and the mail server's password are never stored here.
    """

    __tablename__ = "notification_deliveries"
    id: Mapped[int] = mapped_column(primary_key=True)
    recipient: Mapped[str] = mapped_column(String, index=True)
    channel: Mapped[str] = mapped_column(String)  # smtp | webhook | outbox
    #: the addresses, the webhook URL or the outbox file
    target: Mapped[str] = mapped_column(Text)
    trigger: Mapped[str] = mapped_column(String)  # nightly | review | command | demo
    review_run_id: Mapped[int | None] = mapped_column(Integer)
    status: Mapped[str] = mapped_column(String)  # sent | failed
    attempts: Mapped[int] = mapped_column(Integer, default=0)
    error: Mapped[str | None] = mapped_column(Text)
    findings: Mapped[int] = mapped_column(Integer, default=0)
    last_finding_id: Mapped[int | None] = mapped_column(Integer)
    digest_sha256: Mapped[str] = mapped_column(String)
    created_at: Mapped[datetime] = mapped_column(UTCDateTime(), default=utcnow, index=True)
