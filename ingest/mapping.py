"""The one mapping table: DICOM attribute or SR concept -> beamaudit field.

Every value ingest reads comes through a row of :data:`MAPPING`. A row says
where the value sits (a header keyword with its tag and VR, or a dose-report
concept code with its value type and the template context it belongs to), the
unit it is written in there, and the unit of our field; the conversion between
the two is :func:`beamaudit.ingest.units.convert`. For dose reports the unit is
read from each value's own ``MeasurementUnitsCodeSequence`` and the row's unit
is only the one PS3.16 names (a report written in another unit of the same
dimension converts correctly; one of another dimension is refused).

Where several rows feed one field, the lowest ``rank`` present wins (e.g.
``ExposureInmAs`` (FD) before ``ExposureInuAs`` before the integer
``Exposure``). The provenance string kept for each field is the row's
:attr:`FieldMapping.label`, e.g. ``"(0018,0060) KVP"`` or
``"(122130, DCM) Dose Area Product"``.

:data:`FIELD_LIMITS` holds the physical range of each quantity. Outside it the
object is rejected (``IngestError`` code ``out_of_range``) for technique,
geometry and dose; for patient demographics the value is dropped with a
warning, since one mistyped weight must not hide the exposures of a study.
Recorded zeros for technique factors mean "not recorded" (CR readers write
``KVP 0``): they become ``None``, with a note.

Sources: tags, keywords and VRs from PS3.6 (checked against pydicom's data
dictionary in ``tests/ingest/test_mapping.py``); units from PS3.3 modules and
PS3.16 TID 10001-10015 (see DICOM-NOTES sections 1 and 2).
"""

from __future__ import annotations

from dataclasses import dataclass
from dataclasses import field as dataclass_field
from functools import cache
from typing import Literal

__all__ = [
    "FIELD_LIMITS",
    "MAPPING",
    "FieldLimit",
    "FieldMapping",
    "SrContext",
    "concept_rows",
    "header_rows",
    "header_rows_by_field",
    "intent_clue_row",
]

SrContext = Literal[
    "document",  # root container and its observer context (TID 10001/10011 rows 1-8)
    "projection_event",  # TID 10003 with 10003A/B/C flattened in
    "ct_event",  # TID 10013 with its CT Acquisition Parameters, X-Ray Source and CT Dose containers
    "projection_accumulated",  # TID 10002 with 10004/10005/10006/10007 flattened in
    "ct_accumulated",  # TID 10012
    "filter",  # one (113771, DCM) X-Ray Filters container
]


@dataclass(frozen=True, slots=True)
class FieldMapping:
    """One row of the mapping table.

    Attributes
    ----------
    field
        The :class:`~beamaudit.ingest.events.ExposureEvent` (or, for
        ``*_accumulated`` contexts, :class:`~beamaudit.ingest.events.AccumulatedDose`)
        attribute fed by this row.
    source
        ``"header"`` for a data element, ``"sr"`` for a dose-report content item.
    keyword, tag, vr
        Header rows: the PS3.6 keyword, tag (``0xGGGGEEEE``) and VR.
    code, meaning, value_type, context
        SR rows: the canonical concept code ``(CodeValue, CodingSchemeDesignator)``,
        its meaning, the content item's value type and the template context.
    unit
        Unit the value is written in (UCUM; ``""`` for text and codes).
    our_unit
        Unit of our field (``""`` for text and codes).
    rank
        Precedence among rows feeding the same field in the same context (lower wins).
    families
        Modality families the row applies to (header rows), ``None`` for all.
    label
        The provenance string of this row, e.g. ``"(0018,0060) KVP"``.
    """

    field: str
    source: Literal["header", "sr"]
    unit: str = ""
    our_unit: str = ""
    keyword: str | None = None
    tag: int | None = None
    vr: str | None = None
    code: tuple[str, str] | None = None
    meaning: str | None = None
    value_type: str | None = None
    context: SrContext | None = None
    rank: int = 0
    families: frozenset[str] | None = None

    label: str = dataclass_field(init=False, repr=False, compare=False)

    def __post_init__(self) -> None:
        # the provenance string of this row, computed once
        if self.source == "header":
            assert self.tag is not None
            text = f"({self.tag >> 16:04X},{self.tag & 0xFFFF:04X}) {self.keyword}"
        else:
            assert self.code is not None
            text = f"({self.code[0]}, {self.code[1]}) {self.meaning}"
        object.__setattr__(self, "label", text)


@dataclass(frozen=True, slots=True)
class FieldLimit:
    """Physical range of a quantity in our unit (inclusive unless ``low_open``).

    ``zero_means_absent``: a recorded 0 is "not recorded" (becomes ``None``).
    ``action``: ``"reject"`` the object, or ``"drop"`` the value with a warning.
    """

    low: float | None
    high: float | None
    low_open: bool = False
    zero_means_absent: bool = False
    action: Literal["reject", "drop"] = "reject"
    why: str = ""

    def describe(self) -> str:
        """The range in words, e.g. ``"20-150"`` or ``"> 0"``."""
        if self.low is not None and self.high is not None:
            return f"{self.low:g}-{self.high:g}"
        if self.low is not None:
            return f"{'>' if self.low_open else '>='} {self.low:g}"
        if self.high is not None:
            return f"<= {self.high:g}"
        return "any"


_PROJ = frozenset({"projection"})
_CT = frozenset({"ct"})


def _h(
    field: str,
    keyword: str,
    tag: int,
    vr: str,
    unit: str = "",
    our_unit: str = "",
    rank: int = 0,
    families: frozenset[str] | None = None,
) -> FieldMapping:
    return FieldMapping(
        field, "header", unit, our_unit, keyword=keyword, tag=tag, vr=vr, rank=rank,
        families=families,
    )  # fmt: skip


def _c(
    context: SrContext,
    field: str,
    code: str,
    meaning: str,
    value_type: str,
    unit: str = "",
    our_unit: str = "",
    scheme: str = "DCM",
    rank: int = 0,
) -> FieldMapping:
    return FieldMapping(
        field, "sr", unit, our_unit, code=(code, scheme), meaning=meaning,
        value_type=value_type, context=context, rank=rank,
    )  # fmt: skip


# fmt: off
MAPPING: tuple[FieldMapping, ...] = (
    # ---- image headers: identification (General Study / Series / Equipment, SOP Common)
    _h("sop_instance_uid", "SOPInstanceUID", 0x00080018, "UI"),
    _h("sop_class_uid", "SOPClassUID", 0x00080016, "UI"),
    _h("study_instance_uid", "StudyInstanceUID", 0x0020000D, "UI"),
    _h("series_instance_uid", "SeriesInstanceUID", 0x0020000E, "UI"),
    _h("irradiation_event_uid", "IrradiationEventUID", 0x00083010, "UI"),
    _h("acquisition_key", "AcquisitionNumber", 0x00200012, "IS", families=_CT),
    _h("modality", "Modality", 0x00080060, "CS"),
    _h("accession_number", "AccessionNumber", 0x00080050, "SH"),
    _h("study_datetime", "StudyDate", 0x00080020, "DA"),
    _h("study_datetime", "StudyTime", 0x00080030, "TM", rank=1),
    _h("event_datetime", "AcquisitionDateTime", 0x0008002A, "DT"),
    _h("event_datetime", "AcquisitionDate", 0x00080022, "DA", rank=1),
    _h("event_datetime", "AcquisitionTime", 0x00080032, "TM", rank=2),
    _h("institution_name", "InstitutionName", 0x00080080, "LO"),
    _h("station_name", "StationName", 0x00081010, "SH"),
    _h("manufacturer", "Manufacturer", 0x00080070, "LO"),
    _h("model_name", "ManufacturerModelName", 0x00081090, "LO"),
    _h("device_serial_number", "DeviceSerialNumber", 0x00181000, "LO"),
    _h("protocol_name", "ProtocolName", 0x00181030, "LO"),
    _h("protocol_name", "AcquisitionDeviceProcessingDescription", 0x00181400, "LO", rank=1),
    _h("study_description", "StudyDescription", 0x00081030, "LO"),
    _h("series_description", "SeriesDescription", 0x0008103E, "LO"),
    _h("body_part", "BodyPartExamined", 0x00180015, "CS"),
    _h("view_position", "ViewPosition", 0x00185101, "CS"),
    _h("view_position", "ViewCodeSequence", 0x00540220, "SQ", rank=1),
    _h("event_type", "AcquisitionType", 0x00189302, "CS", families=_CT),
    _h("event_type", "ScanOptions", 0x00180022, "CS", rank=1, families=_CT),
    # ---- patient (Patient / Patient Study modules); names and birth dates are never kept
    _h("patient_pseudo_id", "PatientID", 0x00100020, "LO"),
    _h("patient_pseudo_id", "IssuerOfPatientID", 0x00100021, "LO", rank=1),
    _h("patient_age_years", "PatientAge", 0x00101010, "AS"),
    _h("patient_age_years", "PatientBirthDate", 0x00100030, "DA", rank=1),
    _h("patient_sex", "PatientSex", 0x00100040, "CS"),
    _h("patient_weight_kg", "PatientWeight", 0x00101030, "DS", "kg", "kg"),
    _h("patient_height_m", "PatientSize", 0x00101020, "DS", "m", "m"),
    # ---- technique (X-Ray Acquisition, X-Ray Generation, CT Image, CT Exposure, Frame Acquisition)
    _h("kvp_kv", "KVP", 0x00180060, "DS", "kV", "kV"),
    _h("tube_current_ma", "XRayTubeCurrentInmA", 0x00189330, "FD", "mA", "mA"),
    _h("tube_current_ma", "XRayTubeCurrentInuA", 0x00188151, "DS", "uA", "mA", rank=1),
    _h("tube_current_ma", "XRayTubeCurrent", 0x00181151, "IS", "mA", "mA", rank=2),
    _h("exposure_time_ms", "ExposureTimeInms", 0x00189328, "FD", "ms", "ms"),
    _h("exposure_time_ms", "ExposureTimeInuS", 0x00188150, "DS", "us", "ms", rank=1),
    _h("exposure_time_ms", "ExposureTime", 0x00181150, "IS", "ms", "ms", rank=2),
    _h("exposure_mas", "ExposureInmAs", 0x00189332, "FD", "mA.s", "mA.s"),
    _h("exposure_mas", "ExposureInuAs", 0x00181153, "IS", "uA.s", "mA.s", rank=1),
    _h("exposure_mas", "Exposure", 0x00181152, "IS", "mA.s", "mA.s", rank=2),
    _h("focal_spot_mm", "FocalSpots", 0x00181190, "DS", "mm", "mm"),
    _h("anode_material", "AnodeTargetMaterial", 0x00181191, "CS"),
    _h("grid", "Grid", 0x00181166, "CS"),
    _h("filter_type", "FilterType", 0x00181160, "SH"),
    _h("filters", "FilterMaterial", 0x00187050, "CS"),
    _h("filters", "FilterThicknessMinimum", 0x00187052, "DS", "mm", "mm"),
    _h("filters", "FilterThicknessMaximum", 0x00187054, "DS", "mm", "mm", rank=1),
    _h("fluoro_mode", "RadiationMode", 0x0018115A, "CS", families=_PROJ),
    _h("irradiation_duration_s", "AcquisitionDuration", 0x00189073, "FD", "s", "s",
       families=_PROJ),
    # ---- geometry (mm)
    _h("sid_mm", "DistanceSourceToDetector", 0x00181110, "DS", "mm", "mm"),
    _h("source_to_patient_mm", "DistanceSourceToPatient", 0x00181111, "DS", "mm", "mm"),
    _h("source_to_entrance_mm", "DistanceSourceToEntrance", 0x00400306, "DS", "mm", "mm"),
    _h("source_to_isocenter_mm", "DistanceSourceToIsocenter", 0x00189402, "FL", "mm", "mm"),
    _h("body_part_thickness_mm", "BodyPartThickness", 0x001811A0, "DS", "mm", "mm"),
    _h("magnification_factor", "EstimatedRadiographicMagnificationFactor", 0x00181114, "DS",
       "1", "1"),
    _h("imager_pixel_spacing_mm", "ImagerPixelSpacing", 0x00181164, "DS", "mm", "mm"),
    _h("detector_dimensions_mm", "DetectorActiveDimensions", 0x00187026, "DS", "mm", "mm"),
    _h("collimator_edges_px", "CollimatorLeftVerticalEdge", 0x00181702, "IS"),
    _h("collimator_edges_px", "CollimatorRightVerticalEdge", 0x00181704, "IS"),
    _h("collimator_edges_px", "CollimatorUpperHorizontalEdge", 0x00181706, "IS"),
    _h("collimator_edges_px", "CollimatorLowerHorizontalEdge", 0x00181708, "IS"),
    _h("field_width_mm", "ExposedArea", 0x00400303, "US", "mm", "mm"),
    # image size, to check that collimator edges are pixel positions (field at the detector)
    _h("field_width_mm", "Columns", 0x00280011, "US", rank=1),
    _h("field_height_mm", "Rows", 0x00280010, "US"),
    # ---- dose as reported in image headers
    _h("dap_gy_cm2", "ImageAndFluoroscopyAreaDoseProduct", 0x0018115E, "DS", "dGy.cm2",
       "Gy.cm2"),
    # unit of (0018,9473) taken as dGy.cm2 like (0018,115E): not re-read (DICOM-NOTES 6.3)
    _h("dap_gy_cm2", "AcquiredImageAreaDoseProduct", 0x00189473, "FL", "dGy.cm2", "Gy.cm2",
       rank=1),
    _h("entrance_dose_mgy", "EntranceDoseInmGy", 0x00408302, "DS", "mGy", "mGy"),
    _h("entrance_dose_mgy", "EntranceDose", 0x00400302, "US", "dGy", "mGy", rank=1),
    _h("entrance_dose_derivation", "EntranceDoseDerivation", 0x00408303, "CS"),
    _h("organ_dose_mgy", "OrganDose", 0x00400316, "DS", "dGy", "mGy"),
    _h("hvl_mm_al", "HalfValueLayer", 0x00400314, "DS", "mm", "mm"),
    _h("xray_output_mgy_per_mas", "XRayOutput", 0x00400312, "DS", "mGy/mA.s", "mGy/mA.s"),
    _h("ctdivol_mgy", "CTDIvol", 0x00189345, "FD", "mGy", "mGy"),
    _h("ct_phantom_diameter_cm", "CTDIPhantomTypeCodeSequence", 0x00189346, "SQ"),
    _h("water_equivalent_diameter_mm", "WaterEquivalentDiameter", 0x00181271, "FD", "mm", "mm"),
    _h("water_equivalent_diameter_method", "WaterEquivalentDiameterCalculationMethodCodeSequence",
       0x00181272, "SQ", families=_CT),
    _h("ct_pitch_factor", "SpiralPitchFactor", 0x00189311, "FD", "1", "1"),
    _h("ct_total_collimation_mm", "TotalCollimationWidth", 0x00189307, "FD", "mm", "mm"),
    _h("exposure_index", "ExposureIndex", 0x00181411, "DS", "1", "1"),
    _h("target_exposure_index", "TargetExposureIndex", 0x00181412, "DS", "1", "1"),
    _h("deviation_index", "DeviationIndex", 0x00181413, "DS", "1", "1"),
    # ---- mammography (Mammography Image, Enhanced Mammography Image, Breast View, Breast
    #      Tomosynthesis Acquisition modules, PS3.3 C.8.11.7, C.8.32, C.8.21.3.4)
    _h("compression_force_n", "CompressionForce", 0x001811A2, "DS", "N", "N"),
    _h("compression_pressure_kpa", "CompressionPressure", 0x001811A3, "DS", "kPa", "kPa"),
    _h("compression_contact_area_mm2", "CompressionContactArea", 0x001811A5, "DS", "mm2",
       "mm2"),
    _h("paddle_description", "PaddleDescription", 0x001811A4, "LO"),
    _h("image_laterality", "ImageLaterality", 0x00200062, "CS"),
    _h("image_laterality", "FrameLaterality", 0x00209072, "CS", rank=1),
    _h("image_laterality", "Laterality", 0x00200060, "CS", rank=2),
    _h("breast_implant_present", "BreastImplantPresent", 0x00281300, "CS"),
    _h("organ_exposed", "OrganExposed", 0x00400318, "CS"),
    _h("tomo_scan_arc_deg", "PrimaryPositionerScanArc", 0x00189508, "FL", "deg", "deg"),
    _h("tomo_projections", "PerProjectionAcquisitionSequence", 0x00189538, "SQ"),
    _h("mammography_acquisition", "XRay3DAcquisitionSequence", 0x00189507, "SQ"),
    _h("mammography_acquisition", "ImageType", 0x00080008, "CS", rank=1),
    # screening or diagnostic (ingest/headers.py::_read_intent, in this order): a CID 4015 view
    # modifier of a workup view (in View Code Sequence (0054,0220)), then the meaning of a
    # performed procedure code (an SR document's Performed Procedure Code Sequence, then the
    # study's Procedure Code Sequence), then of a requested one (also in Request Attributes
    # Sequence (0040,0275) of an image, Referenced Request Sequence (0040,A370) of an SR)
    _h("mammography_intent", "ViewModifierCodeSequence", 0x00540222, "SQ"),
    _h("mammography_intent", "PerformedProcedureCodeSequence", 0x0040A372, "SQ", rank=1),
    _h("mammography_intent", "ProcedureCodeSequence", 0x00081032, "SQ", rank=2),
    _h("mammography_intent", "RequestedProcedureCodeSequence", 0x00321064, "SQ", rank=3),
    # ---- dose report: document level (TID 10001 / 10011 and TID 1002 observer context)
    _c("document", "procedure_reported", "121058", "Procedure reported", "CODE"),
    # HAS CONCEPT MOD of Procedure reported (TID 10001 row 3), CID 3629: read below it
    _c("document", "mammography_intent", "363703001", "Has intent (attribute)", "CODE",
       scheme="SCT"),
    _c("document", "acquisition_device_type", "122142", "Acquisition Device Type", "CODE"),
    _c("document", "device_observer_uid", "121012", "Device Observer UID", "UIDREF"),
    _c("document", "station_name", "121013", "Device Observer Name", "TEXT"),
    _c("document", "manufacturer", "121014", "Device Observer Manufacturer", "TEXT"),
    _c("document", "model_name", "121015", "Device Observer Model Name", "TEXT"),
    _c("document", "device_serial_number", "121016", "Device Observer Serial Number", "TEXT"),
    # ---- TID 10003 Irradiation Event X-Ray Data (+ 10003A detector, 10003B source, 10003C
    #      mechanical, all flattened into the event container)
    _c("projection_event", "acquisition_plane", "113764", "Acquisition Plane", "CODE"),
    _c("projection_event", "irradiation_event_uid", "113769", "Irradiation Event UID", "UIDREF"),
    _c("projection_event", "event_datetime", "111526", "DateTime Started", "DATETIME"),
    _c("projection_event", "event_type", "113721", "Irradiation Event Type", "CODE"),
    _c("projection_event", "protocol_name", "125203", "Acquisition Protocol", "TEXT"),
    _c("projection_event", "body_part", "123014", "Target Region", "CODE"),
    _c("projection_event", "view_position", "111031", "Image View", "CODE"),
    # a CID 4015 modifier of a workup view (HAS CONCEPT MOD of Image View): diagnostic
    _c("projection_event", "mammography_intent", "111032", "Image View Modifier", "CODE"),
    _c("projection_event", "dap_gy_cm2", "122130", "Dose Area Product", "NUM", "Gy.m2", "Gy.cm2"),
    _c("projection_event", "entrance_dose_mgy", "111636", "Entrance Exposure at RP", "NUM",
       "mGy", "mGy"),
    _c("projection_event", "body_part_thickness_mm", "111633", "Compression Thickness", "NUM",
       "mm", "mm"),
    _c("projection_event", "hvl_mm_al", "111634", "Half Value Layer", "NUM", "mm", "mm"),
    _c("projection_event", "exposure_index", "113845", "Exposure Index", "NUM", "1", "1"),
    _c("projection_event", "target_exposure_index", "113846", "Target Exposure Index", "NUM",
       "1", "1"),
    _c("projection_event", "deviation_index", "113847", "Deviation Index", "NUM", "1", "1"),
    _c("projection_event", "reference_point_air_kerma_mgy", "113738", "Dose (RP)", "NUM",
       "Gy", "mGy"),
    _c("projection_event", "organ_dose_mgy", "111631", "Average Glandular Dose", "NUM",
       "mGy", "mGy"),
    _c("projection_event", "fluoro_mode", "113732", "Fluoro Mode", "CODE"),
    _c("projection_event", "pulse_rate_per_s", "113791", "Pulse Rate", "NUM", "/s", "/s"),
    _c("projection_event", "number_of_pulses", "113768", "Number of Pulses", "NUM", "1", "1"),
    _c("projection_event", "irradiation_duration_s", "113742", "Irradiation Duration", "NUM",
       "s", "s"),
    _c("projection_event", "kvp_kv", "113733", "KVP", "NUM", "kV", "kV"),
    _c("projection_event", "tube_current_ma", "113734", "X-Ray Tube Current", "NUM", "mA", "mA"),
    _c("projection_event", "tube_current_ma", "113767", "Average X-Ray Tube Current", "NUM",
       "mA", "mA", rank=1),
    _c("projection_event", "exposure_time_ms", "113824", "Exposure Time", "NUM", "ms", "ms"),
    _c("projection_event", "exposure_mas", "113736", "Exposure", "NUM", "uA.s", "mA.s"),
    _c("projection_event", "focal_spot_mm", "113766", "Focal Spot Size", "NUM", "mm", "mm"),
    _c("projection_event", "anode_material", "111632", "Anode Target Material", "CODE"),
    _c("projection_event", "grid", "111635", "X-Ray Grid", "CODE"),
    _c("projection_event", "field_area_cm2", "113790", "Collimated Field Area", "NUM",
       "m2", "cm2"),
    _c("projection_event", "field_height_mm", "113788", "Collimated Field Height", "NUM",
       "mm", "mm"),
    _c("projection_event", "field_width_mm", "113789", "Collimated Field Width", "NUM",
       "mm", "mm"),
    _c("projection_event", "source_to_isocenter_mm", "113748", "Distance Source to Isocenter",
       "NUM", "mm", "mm"),
    _c("projection_event", "sid_mm", "113750", "Distance Source to Detector", "NUM", "mm", "mm"),
    _c("projection_event", "source_to_table_mm", "113792", "Distance Source to Table Plane",
       "NUM", "mm", "mm"),
    _c("projection_event", "source_to_reference_point_mm", "113737",
       "Distance Source to Reference Point", "NUM", "mm", "mm"),
    _c("projection_event", "filters", "113771", "X-Ray Filters", "CONTAINER"),
    # ---- TID 10003 / 10003B / 10003C: where the beam and the patient were, for skin-dose maps
    _c("projection_event", "reference_point_definition", "113780", "Reference Point Definition",
       "CODE"),
    _c("projection_event", "pulse_width_ms", "113793", "Pulse Width", "NUM", "ms", "ms"),
    _c("projection_event", "positioner_primary_angle_deg", "112011", "Positioner Primary Angle",
       "NUM", "deg", "deg"),
    _c("projection_event", "positioner_secondary_angle_deg", "112012",
       "Positioner Secondary Angle", "NUM", "deg", "deg"),
    _c("projection_event", "positioner_primary_end_angle_deg", "113739",
       "Positioner Primary End Angle", "NUM", "deg", "deg"),
    _c("projection_event", "positioner_secondary_end_angle_deg", "113740",
       "Positioner Secondary End Angle", "NUM", "deg", "deg"),
    _c("projection_event", "column_angulation_deg", "113770", "Column Angulation", "NUM",
       "deg", "deg"),
    _c("projection_event", "table_head_tilt_angle_deg", "113754", "Table Head Tilt Angle", "NUM",
       "deg", "deg"),
    _c("projection_event", "table_horizontal_rotation_angle_deg", "113755",
       "Table Horizontal Rotation Angle", "NUM", "deg", "deg"),
    _c("projection_event", "table_cradle_tilt_angle_deg", "113756", "Table Cradle Tilt Angle",
       "NUM", "deg", "deg"),
    _c("projection_event", "table_longitudinal_position_mm", "113751",
       "Table Longitudinal Position", "NUM", "mm", "mm"),
    _c("projection_event", "table_lateral_position_mm", "113752", "Table Lateral Position", "NUM",
       "mm", "mm"),
    _c("projection_event", "table_height_position_mm", "113753", "Table Height Position", "NUM",
       "mm", "mm"),
    _c("projection_event", "table_longitudinal_end_position_mm", "113759",
       "Table Longitudinal End Position", "NUM", "mm", "mm"),
    _c("projection_event", "table_lateral_end_position_mm", "113760",
       "Table Lateral End Position", "NUM", "mm", "mm"),
    _c("projection_event", "table_height_end_position_mm", "113761",
       "Table Height End Position", "NUM", "mm", "mm"),
    _c("projection_event", "patient_table_relationship", "113745", "Patient Table Relationship",
       "CODE"),
    _c("projection_event", "patient_orientation", "113743", "Patient Orientation", "CODE"),
    _c("projection_event", "patient_orientation_modifier", "113744",
       "Patient Orientation Modifier", "CODE"),
    # mammography rows of TID 10003 (laterality: the modifier of Target Region, CID 244)
    _c("projection_event", "compression_force_n", "111647", "Compression Force", "NUM",
       "N", "N"),
    _c("projection_event", "compression_pressure_kpa", "111648", "Compression Pressure", "NUM",
       "kPa", "kPa"),
    _c("projection_event", "compression_contact_area_mm2", "111649",
       "Compression Contact Area", "NUM", "mm2", "mm2"),
    _c("projection_event", "image_laterality", "272741003", "Laterality", "CODE",
       scheme="SCT"),
    # ---- one X-Ray Filters container (inside TID 10003B)
    _c("filter", "filter_type", "113772", "X-Ray Filter Type", "CODE"),
    _c("filter", "material", "113757", "X-Ray Filter Material", "CODE"),
    _c("filter", "thickness_min_mm", "113758", "X-Ray Filter Thickness Minimum", "NUM",
       "mm", "mm"),
    _c("filter", "thickness_max_mm", "113773", "X-Ray Filter Thickness Maximum", "NUM",
       "mm", "mm"),
    # ---- TID 10013 CT Irradiation Event Data (+ 113822 CT Acquisition Parameters with TID
    #      10014 Scanning Length, 113831 CT X-Ray Source Parameters, 113829 CT Dose)
    _c("ct_event", "irradiation_event_uid", "113769", "Irradiation Event UID", "UIDREF"),
    _c("ct_event", "event_datetime", "111526", "DateTime Started", "DATETIME"),
    _c("ct_event", "event_type", "113820", "CT Acquisition Type", "CODE"),
    _c("ct_event", "protocol_name", "125203", "Acquisition Protocol", "TEXT"),
    _c("ct_event", "body_part", "123014", "Target Region", "CODE"),
    _c("ct_event", "exposure_time_ms", "113824", "Exposure Time", "NUM", "s", "ms"),
    _c("ct_event", "ct_scan_length_mm", "113825", "Scanning Length", "NUM", "mm", "mm"),
    _c("ct_event", "ct_total_collimation_mm", "113827", "Nominal Total Collimation Width",
       "NUM", "mm", "mm"),
    _c("ct_event", "ct_pitch_factor", "113828", "Pitch Factor", "NUM", "1", "1"),
    _c("ct_event", "kvp_kv", "113733", "KVP", "NUM", "kV", "kV"),
    _c("ct_event", "tube_current_ma", "113734", "X-Ray Tube Current", "NUM", "mA", "mA"),
    _c("ct_event", "ctdivol_mgy", "113830", "Mean CTDIvol", "NUM", "mGy", "mGy"),
    _c("ct_event", "ct_phantom_diameter_cm", "113835", "CTDIw Phantom Type", "CODE"),
    _c("ct_event", "dlp_mgy_cm", "113838", "DLP", "NUM", "mGy.cm", "mGy.cm"),
    _c("ct_event", "ssde_mgy", "113930", "Size Specific Dose Estimate", "NUM", "mGy", "mGy"),
    _c("ct_event", "water_equivalent_diameter_mm", "113980", "Water Equivalent Diameter",
       "NUM", "mm", "mm"),
    # size rows below the SSDE (TID 10013); the method's code tells SSDE from Dw (CID 10023 /
    # CID 10024), whichever item it qualifies
    _c("ct_event", "size_method", "370129005", "Measurement Method", "CODE", scheme="SCT"),
    _c("ct_event", "ct_lateral_dimension_mm", "113931", "Measured Lateral Dimension", "NUM",
       "mm", "mm"),
    _c("ct_event", "ct_ap_dimension_mm", "113932", "Measured AP Dimension", "NUM", "mm", "mm"),
    _c("ct_event", "effective_diameter_mm", "113933", "Derived Effective Diameter", "NUM",
       "mm", "mm"),
    # TID 10014 Scanning Length: where the acquisition lies along the table
    _c("ct_event", "ct_scan_z_top_mm", "113897", "Top Z Location of Scanning Length", "NUM",
       "mm", "mm"),
    _c("ct_event", "ct_scan_z_bottom_mm", "113898", "Bottom Z Location of Scanning Length",
       "NUM", "mm", "mm"),
    _c("ct_event", "frame_of_reference_uid", "112227", "Frame of Reference UID", "UIDREF"),
    # ---- TID 10002 Accumulated X-Ray Dose (+ 10004, 10005, 10006, 10007 flattened in)
    _c("projection_accumulated", "acquisition_plane", "113764", "Acquisition Plane", "CODE"),
    _c("projection_accumulated", "dap_total_gy_cm2", "113722", "Dose Area Product Total",
       "NUM", "Gy.m2", "Gy.cm2"),
    _c("projection_accumulated", "reference_point_air_kerma_total_mgy", "113725",
       "Dose (RP) Total", "NUM", "Gy", "mGy"),
    _c("projection_accumulated", "fluoro_dap_total_gy_cm2", "113726",
       "Fluoro Dose Area Product Total", "NUM", "Gy.m2", "Gy.cm2"),
    _c("projection_accumulated", "fluoro_reference_point_air_kerma_total_mgy", "113728",
       "Fluoro Dose (RP) Total", "NUM", "Gy", "mGy"),
    _c("projection_accumulated", "fluoro_time_total_s", "113730", "Total Fluoro Time",
       "NUM", "s", "s"),
    _c("projection_accumulated", "acquisition_dap_total_gy_cm2", "113727",
       "Acquisition Dose Area Product Total", "NUM", "Gy.m2", "Gy.cm2"),
    _c("projection_accumulated", "acquisition_reference_point_air_kerma_total_mgy", "113729",
       "Acquisition Dose (RP) Total", "NUM", "Gy", "mGy"),
    _c("projection_accumulated", "acquisition_time_total_s", "113855", "Total Acquisition Time",
       "NUM", "s", "s"),
    _c("projection_accumulated", "number_of_radiographic_frames", "113731",
       "Total Number of Radiographic Frames", "NUM", "1", "1"),
    _c("projection_accumulated", "agd_total_mgy", "111637",
       "Accumulated Average Glandular Dose (mammo)", "NUM", "mGy", "mGy"),
    # ---- TID 10012 CT Accumulated Dose Data
    _c("ct_accumulated", "number_of_events", "113812", "Total Number of Irradiation Events",
       "NUM", "1", "1"),
    _c("ct_accumulated", "dlp_total_mgy_cm", "113813", "CT Dose Length Product Total",
       "NUM", "mGy.cm", "mGy.cm"),
)
# fmt: on

_NONNEG = FieldLimit(0.0, None)
_POSITIVE = FieldLimit(0.0, None, low_open=True)
_TECHNIQUE_ZERO = "a recorded 0 means not recorded (CR readers write 0)"  # common practice


def _ceiling(high: float, basis: str) -> FieldLimit:
    """A dose quantity's sanity ceiling: far above any exposure a patient receives, it catches
    a corrupt value or a unit off by orders of magnitude, never a real extreme exam."""
    return FieldLimit(0.0, high, why=f"ceiling: {basis}")


# 1,000 x the substantial radiation dose levels of NCRP Report 168 (2010; values from memory,
# see reference/PUBLISHED-VALUES.md): Ka,r 5,000 mGy, PKA 500 Gy.cm2, peak skin dose 3,000 mGy,
# fluoroscopy time 60 min
_DAP_CEILING = _ceiling(5e5, "1,000 x NCRP 168's 500 Gy·cm² substantial-dose level")
_KAR_CEILING = _ceiling(5e6, "1,000 x NCRP 168's 5 Gy substantial-dose level")
_SKIN_CEILING = _ceiling(3e6, "1,000 x NCRP 168's 3 Gy peak-skin-dose level")
_TIME_CEILING = _ceiling(3.6e6, "1,000 x NCRP 168's 60 min fluoroscopy level")
# CT has no NCRP 168 level: 1,000 Gy CTDIvol is a thousand times the highest CTDIvol any
# protocol reaches (brain perfusion, about 1 Gy: common practice); DLP allows 100 cm of it
_CTDI_CEILING = _ceiling(1e6, "1,000 Gy (a thousand times a brain-perfusion CTDIvol)")
_DLP_CEILING = _ceiling(1e8, "1,000 Gy over 100 cm")

FIELD_LIMITS: dict[str, FieldLimit] = {
    # the project's physical range for diagnostic x-ray tubes (ARCHITECTURE "Bad input")
    "kvp_kv": FieldLimit(20.0, 150.0, zero_means_absent=True, why=_TECHNIQUE_ZERO),
    "tube_current_ma": FieldLimit(0.0, None, zero_means_absent=True, why=_TECHNIQUE_ZERO),
    "exposure_time_ms": FieldLimit(0.0, None, zero_means_absent=True, why=_TECHNIQUE_ZERO),
    "exposure_mas": FieldLimit(0.0, None, zero_means_absent=True, why=_TECHNIQUE_ZERO),
    "focal_spot_mm": FieldLimit(0.0, None, low_open=True, zero_means_absent=True),
    "sid_mm": _POSITIVE,
    "source_to_patient_mm": _POSITIVE,
    "source_to_entrance_mm": _POSITIVE,
    "source_to_isocenter_mm": _POSITIVE,
    "source_to_table_mm": _POSITIVE,
    "source_to_reference_point_mm": _POSITIVE,
    "body_part_thickness_mm": FieldLimit(0.0, None, low_open=True, zero_means_absent=True),
    "magnification_factor": _POSITIVE,
    "field_width_mm": _POSITIVE,
    "field_height_mm": _POSITIVE,
    "field_area_cm2": _POSITIVE,
    "dap_gy_cm2": _DAP_CEILING,
    "entrance_dose_mgy": _SKIN_CEILING,
    "reference_point_air_kerma_mgy": _KAR_CEILING,
    "organ_dose_mgy": _SKIN_CEILING,
    "hvl_mm_al": _POSITIVE,
    "xray_output_mgy_per_mas": _POSITIVE,
    "ctdivol_mgy": _CTDI_CEILING,
    "dlp_mgy_cm": _DLP_CEILING,
    "ssde_mgy": _CTDI_CEILING,
    "water_equivalent_diameter_mm": _POSITIVE,
    "ct_lateral_dimension_mm": _POSITIVE,
    "ct_ap_dimension_mm": _POSITIVE,
    "effective_diameter_mm": _POSITIVE,
    "ct_scan_length_mm": _NONNEG,
    "ct_pitch_factor": _POSITIVE,
    "ct_total_collimation_mm": _POSITIVE,
    "exposure_index": _NONNEG,
    "target_exposure_index": _NONNEG,
    "pulse_rate_per_s": _NONNEG,
    "number_of_pulses": _NONNEG,
    "irradiation_duration_s": _TIME_CEILING,
    "thickness_min_mm": _NONNEG,
    "thickness_max_mm": _NONNEG,
    "dap_total_gy_cm2": _DAP_CEILING,
    "fluoro_dap_total_gy_cm2": _DAP_CEILING,
    "acquisition_dap_total_gy_cm2": _DAP_CEILING,
    "reference_point_air_kerma_total_mgy": _KAR_CEILING,
    "fluoro_reference_point_air_kerma_total_mgy": _KAR_CEILING,
    "acquisition_reference_point_air_kerma_total_mgy": _KAR_CEILING,
    "fluoro_time_total_s": _TIME_CEILING,
    "acquisition_time_total_s": _TIME_CEILING,
    "number_of_radiographic_frames": _NONNEG,
    "number_of_events": _NONNEG,
    "dlp_total_mgy_cm": _DLP_CEILING,
    "agd_total_mgy": _SKIN_CEILING,
    # fluoroscopy geometry for skin-dose maps: a value outside its range is dropped with a
    # warning (the event's dose stays); angles as PS3.3 C.8.7.5 states them (primary -180 to
    # +180, secondary -90 to +90; from memory), with room for devices that count 0-360
    **dict.fromkeys(
        (
            "positioner_primary_angle_deg",
            "positioner_primary_end_angle_deg",
            "positioner_secondary_angle_deg",
            "positioner_secondary_end_angle_deg",
            "column_angulation_deg",
            "table_horizontal_rotation_angle_deg",
        ),
        FieldLimit(-360.0, 360.0, action="drop", why="an angle in degrees"),
    ),
    **dict.fromkeys(
        ("table_head_tilt_angle_deg", "table_cradle_tilt_angle_deg"),
        FieldLimit(-90.0, 90.0, action="drop", why="a table tilt in degrees"),
    ),
    **dict.fromkeys(
        (
            "table_longitudinal_position_mm",
            "table_lateral_position_mm",
            "table_height_position_mm",
            "table_longitudinal_end_position_mm",
            "table_lateral_end_position_mm",
            "table_height_end_position_mm",
        ),
        FieldLimit(-1e5, 1e5, action="drop", why="a table travel within 100 m"),
    ),
    "pulse_width_ms": FieldLimit(0.0, 1000.0, low_open=True, zero_means_absent=True, action="drop"),
    "agd_left_mgy": _SKIN_CEILING,
    "agd_right_mgy": _SKIN_CEILING,
    # mammography compression and the tube's sweep: context, not dose, so a wrong value is
    # dropped with a warning. 1,000 N is five times the 200 N (45 lb) at which MQSA caps a
    # powered paddle (21 CFR 900.12(e); from memory)
    "compression_force_n": FieldLimit(
        0.0,
        1000.0,
        zero_means_absent=True,
        action="drop",
        why="ceiling: 1,000 N, five times MQSA's powered maximum",
    ),
    "compression_pressure_kpa": FieldLimit(0.0, None, action="drop"),
    "compression_contact_area_mm2": FieldLimit(0.0, None, action="drop"),
    "tomo_scan_arc_deg": FieldLimit(0.0, 360.0, action="drop"),
    # demographics: dropped with a warning, never rejecting the exposures
    "patient_weight_kg": FieldLimit(
        0.0,
        500.0,
        low_open=True,
        zero_means_absent=True,
        action="drop",
        why="PatientWeight 0 is written when the weight is unknown",
    ),
    "patient_height_m": FieldLimit(
        0.0,
        3.0,
        low_open=True,
        zero_means_absent=True,
        action="drop",
        why="PatientSize is in metres; values in cm are refused, not rescaled",
    ),
    "patient_age_years": FieldLimit(0.0, 150.0, action="drop"),
}


@cache
def header_rows() -> tuple[FieldMapping, ...]:
    """The header rows of :data:`MAPPING`."""
    return tuple(r for r in MAPPING if r.source == "header")


@cache
def header_rows_by_field() -> dict[str, tuple[FieldMapping, ...]]:
    """Header rows grouped by field, each group in precedence order."""
    out: dict[str, list[FieldMapping]] = {}
    for row in header_rows():
        out.setdefault(row.field, []).append(row)
    return {k: tuple(sorted(v, key=lambda r: r.rank)) for k, v in out.items()}


@cache
def concept_rows(context: SrContext) -> dict[tuple[str, str], FieldMapping]:
    """SR rows of one template context keyed by canonical concept code."""
    out: dict[tuple[str, str], FieldMapping] = {}
    for row in MAPPING:
        if row.source == "sr" and row.context == context:
            assert row.code is not None
            out[row.code] = row
    return out


def intent_clue_row(clue: str) -> FieldMapping | None:
    """The row of :data:`MAPPING` that read a ``mammography_intent`` clue (the field's provenance:
    ``"(0008,1032) ProcedureCodeSequence (MGS2, 99LOCAL) Screening mammography"``), or None.

    The clue starts with its row's tag or concept code (``"(0008,1032)"``, ``"(363703001,
    SCT)"``), which is unique among the rows of the field."""
    head = clue.split(")", 1)[0] + ")"
    for row in MAPPING:
        if row.field == "mammography_intent" and row.label.startswith(head):
            return row
    return None
