"""Normalised records that ingest hands to the rest of beamaudit.

One :class:`ExposureEvent` is one irradiation event (DICOM PS3.16: "one
continuous irradiation"): the exposure of a radiograph described by an image
header, one TID 10003 event of a projection dose report, or one TID 10013 CT
acquisition. One :class:`AccumulatedDose` is one TID 10002 / TID 10012
accumulation of a dose report. Every quantity carries its unit in its name and
is already converted once, here at the edge (see ``mapping.py``); every field
that was read keeps its provenance (tag or concept code) in ``provenance``.

These are plain dataclasses with no behaviour of the store or the model: the
bridge in ``beamaudit.api.intake.pipeline`` turns them into rows and model inputs.
"""

from __future__ import annotations

import dataclasses
import operator
from dataclasses import dataclass, field
from datetime import datetime
from typing import Any, Literal

__all__ = [
    "AccumulatedDose",
    "ExposureEvent",
    "FilterLayer",
    "ParseResult",
    "SourceObject",
]

SourceKind = Literal["image_header", "rdsr"]


@dataclass(frozen=True, slots=True)
class FilterLayer:
    """One beam filter as recorded: material (lower-case element name, e.g.
    ``"aluminium"``, ``"copper"``) and thickness in mm (the minimum when a
    range was given)."""

    material: str
    thickness_mm: float


@dataclass(slots=True)
class SourceObject:
    """The DICOM object an ingest run read (one file or one received dataset)."""

    sop_instance_uid: str
    sop_class_uid: str
    kind: SourceKind
    modality: str | None = None
    study_instance_uid: str | None = None
    series_instance_uid: str | None = None


@dataclass(slots=True)
class ExposureEvent:
    """One irradiation event, normalised; ``None`` means "not recorded".

    ``event_key`` is unique per event across all sources: the Irradiation
    Event UID (0008,3010) / (113769, DCM) when present, otherwise
    ``"<SOP Instance UID>#<index>"``.
    """

    event_key: str
    sop_instance_uid: str
    sop_class_uid: str
    source_kind: SourceKind
    event_index: int = 0
    irradiation_event_uid: str | None = None
    modality: str | None = None
    # added by ingest: "projection" (CR, DX, MG, RF, XA, TID 10003) or "ct" (CT, TID 10013)
    modality_family: str | None = None
    # added by ingest: images of one CT acquisition share it ("<series UID>/acquisition <n>");
    # CTDIvol and DAP in CT image headers are per acquisition, never to be summed over images
    acquisition_key: str | None = None
    # identification and context
    study_instance_uid: str | None = None
    series_instance_uid: str | None = None
    accession_number: str | None = None
    study_datetime: datetime | None = None
    event_datetime: datetime | None = None
    institution_name: str | None = None
    station_name: str | None = None
    manufacturer: str | None = None
    model_name: str | None = None
    device_serial_number: str | None = None
    device_observer_uid: str | None = None
    protocol_name: str | None = None
    study_description: str | None = None
    series_description: str | None = None
    body_part: str | None = None
    view_position: str | None = None
    event_type: str | None = (
        None  # e.g. "stationary", "fluoroscopy", "ct_spiral", "ct_sequenced", "ct_localizer"
    )
    acquisition_plane: str | None = None  # added by ingest: "single", "plane_a", "plane_b"
    # added by ingest: "fluoroscopy_guided", "integrated_projection", "cassette_based" (CID 10032)
    acquisition_device_type: str | None = None
    # patient (pseudonymised; never a name or birth date)
    patient_pseudo_id: str | None = None
    patient_age_years: float | None = None
    patient_sex: str | None = None
    patient_weight_kg: float | None = None
    patient_height_m: float | None = None
    # technique
    kvp_kv: float | None = None
    tube_current_ma: float | None = None
    exposure_time_ms: float | None = None
    exposure_mas: float | None = None
    anode_material: str | None = None  # "tungsten", "molybdenum", "rhodium"
    focal_spot_mm: float | None = None
    grid: str | None = None
    filters: tuple[FilterLayer, ...] = ()
    filter_type: str | None = None  # free text of (0018,1160) or the SR filter type
    # geometry
    sid_mm: float | None = None  # source to detector
    source_to_patient_mm: float | None = (
        None  # (0018,1111): table side (DX/CR/MG) or isocentre (CT/XA)
    )
    source_to_entrance_mm: float | None = None  # (0040,0306)
    source_to_isocenter_mm: float | None = None
    source_to_table_mm: float | None = None
    source_to_reference_point_mm: float | None = None
    body_part_thickness_mm: float | None = None
    magnification_factor: float | None = None
    field_width_mm: float | None = None  # at the plane named by field_plane
    field_height_mm: float | None = None
    field_area_cm2: float | None = None
    field_plane: str | None = (
        None  # "detector" (collimator edges x imager pixel spacing) or "reported"
    )
    collimator_edges_px: tuple[int, int, int, int] | None = None  # left, right, upper, lower
    imager_pixel_spacing_mm: tuple[float, float] | None = None  # row, column
    detector_dimensions_mm: tuple[float, float] | None = None
    # reported dose (as the device said it, converted to our units)
    dap_gy_cm2: float | None = None
    entrance_dose_mgy: float | None = None
    entrance_dose_derivation: str | None = None
    reference_point_air_kerma_mgy: float | None = None
    organ_dose_mgy: float | None = None  # mammography: average glandular dose
    hvl_mm_al: float | None = None
    xray_output_mgy_per_mas: float | None = None
    ctdivol_mgy: float | None = None
    dlp_mgy_cm: float | None = None
    ct_phantom_diameter_cm: float | None = None  # 16 or 32
    water_equivalent_diameter_mm: float | None = None
    ssde_mgy: float | None = None
    # patient size as the scanner reported it (TID 10013 size-specific dose rows, (0018,1272))
    water_equivalent_diameter_method: str | None = None  # CID 10024, e.g. "from_localizer"
    ssde_method: str | None = None  # CID 10023, e.g. "from_water_equivalent_diameter"
    ct_lateral_dimension_mm: float | None = None  # (113931, DCM) Measured Lateral Dimension
    ct_ap_dimension_mm: float | None = None  # (113932, DCM) Measured AP Dimension
    effective_diameter_mm: float | None = None  # (113933, DCM) Derived Effective Diameter
    # the acquisition's scan range (TID 10014), patient coordinates of frame_of_reference_uid
    ct_scan_z_top_mm: float | None = None
    ct_scan_z_bottom_mm: float | None = None
    frame_of_reference_uid: str | None = None
    ct_scan_length_mm: float | None = None
    ct_pitch_factor: float | None = None
    ct_total_collimation_mm: float | None = None
    exposure_index: float | None = None
    target_exposure_index: float | None = None
    deviation_index: float | None = None
    # fluoroscopy and interventional
    fluoro_mode: str | None = None
    pulse_rate_per_s: float | None = None
    number_of_pulses: int | None = None
    irradiation_duration_s: float | None = None
    # fluoroscopy and interventional geometry (TID 10003 / 10003B / 10003C), for skin-dose maps:
    # the positioner as PS3.3 C.8.7.5 defines it (primary: RAO -, LAO +; secondary: caudal -,
    # cranial +), the table in the device's own frame (positions from an arbitrary reference)
    reference_point_definition: str | None = None  # CID 10025 key, or the report's text
    pulse_width_ms: float | None = None
    positioner_primary_angle_deg: float | None = None
    positioner_secondary_angle_deg: float | None = None
    positioner_primary_end_angle_deg: float | None = None  # rotational acquisitions
    positioner_secondary_end_angle_deg: float | None = None
    column_angulation_deg: float | None = None
    table_head_tilt_angle_deg: float | None = None
    table_horizontal_rotation_angle_deg: float | None = None
    table_cradle_tilt_angle_deg: float | None = None
    table_longitudinal_position_mm: float | None = None
    table_lateral_position_mm: float | None = None
    table_height_position_mm: float | None = None
    table_longitudinal_end_position_mm: float | None = None  # stepping acquisitions
    table_lateral_end_position_mm: float | None = None
    table_height_end_position_mm: float | None = None
    patient_table_relationship: str | None = None  # "headfirst", "feetfirst" (CID 21)
    patient_orientation: str | None = None  # "recumbent", "erect" (CID 19)
    patient_orientation_modifier: str | None = None  # "supine", "prone" (CID 20)
    # mammography (Mammography Image, Enhanced Mammography Image, Breast View and Breast
    # Tomosynthesis Acquisition modules; TID 10003 rows of a mammography dose report)
    compression_force_n: float | None = None
    compression_pressure_kpa: float | None = None
    compression_contact_area_mm2: float | None = None
    paddle_description: str | None = None
    image_laterality: str | None = None  # "L", "R" or "B" (both)
    breast_implant_present: bool | None = None
    organ_exposed: str | None = None  # (0040,0318), e.g. "BREAST": what organ_dose_mgy is of
    mammography_acquisition: str | None = None  # "2d" or "tomosynthesis"
    # "screening" or "diagnostic", from the first clue of ingest/intent.py's order; its
    # provenance names the clue (a view modifier, a procedure code, the report's intent)
    mammography_intent: str | None = None
    tomo_scan_arc_deg: float | None = None  # total arc of the tube's sweep
    tomo_projections: int | None = None  # projections of the sweep
    # where every value came from: field -> "(0018,0060) KVP" or "(122130, DCM) Dose Area Product"
    provenance: dict[str, str] = field(default_factory=dict)
    notes: list[str] = field(default_factory=list)

    def __reduce__(self) -> tuple[Any, ...]:
        # pickled as its values in field order: parser processes send thousands of events, and
        # this loads in a third less time than the generic state of a slotted dataclass
        return (_event_from_values, (_event_values(self),))

    def as_dict(self) -> dict[str, Any]:
        """A JSON-ready dict (datetimes as ISO strings, filters as dicts)."""
        out = dataclasses.asdict(self)
        for key in ("study_datetime", "event_datetime"):
            value = getattr(self, key)
            out[key] = value.isoformat() if value is not None else None
        out["filters"] = [dataclasses.asdict(f) for f in self.filters]
        return out


_event_values = operator.attrgetter(*(f.name for f in dataclasses.fields(ExposureEvent)))


def _event_from_values(values: tuple[Any, ...]) -> ExposureEvent:
    return ExposureEvent(*values)


@dataclass(slots=True)
class AccumulatedDose:
    """A dose report's accumulation (TID 10002 for projection x-ray, TID 10012 for CT)."""

    sop_instance_uid: str
    study_instance_uid: str | None
    acquisition_plane: str | None = None
    dap_total_gy_cm2: float | None = None
    fluoro_dap_total_gy_cm2: float | None = None
    acquisition_dap_total_gy_cm2: float | None = None
    reference_point_air_kerma_total_mgy: float | None = None
    fluoro_reference_point_air_kerma_total_mgy: float | None = None
    acquisition_reference_point_air_kerma_total_mgy: float | None = None
    fluoro_time_total_s: float | None = None
    acquisition_time_total_s: float | None = None
    number_of_radiographic_frames: int | None = None
    number_of_events: int | None = None
    dlp_total_mgy_cm: float | None = None
    agd_total_mgy: float | None = None  # TID 10005 value without a breast side
    # TID 10005 Accumulated Average Glandular Dose per breast (CID 6022 Side)
    agd_left_mgy: float | None = None
    agd_right_mgy: float | None = None
    provenance: dict[str, str] = field(default_factory=dict)


@dataclass(slots=True)
class ParseResult:
    """What one DICOM object yields: its identity, its events, its accumulations."""

    source: SourceObject
    events: list[ExposureEvent] = field(default_factory=list)
    accumulated: list[AccumulatedDose] = field(default_factory=list)
    warnings: list[str] = field(default_factory=list)
