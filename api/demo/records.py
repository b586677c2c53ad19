"""Plain records of the invented examinations, between simulation and DICOM writing.

Each record holds the *true* exposure (what the room delivered) beside what the room *reports*
(the DAP meter's reading, or nothing when the dose link failed), so that the generator can write
the files and, from the same records, the manifest's expected numbers and the truth table.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from datetime import date, datetime

__all__ = [
    "CtAcquisition",
    "CtStudy",
    "FluoroEvent",
    "FluoroStudy",
    "Patient",
    "RadiographStudy",
    "RadiographView",
]


@dataclass(slots=True)
class Patient:
    """An invented patient (the name is obviously invented; see the scenario)."""

    patient_id: str
    name: str
    sex: str
    birth_date: date
    height_m: float
    weight_kg: float


@dataclass(slots=True)
class RadiographView:
    """One radiographic exposure (one image, one irradiation event)."""

    index: int
    program: str
    exam_type: str | None  # the exam type it should map to; None for a planted unmapped name
    protocol_name: str
    series_description: str
    body_part: str | None
    view_position: str
    laterality: str
    sop_uid: str
    event_uid: str
    acquired: datetime
    aec: bool
    grid: bool
    kvp_kv: float
    exposure_mas: float
    tube_current_ma: float
    exposure_time_ms: float
    sid_mm: float
    source_to_patient_mm: float
    source_to_entrance_mm: float
    thickness_mm: float
    field_width_mm: float
    field_height_mm: float
    collimator_edges_px: tuple[int, int, int, int]
    output_ugy_per_mas_1m: float
    dap_true_gy_cm2: float
    dap_reported_gy_cm2: float
    exposure_index: float | None
    target_exposure_index: float | None
    deviation_index: float | None
    technique_recorded: bool = True
    dose_recorded: bool = True
    planted: list[str] = field(default_factory=list)

    @property
    def field_area_cm2(self) -> float:
        """Collimated field at the receptor, cm²."""
        return self.field_width_mm * self.field_height_mm / 100.0


@dataclass(slots=True)
class RadiographStudy:
    """A radiography examination of one room: its views share one series."""

    room: str
    study_uid: str
    series_uid: str
    accession: str
    patient: Patient
    start: datetime
    procedure: str
    study_description: str
    weight_recorded: bool
    views: list[RadiographView] = field(default_factory=list)
    planted: list[str] = field(default_factory=list)


@dataclass(slots=True)
class CtAcquisition:
    """One CT irradiation event (a localiser or a helical acquisition)."""

    event_uid: str
    series_uid: str
    image_sop_uid: str | None
    started: datetime
    protocol: str
    phase_label: str
    spiral: bool
    kvp_kv: float
    tube_current_ma: float
    max_tube_current_ma: float
    exposure_time_s: float
    rotation_time_s: float | None
    pitch: float | None
    single_collimation_mm: float
    total_collimation_mm: float
    scanning_length_mm: float
    ctdivol_mgy: float | None
    dlp_mgy_cm: float | None
    head_phantom: bool


@dataclass(slots=True)
class CtStudy:
    """A CT examination: a dose report (TID 10011) and one image per helical acquisition."""

    room: str
    study_uid: str
    accession: str
    patient: Patient
    start: datetime
    end: datetime
    exam_type: str
    study_description: str
    body_part: str
    target_region: tuple[str, str, str]
    weight_recorded: bool
    frame_of_reference_uid: str
    report_sop_uid: str
    report_series_uid: str
    acquisitions: list[CtAcquisition] = field(default_factory=list)
    planted: list[str] = field(default_factory=list)
    #: what the scanner sends beside the dose report and the centre images: ``series`` (its
    #: localizer and axial images every 50 mm of each helical acquisition), ``localizer``
    #: (the localizer only) or ``""`` (nothing more)
    size_images: str = ""

    @property
    def dlp_total_mgy_cm(self) -> float:
        """Sum of the acquisitions' DLP as written (each rounded to 0.1 mGy·cm)."""
        return round(sum(a.dlp_mgy_cm or 0.0 for a in self.acquisitions), 1)

    @property
    def ctdivol_max_mgy(self) -> float:
        """Largest CTDIvol of the study's acquisitions (the study's value, see the catalogue)."""
        return max(a.ctdivol_mgy or 0.0 for a in self.acquisitions)


@dataclass(frozen=True, slots=True)
class CArmGeometry:
    """Where an interventional C-arm and its table were during one event (TID 10003C)."""

    primary_angle_deg: float
    secondary_angle_deg: float
    source_to_isocenter_mm: float
    table_longitudinal_mm: float
    table_lateral_mm: float
    table_height_mm: float


@dataclass(slots=True)
class FluoroEvent:
    """One TID 10003 event: a pulsed fluoroscopy run or one spot image."""

    event_uid: str
    started: datetime
    fluoroscopy: bool
    kvp_kv: float
    tube_current_ma: float
    exposure_mas: float
    exposure_time_ms: float
    duration_s: float
    pulse_rate_per_s: float | None
    number_of_pulses: int | None
    pulse_width_ms: float | None
    filters: tuple[tuple[str, float], ...]
    field_width_mm: float
    field_height_mm: float
    sid_mm: float
    source_to_table_mm: float
    source_to_rp_mm: float
    output_ugy_per_mas_1m: float
    dap_true_gy_cm2: float
    dap_reported_gy_cm2: float
    dose_rp_reported_mgy: float
    #: the interventional room's C-arm and table (None: the fluoroscopy room reports none)
    geometry: CArmGeometry | None = None


@dataclass(slots=True)
class FluoroStudy:
    """A fluoroscopy examination, reported by one TID 10001 dose report."""

    room: str
    study_uid: str
    accession: str
    patient: Patient
    start: datetime
    end: datetime
    exam_type: str
    study_description: str
    protocol_name: str
    target_region: tuple[str, str, str]
    weight_recorded: bool
    report_sop_uid: str
    report_series_uid: str
    events: list[FluoroEvent] = field(default_factory=list)
    planted: list[str] = field(default_factory=list)

    @property
    def dap_total_reported_gy_cm2(self) -> float:
        """Sum of the events' reported DAP, Gy·cm²."""
        return sum(e.dap_reported_gy_cm2 for e in self.events)

    @property
    def rp_total_reported_mgy(self) -> float:
        """Sum of the events' reported Dose (RP), mGy."""
        return sum(e.dose_rp_reported_mgy for e in self.events)
