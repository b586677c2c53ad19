"""Exams (studies) and exposure events: list items, and one event with its dose breakdown.

Reported values (what the device said) and reconstructed ones (what beamaudit's beam and dose
model made of the same exposure) are kept apart, and compared in ``dose_breakdown``. Every dose
figure is an estimate (see ``caution``).
"""

from __future__ import annotations

from datetime import datetime
from typing import Any

from pydantic import Field

from beamaudit.api.web.schemas.base import Page, ReadModel
from beamaudit.api.web.schemas.rooms import FilterLayerRead

__all__ = [
    "AccumulatedDoseRead",
    "DoseComparison",
    "EventDetail",
    "EventEffectiveDose",
    "EventFlag",
    "EventGeometry",
    "EventPage",
    "EventPatient",
    "EventReconstructed",
    "EventReported",
    "EventSummary",
    "EventTechnique",
    "ExamDetail",
    "ExamPage",
    "ExamSummary",
]


class EventSummary(ReadModel):
    """One exposure event in a list."""

    id: int
    study_id: int | None
    room_id: int | None
    device_id: int | None
    study_instance_uid: str | None = Field(
        default=None, description="the study's Study Instance UID (0020,000D), to find it in PACS"
    )
    sop_instance_uid: str | None = Field(
        default=None, description="SOP Instance UID (0008,0018) of the header or dose report"
    )
    source_kind: str = Field(description="image_header or rdsr")
    modality: str | None
    exam_type: str | None
    superseded: bool = Field(description="a dose report of the study carries this exposure")
    event_datetime: datetime | None
    study_datetime: datetime | None
    protocol_name: str | None
    kvp_kv: float | None
    exposure_mas: float | None
    dap_gy_cm2: float | None
    ctdivol_mgy: float | None
    dlp_mgy_cm: float | None
    recon_status: str | None
    recon_dap_gy_cm2: float | None
    recon_esak_mgy: float | None
    dap_ratio_reported_to_recon: float | None


class EventPage(Page[EventSummary]):
    pass


class EventPatient(ReadModel):
    """The patient as the store keeps them: a pseudonym, never a name or a birth date."""

    patient_pseudo_id: str | None
    patient_age_years: float | None
    patient_sex: str | None
    patient_weight_kg: float | None
    patient_height_m: float | None


class EventTechnique(ReadModel):
    kvp_kv: float | None
    tube_current_ma: float | None
    exposure_time_ms: float | None
    exposure_mas: float | None
    anode_material: str | None
    focal_spot_mm: float | None
    grid: str | None
    filter_type: str | None
    filters: list[FilterLayerRead] | None
    fluoro_mode: str | None
    pulse_rate_per_s: float | None
    number_of_pulses: int | None
    irradiation_duration_s: float | None


class EventGeometry(ReadModel):
    sid_mm: float | None
    source_to_patient_mm: float | None
    source_to_entrance_mm: float | None
    source_to_isocenter_mm: float | None
    source_to_table_mm: float | None
    source_to_reference_point_mm: float | None
    body_part_thickness_mm: float | None
    magnification_factor: float | None
    field_width_mm: float | None
    field_height_mm: float | None
    field_area_cm2: float | None
    field_plane: str | None


class EventReported(ReadModel):
    """Dose figures as the device reported them, converted to our units."""

    dap_gy_cm2: float | None
    entrance_dose_mgy: float | None
    entrance_dose_derivation: str | None
    reference_point_air_kerma_mgy: float | None
    organ_dose_mgy: float | None
    hvl_mm_al: float | None
    xray_output_mgy_per_mas: float | None
    ctdivol_mgy: float | None
    dlp_mgy_cm: float | None
    ct_phantom_diameter_cm: float | None
    water_equivalent_diameter_mm: float | None
    ssde_mgy: float | None
    ct_scan_length_mm: float | None
    ct_pitch_factor: float | None
    ct_total_collimation_mm: float | None
    exposure_index: float | None
    target_exposure_index: float | None
    deviation_index: float | None


class EventReconstructed(ReadModel):
    """What the beam and dose model made of the exposure (``recon_*`` columns)."""

    status: str | None = Field(description="ok, no_technique or failed; null: not run yet")
    calibrated: bool | None = Field(description="the room's QA calibration was applied")
    hvl1_mm_al: float | None
    output_ugy_per_mas_1m: float | None
    incident_air_kerma_mgy: float | None
    backscatter_factor: float | None
    esak_mgy: float | None
    esak_u_mgy: float | None = Field(description="uncertainty of esak_mgy as the model states it")
    entrance_dose_mgy: float | None
    dap_gy_cm2: float | None
    dap_u_gy_cm2: float | None = Field(
        description="uncertainty of dap_gy_cm2 as the model states it"
    )
    fsd_mm: float | None = Field(description="focus to skin distance used")


class DoseComparison(ReadModel):
    """One quantity, reported beside reconstructed."""

    quantity: str
    unit: str
    reported: float | None
    reconstructed: float | None
    reconstructed_uncertainty: float | None
    ratio_reported_to_reconstructed: float | None


class EventFlag(ReadModel):
    """A review's finding about this event."""

    id: int
    review_run_id: int
    kind: str
    severity: str
    reason: str
    status: str


class EventDetail(ReadModel):
    """One exposure event: identification, patient, technique, geometry, dose and its why trail."""

    id: int
    event_key: str
    study_id: int | None
    study_instance_uid: str | None
    sop_instance_uid: str
    room_id: int | None
    device_id: int | None
    source_kind: str
    event_index: int
    exam_type: str | None
    superseded: bool
    irradiation_event_uid: str | None
    modality: str | None
    accession_number: str | None
    study_datetime: datetime | None
    event_datetime: datetime | None
    institution_name: str | None
    station_name: str | None
    manufacturer: str | None
    model_name: str | None
    device_serial_number: str | None
    device_observer_uid: str | None
    protocol_name: str | None
    study_description: str | None
    series_description: str | None
    body_part: str | None
    view_position: str | None
    event_type: str | None
    clinical_indication: str | None = Field(
        description="set with the exam type by the mapping rule that matched (acute_stroke)"
    )
    stored_at: datetime
    patient: EventPatient
    technique: EventTechnique
    geometry: EventGeometry
    reported: EventReported
    reconstructed: EventReconstructed
    effective_dose: EventEffectiveDose
    dose_breakdown: list[DoseComparison]
    recon_trail: dict[str, Any] | None = Field(
        description="how each reconstructed figure was made, step by step"
    )
    provenance: dict[str, str] = Field(
        description="field -> the DICOM tag or SR concept it came from"
    )
    notes: list[str]
    flags: list[EventFlag]
    caution: str


class EventEffectiveDose(ReadModel):
    """A population-average effective-dose estimate (ICRP 103 / ICRP 147: for comparing
    protocols and summing exposures for quality assurance, never one patient's dose or risk)."""

    effective_dose_msv: float | None = Field(description="null: no sourced coefficient applies")
    effective_dose_source: str | None = Field(description="the coefficient's table and row")
    effective_dose_reason: str | None = Field(description="why there is no estimate")


class AccumulatedDoseRead(ReadModel):
    acquisition_plane: str | None
    dap_total_gy_cm2: float | None
    fluoro_dap_total_gy_cm2: float | None
    acquisition_dap_total_gy_cm2: float | None
    reference_point_air_kerma_total_mgy: float | None
    fluoro_time_total_s: float | None
    number_of_events: int | None
    dlp_total_mgy_cm: float | None
    agd_total_mgy: float | None


class ExamSummary(ReadModel):
    """One examination (a DICOM study)."""

    id: int
    study_instance_uid: str
    accession_number: str | None
    study_datetime: datetime | None
    study_description: str | None
    exam_type: str | None
    has_dose_report: bool
    patient_pseudo_id: str | None
    patient_age_years: float | None
    patient_sex: str | None
    patient_weight_kg: float | None
    patient_height_m: float | None


class ExamPage(Page[ExamSummary]):
    pass


class ExamDetail(ExamSummary):
    """An examination with its events (superseded ones included, marked) and dose totals."""

    events: list[EventSummary]
    accumulated: list[AccumulatedDoseRead]
    caution: str
