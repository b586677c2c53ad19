"""Synthetic Radiation Dose SRs for the ingest tests, built with beamaudit.ingest.sr_build.

Every report here is invented test data following the PS3.16 templates
(TID 10001 with TID 10002 / 10003 / 10003A-C and X-Ray Filters containers;
TID 10011 with TID 10012 / 10013 / 10014). Concept codes are checked against
pydicom's PS3.16 code dictionary in test_rdsr.py; values were chosen so that
each unit conversion is visible (DAP in Gy·m², Exposure in µA·s, CT exposure
time in s). No real file with a dose report ships in any installed package
(DICOM-NOTES section 4), so these are the fixtures.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from datetime import UTC, datetime

from pydicom.dataset import Dataset
from pydicom.uid import generate_uid

from beamaudit.ingest.sr_build import (
    Concept,
    build_sr_document,
    code_item,
    container,
    datetime_item,
    num,
    text,
    uidref,
)

# ---- concepts (PS3.16; DICOM-NOTES section 2) ----
REPORT: Concept = ("113701", "DCM", "X-Ray Radiation Dose Report")
PROCEDURE_REPORTED: Concept = ("121058", "DCM", "Procedure reported")
PROJECTION_XRAY: Concept = ("113704", "DCM", "Projection X-Ray")
CT_XRAY: Concept = ("77477000", "SCT", "Computed Tomography X-Ray")
CT_XRAY_SRT: Concept = ("P5-08000", "SRT", "Computed Tomography X-Ray")
MAMMOGRAPHY: Concept = ("71651007", "SCT", "Mammography")
HAS_INTENT: Concept = ("363703001", "SCT", "Has Intent")
DIAGNOSTIC_INTENT: Concept = ("261004008", "SCT", "Diagnostic Intent")
SCREENING_INTENT: Concept = ("360156006", "SCT", "Screening Intent")  # CID 3629
DEVICE_TYPE: Concept = ("122142", "DCM", "Acquisition Device Type")
FLUORO_GUIDED: Concept = ("113957", "DCM", "Fluoroscopy-Guided Projection Radiography System")
INTEGRATED: Concept = ("113958", "DCM", "Integrated Projection Radiography System")
OBSERVER_TYPE: Concept = ("121005", "DCM", "Observer Type")
DEVICE: Concept = ("121007", "DCM", "Device")
DEVICE_OBSERVER_UID: Concept = ("121012", "DCM", "Device Observer UID")
DEVICE_OBSERVER_NAME: Concept = ("121013", "DCM", "Device Observer Name")
SCOPE: Concept = ("113705", "DCM", "Scope of Accumulation")
STUDY: Concept = ("113014", "DCM", "Study")
STUDY_UID: Concept = ("110180", "DCM", "Study Instance UID")
ACCUMULATED: Concept = ("113702", "DCM", "Accumulated X-Ray Dose Data")
PLANE: Concept = ("113764", "DCM", "Acquisition Plane")
SINGLE_PLANE: Concept = ("113622", "DCM", "Single Plane")
DAP_TOTAL: Concept = ("113722", "DCM", "Dose Area Product Total")
RP_TOTAL: Concept = ("113725", "DCM", "Dose (RP) Total")
FLUORO_DAP_TOTAL: Concept = ("113726", "DCM", "Fluoro Dose Area Product Total")
FLUORO_RP_TOTAL: Concept = ("113728", "DCM", "Fluoro Dose (RP) Total")
FLUORO_TIME_TOTAL: Concept = ("113730", "DCM", "Total Fluoro Time")
ACQ_DAP_TOTAL: Concept = ("113727", "DCM", "Acquisition Dose Area Product Total")
ACQ_RP_TOTAL: Concept = ("113729", "DCM", "Acquisition Dose (RP) Total")
ACQ_TIME_TOTAL: Concept = ("113855", "DCM", "Total Acquisition Time")
FRAMES_TOTAL: Concept = ("113731", "DCM", "Total Number of Radiographic Frames")
SOURCE_OF_DOSE: Concept = ("113854", "DCM", "Source of Dose Information")
AUTOMATED: Concept = ("113856", "DCM", "Automated Data Collection")
EVENT: Concept = ("113706", "DCM", "Irradiation Event X-Ray Data")
EVENT_UID: Concept = ("113769", "DCM", "Irradiation Event UID")
STARTED: Concept = ("111526", "DCM", "DateTime Started")
EVENT_TYPE: Concept = ("113721", "DCM", "Irradiation Event Type")
FLUOROSCOPY: Concept = ("44491008", "SCT", "Fluoroscopy")
FLUOROSCOPY_SRT: Concept = ("P5-06000", "SRT", "Fluoroscopy")
STATIONARY: Concept = ("113611", "DCM", "Stationary Acquisition")
PROTOCOL: Concept = ("125203", "DCM", "Acquisition Protocol")
TARGET_REGION: Concept = ("123014", "DCM", "Target Region")
CHEST: Concept = ("51185008", "SCT", "Chest")
ABDOMEN: Concept = ("818981001", "SCT", "Abdomen")
DAP: Concept = ("122130", "DCM", "Dose Area Product")
DOSE_RP: Concept = ("113738", "DCM", "Dose (RP)")
REFERENCE_POINT_DEFINITION: Concept = ("113780", "DCM", "Reference Point Definition")
RP_15CM: Concept = ("113860", "DCM", "15cm from Isocenter toward Source")
FLUORO_MODE: Concept = ("113732", "DCM", "Fluoro Mode")
PULSED: Concept = ("113631", "DCM", "Pulsed")
PULSE_RATE: Concept = ("113791", "DCM", "Pulse Rate")
NUMBER_OF_PULSES: Concept = ("113768", "DCM", "Number of Pulses")
IRRADIATION_DURATION: Concept = ("113742", "DCM", "Irradiation Duration")
KVP: Concept = ("113733", "DCM", "KVP")
TUBE_CURRENT: Concept = ("113734", "DCM", "X-Ray Tube Current")
AVERAGE_TUBE_CURRENT: Concept = ("113767", "DCM", "Average X-Ray Tube Current")
EXPOSURE_TIME: Concept = ("113824", "DCM", "Exposure Time")
EXPOSURE: Concept = ("113736", "DCM", "Exposure")
FOCAL_SPOT: Concept = ("113766", "DCM", "Focal Spot Size")
ANODE: Concept = ("111632", "DCM", "Anode Target Material")
TUNGSTEN: Concept = ("26194003", "SCT", "Tungsten")
TUNGSTEN_SRT: Concept = ("C-16400", "SRT", "Tungsten")
FILTERS: Concept = ("113771", "DCM", "X-Ray Filters")
FILTER_TYPE: Concept = ("113772", "DCM", "X-Ray Filter Type")
FLAT_FILTER: Concept = ("113653", "DCM", "Flat filter")
FILTER_MATERIAL: Concept = ("113757", "DCM", "X-Ray Filter Material")
COPPER: Concept = ("66925006", "SCT", "Copper")
COPPER_SRT: Concept = ("C-12700", "SRT", "Copper")
ALUMINUM: Concept = ("12503006", "SCT", "Aluminum")
FILTER_MIN: Concept = ("113758", "DCM", "X-Ray Filter Thickness Minimum")
FILTER_MAX: Concept = ("113773", "DCM", "X-Ray Filter Thickness Maximum")
GRID: Concept = ("111635", "DCM", "X-Ray Grid")
FOCUSED_GRID: Concept = ("111642", "DCM", "Focused grid")
FIELD_AREA: Concept = ("113790", "DCM", "Collimated Field Area")
SID: Concept = ("113750", "DCM", "Distance Source to Detector")
SOURCE_TO_ISOCENTER: Concept = ("113748", "DCM", "Distance Source to Isocenter")
# TID 10003 / 10003B / 10003C geometry for skin-dose maps
PULSE_WIDTH: Concept = ("113793", "DCM", "Pulse Width")
PRIMARY_ANGLE: Concept = ("112011", "DCM", "Positioner Primary Angle")
SECONDARY_ANGLE: Concept = ("112012", "DCM", "Positioner Secondary Angle")
PRIMARY_END_ANGLE: Concept = ("113739", "DCM", "Positioner Primary End Angle")
SECONDARY_END_ANGLE: Concept = ("113740", "DCM", "Positioner Secondary End Angle")
TABLE_HEAD_TILT: Concept = ("113754", "DCM", "Table Head Tilt Angle")
TABLE_HORIZONTAL_ROTATION: Concept = ("113755", "DCM", "Table Horizontal Rotation Angle")
TABLE_CRADLE_TILT: Concept = ("113756", "DCM", "Table Cradle Tilt Angle")
TABLE_LONGITUDINAL: Concept = ("113751", "DCM", "Table Longitudinal Position")
TABLE_LATERAL: Concept = ("113752", "DCM", "Table Lateral Position")
TABLE_HEIGHT: Concept = ("113753", "DCM", "Table Height Position")
TABLE_LONGITUDINAL_END: Concept = ("113759", "DCM", "Table Longitudinal End Position")
SOURCE_TO_REFERENCE_POINT: Concept = ("113737", "DCM", "Distance Source to Reference Point")
SOURCE_TO_TABLE: Concept = ("113792", "DCM", "Distance Source to Table Plane")
FIELD_HEIGHT: Concept = ("113788", "DCM", "Collimated Field Height")
FIELD_WIDTH: Concept = ("113789", "DCM", "Collimated Field Width")
ROTATIONAL: Concept = ("113613", "DCM", "Rotational Acquisition")
PATIENT_TABLE_RELATIONSHIP: Concept = ("113745", "DCM", "Patient Table Relationship")
HEADFIRST: Concept = ("102540008", "SCT", "headfirst")
FEETFIRST_SRT: Concept = ("F-10480", "SRT", "feet-first")
PATIENT_ORIENTATION: Concept = ("113743", "DCM", "Patient Orientation")
RECUMBENT: Concept = ("102538003", "SCT", "recumbent")
PATIENT_ORIENTATION_MODIFIER: Concept = ("113744", "DCM", "Patient Orientation Modifier")
SUPINE: Concept = ("40199007", "SCT", "supine")
PRONE: Concept = ("1240000", "SCT", "prone")
EXPOSURE_INDEX: Concept = ("113845", "DCM", "Exposure Index")
TARGET_EXPOSURE_INDEX: Concept = ("113846", "DCM", "Target Exposure Index")
DEVIATION_INDEX: Concept = ("113847", "DCM", "Deviation Index")
# CT
CT_ACCUMULATED: Concept = ("113811", "DCM", "CT Accumulated Dose Data")
TOTAL_EVENTS: Concept = ("113812", "DCM", "Total Number of Irradiation Events")
DLP_TOTAL: Concept = ("113813", "DCM", "CT Dose Length Product Total")
CT_ACQUISITION: Concept = ("113819", "DCM", "CT Acquisition")
CT_ACQUISITION_TYPE: Concept = ("113820", "DCM", "CT Acquisition Type")
SPIRAL: Concept = ("116152004", "SCT", "Spiral Acquisition")
SPIRAL_SRT: Concept = ("P5-08001", "SRT", "Spiral Acquisition")
CONSTANT_ANGLE: Concept = ("113805", "DCM", "Constant Angle Acquisition")
CT_PARAMETERS: Concept = ("113822", "DCM", "CT Acquisition Parameters")
SCANNING_LENGTH: Concept = ("113825", "DCM", "Scanning Length")
SINGLE_COLLIMATION: Concept = ("113826", "DCM", "Nominal Single Collimation Width")
TOTAL_COLLIMATION: Concept = ("113827", "DCM", "Nominal Total Collimation Width")
PITCH: Concept = ("113828", "DCM", "Pitch Factor")
NUMBER_OF_SOURCES: Concept = ("113823", "DCM", "Number of X-Ray Sources")
CT_SOURCE: Concept = ("113831", "DCM", "CT X-Ray Source Parameters")
SOURCE_ID: Concept = ("113832", "DCM", "Identification of the X-Ray Source")
MAX_TUBE_CURRENT: Concept = ("113833", "DCM", "Maximum X-Ray Tube Current")
ROTATION_TIME: Concept = ("113834", "DCM", "Exposure Time per Rotation")
CT_DOSE: Concept = ("113829", "DCM", "CT Dose")
MEAN_CTDIVOL: Concept = ("113830", "DCM", "Mean CTDIvol")
PHANTOM_TYPE: Concept = ("113835", "DCM", "CTDIw Phantom Type")
BODY_PHANTOM: Concept = ("113691", "DCM", "IEC Body Dosimetry Phantom")
HEAD_PHANTOM: Concept = ("113690", "DCM", "IEC Head Dosimetry Phantom")
DLP: Concept = ("113838", "DCM", "DLP")
EFFECTIVE_DOSE: Concept = ("113839", "DCM", "Effective Dose")
SSDE: Concept = ("113930", "DCM", "Size Specific Dose Estimate")
MEASUREMENT_METHOD: Concept = ("370129005", "SCT", "Measurement Method")
FROM_DW: Concept = ("113988", "DCM", "Estimated from Water Equivalent Diameter")
AAPM204_LAT: Concept = ("113934", "DCM", "AAPM 204 Lateral Dimension")
WATER_EQUIVALENT_DIAMETER: Concept = ("113980", "DCM", "Water Equivalent Diameter")
DW_FROM_LOCALIZER: Concept = ("113984", "DCM", "Water Equivalent Diameter From Localizer")
LATERAL_DIMENSION: Concept = ("113931", "DCM", "Measured Lateral Dimension")
AP_DIMENSION: Concept = ("113932", "DCM", "Measured AP Dimension")
EFFECTIVE_DIAMETER: Concept = ("113933", "DCM", "Derived Effective Diameter")
Z_TOP: Concept = ("113897", "DCM", "Top Z Location of Scanning Length")
Z_BOTTOM: Concept = ("113898", "DCM", "Bottom Z Location of Scanning Length")
FRAME_OF_REFERENCE: Concept = ("112227", "DCM", "Frame of Reference UID")

# mammography (TID 10003 mammography rows, TID 10005)
ROTATIONAL: Concept = ("113613", "DCM", "Rotational Acquisition")
BREAST: Concept = ("76752008", "SCT", "Breast")
LATERALITY: Concept = ("272741003", "SCT", "Laterality")
LATERALITY_SRT: Concept = ("G-C171", "SRT", "Laterality")
LEFT: Concept = ("7771000", "SCT", "Left")
RIGHT: Concept = ("24028007", "SCT", "Right")
LEFT_SRT: Concept = ("G-A101", "SRT", "Left")
LEFT_BREAST: Concept = ("80248007", "SCT", "Left breast")
RIGHT_BREAST: Concept = ("73056007", "SCT", "Right breast")
LEFT_BREAST_SRT: Concept = ("T-04030", "SRT", "Left breast")
IMAGE_VIEW: Concept = ("111031", "DCM", "Image View")
IMAGE_VIEW_MODIFIER: Concept = ("111032", "DCM", "Image View Modifier")
# CID 4015 View Modifier for Mammography (pydicom 3.0.2's PS3.16 CID dictionary)
SPOT_COMPRESSION: Concept = ("399055006", "SCT", "Spot Compression")
IMPLANT_DISPLACED: Concept = ("399209000", "SCT", "Implant Displaced")
CRANIO_CAUDAL: Concept = ("399162004", "SCT", "cranio-caudal")
MEDIO_LATERAL_OBLIQUE: Concept = ("399368009", "SCT", "medio-lateral oblique")
COMPRESSION_THICKNESS: Concept = ("111633", "DCM", "Compression Thickness")
COMPRESSION_FORCE: Concept = ("111647", "DCM", "Compression Force")
ENTRANCE_AT_RP: Concept = ("111636", "DCM", "Entrance Exposure at RP")
AGD: Concept = ("111631", "DCM", "Average Glandular Dose")
ACCUMULATED_AGD: Concept = ("111637", "DCM", "Accumulated Average Glandular Dose")
HVL: Concept = ("111634", "DCM", "Half Value Layer")
RHODIUM: Concept = ("59801003", "SCT", "Rhodium")

START = datetime(2024, 3, 5, 10, 15, 0, tzinfo=UTC)


def _document_context(
    procedure: Concept,
    study_uid: str,
    observer_uid: str,
    device_type: Concept | None,
    intent: Concept = DIAGNOSTIC_INTENT,
) -> list[Dataset]:
    items = [
        code_item(
            PROCEDURE_REPORTED, procedure, relationship="HAS CONCEPT MOD",
            children=[code_item(HAS_INTENT, intent, relationship="HAS CONCEPT MOD")],
        ),
    ]  # fmt: skip
    if device_type is not None:
        items.append(code_item(DEVICE_TYPE, device_type))
    items += [
        code_item(OBSERVER_TYPE, DEVICE, relationship="HAS OBS CONTEXT"),
        uidref(DEVICE_OBSERVER_UID, observer_uid, relationship="HAS OBS CONTEXT"),
        text(DEVICE_OBSERVER_NAME, "FLUORO-ROOM-2", relationship="HAS OBS CONTEXT"),
        code_item(
            SCOPE, STUDY, relationship="HAS OBS CONTEXT",
            children=[uidref(STUDY_UID, study_uid, relationship="HAS PROPERTIES")],
        ),
    ]  # fmt: skip
    return items


@dataclass
class FluoroEvent:
    """One projection event of a synthetic report (values in the report's units)."""

    uid: str = field(default_factory=generate_uid)
    fluoroscopy: bool = True
    kvp_kv: float = 78.0
    dap_gy_m2: float = 2.5e-4
    dose_rp_gy: float = 0.012
    exposure_uas: float | None = None
    exposure_time_ms: float | None = None
    tube_current_ma: float = 11.5
    pulses: int = 450
    pulse_rate: float = 15.0
    duration_s: float = 30.0
    copper_mm: float = 0.3
    aluminium_mm: float = 1.0
    protocol: str = "Abdomen fluoro"
    srt_codes: bool = False
    field_area_m2: float = 0.04
    rotational: bool = False  # an acquisition (fluoroscopy False) of type Rotational
    source_to_isocenter_mm: float = 810.0
    sid_mm: float = 1150.0
    # TID 10003C mechanical data and the patient's position; None leaves the item out
    geometry: EventGeometry | None = None


@dataclass
class EventGeometry:
    """Where the beam and the patient were during one synthetic event (report units)."""

    primary_angle_deg: float = 0.0
    secondary_angle_deg: float = 0.0
    primary_end_angle_deg: float | None = None
    secondary_end_angle_deg: float | None = None
    table_longitudinal_mm: float = 412.0
    table_lateral_mm: float = -3.5
    table_height_mm: float = 185.0
    table_longitudinal_end_mm: float | None = None
    table_head_tilt_deg: float | None = None
    table_cradle_tilt_deg: float | None = None
    table_horizontal_rotation_deg: float | None = None
    source_to_reference_point_mm: float | None = None
    source_to_table_mm: float | None = None
    field_height_mm: float | None = 160.0
    field_width_mm: float | None = 160.0
    pulse_width_ms: float | None = 6.5
    prone: bool = False
    feet_first_srt: bool = False
    reference_point_text: str | None = None  # TID 10003B row 2 (TEXT) instead of the code


def _geometry_items(geo: EventGeometry) -> list[Dataset]:
    """TID 10003 patient-position rows and TID 10003C mechanical rows of one event."""
    items: list[Dataset] = [
        code_item(PATIENT_TABLE_RELATIONSHIP, FEETFIRST_SRT if geo.feet_first_srt else HEADFIRST),
        code_item(PATIENT_ORIENTATION, RECUMBENT, children=[
            code_item(PATIENT_ORIENTATION_MODIFIER, PRONE if geo.prone else SUPINE,
                      relationship="HAS CONCEPT MOD"),
        ]),
        num(PRIMARY_ANGLE, geo.primary_angle_deg, "deg"),
        num(SECONDARY_ANGLE, geo.secondary_angle_deg, "deg"),
        num(TABLE_LONGITUDINAL, geo.table_longitudinal_mm, "mm"),
        num(TABLE_LATERAL, geo.table_lateral_mm, "mm"),
        num(TABLE_HEIGHT, geo.table_height_mm, "mm"),
    ]  # fmt: skip
    optional = (
        (PRIMARY_END_ANGLE, geo.primary_end_angle_deg, "deg"),
        (SECONDARY_END_ANGLE, geo.secondary_end_angle_deg, "deg"),
        (TABLE_LONGITUDINAL_END, geo.table_longitudinal_end_mm, "mm"),
        (TABLE_HEAD_TILT, geo.table_head_tilt_deg, "deg"),
        (TABLE_CRADLE_TILT, geo.table_cradle_tilt_deg, "deg"),
        (TABLE_HORIZONTAL_ROTATION, geo.table_horizontal_rotation_deg, "deg"),
        (SOURCE_TO_REFERENCE_POINT, geo.source_to_reference_point_mm, "mm"),
        (SOURCE_TO_TABLE, geo.source_to_table_mm, "mm"),
        (FIELD_HEIGHT, geo.field_height_mm, "mm"),
        (FIELD_WIDTH, geo.field_width_mm, "mm"),
        (PULSE_WIDTH, geo.pulse_width_ms, "ms"),
    )
    items += [num(concept, value, unit) for concept, value, unit in optional if value is not None]
    return items


def _projection_event(index: int, ev: FluoroEvent) -> Dataset:
    items: list[Dataset] = [
        code_item(PLANE, SINGLE_PLANE, relationship="HAS CONCEPT MOD"),
        uidref(EVENT_UID, ev.uid),
        datetime_item(STARTED, START.replace(minute=15 + index)),
        code_item(
            EVENT_TYPE,
            (FLUOROSCOPY_SRT if ev.srt_codes else FLUOROSCOPY)
            if ev.fluoroscopy
            else (ROTATIONAL if ev.rotational else STATIONARY),
        ),
        text(PROTOCOL, ev.protocol),
        code_item(TARGET_REGION, ABDOMEN),
        num(DAP, ev.dap_gy_m2, "Gy.m2"),
        # TID 10003B source data
        num(DOSE_RP, ev.dose_rp_gy, "Gy"),
        (
            text(REFERENCE_POINT_DEFINITION, ev.geometry.reference_point_text)
            if ev.geometry is not None and ev.geometry.reference_point_text is not None
            else code_item(REFERENCE_POINT_DEFINITION, RP_15CM)
        ),
    ]
    if ev.fluoroscopy:
        items += [
            code_item(FLUORO_MODE, PULSED),
            num(PULSE_RATE, ev.pulse_rate, "{pulse}/s"),
            num(NUMBER_OF_PULSES, ev.pulses, "1"),
            num(IRRADIATION_DURATION, ev.duration_s, "s"),
            num(AVERAGE_TUBE_CURRENT, ev.tube_current_ma, "mA"),
        ]
    else:
        items.append(num(TUBE_CURRENT, ev.tube_current_ma, "mA"))
    items.append(num(KVP, ev.kvp_kv, "kV"))
    if ev.exposure_time_ms is not None:
        items.append(num(EXPOSURE_TIME, ev.exposure_time_ms, "ms"))
    if ev.exposure_uas is not None:
        items.append(num(EXPOSURE, ev.exposure_uas, "uA.s"))
    items += [
        num(FOCAL_SPOT, 0.6, "mm"),
        code_item(ANODE, TUNGSTEN_SRT if ev.srt_codes else TUNGSTEN),
        container(FILTERS, [
            code_item(FILTER_TYPE, FLAT_FILTER),
            code_item(FILTER_MATERIAL, COPPER_SRT if ev.srt_codes else COPPER),
            num(FILTER_MIN, ev.copper_mm, "mm"),
            num(FILTER_MAX, ev.copper_mm, "mm"),
        ]),
        container(FILTERS, [
            code_item(FILTER_TYPE, FLAT_FILTER),
            code_item(FILTER_MATERIAL, ALUMINUM),
            num(FILTER_MIN, ev.aluminium_mm, "mm"),
            num(FILTER_MAX, ev.aluminium_mm, "mm"),
        ]),
        code_item(GRID, FOCUSED_GRID),
        num(FIELD_AREA, ev.field_area_m2, "m2"),
        # TID 10003C mechanical data
        num(SOURCE_TO_ISOCENTER, ev.source_to_isocenter_mm, "mm"),
        num(SID, ev.sid_mm, "mm"),
    ]  # fmt: skip
    if ev.geometry is not None:
        items += _geometry_items(ev.geometry)
    return container(EVENT, items)


def fluoroscopy_report(
    events: list[FluoroEvent] | None = None,
    *,
    study_uid: str | None = None,
    srt_codes: bool = False,
    **document: object,
) -> Dataset:
    """A TID 10001 report of a fluoroscopy-guided procedure: an accumulation and
    several events (default: two fluoroscopy runs and one stationary acquisition)."""
    study_uid = study_uid or generate_uid()
    if events is None:
        events = [
            FluoroEvent(srt_codes=srt_codes),
            FluoroEvent(kvp_kv=82.0, dap_gy_m2=4.0e-4, dose_rp_gy=0.02, pulses=300,
                        duration_s=20.0, srt_codes=srt_codes),
            FluoroEvent(fluoroscopy=False, kvp_kv=75.0, dap_gy_m2=1.5e-4, dose_rp_gy=0.008,
                        exposure_uas=32000.0, exposure_time_ms=80.0, tube_current_ma=400.0,
                        protocol="Abdomen acquisition", srt_codes=srt_codes),
        ]  # fmt: skip
    fluoro = [e for e in events if e.fluoroscopy]
    acq = [e for e in events if not e.fluoroscopy]
    accumulated = container(ACCUMULATED, [
        code_item(PLANE, SINGLE_PLANE, relationship="HAS CONCEPT MOD"),
        num(FLUORO_DAP_TOTAL, sum(e.dap_gy_m2 for e in fluoro), "Gy.m2"),
        num(FLUORO_RP_TOTAL, sum(e.dose_rp_gy for e in fluoro), "Gy"),
        num(FLUORO_TIME_TOTAL, sum(e.duration_s for e in fluoro), "s"),
        num(ACQ_DAP_TOTAL, sum(e.dap_gy_m2 for e in acq), "Gy.m2"),
        num(ACQ_RP_TOTAL, sum(e.dose_rp_gy for e in acq), "Gy"),
        num(ACQ_TIME_TOTAL, sum((e.exposure_time_ms or 0.0) for e in acq) / 1000.0, "s"),
        num(FRAMES_TOTAL, len(acq), "1"),
        num(DAP_TOTAL, sum(e.dap_gy_m2 for e in events), "Gy.m2"),
        num(RP_TOTAL, sum(e.dose_rp_gy for e in events), "Gy"),
    ])  # fmt: skip
    root = container(
        REPORT,
        [
            *_document_context(
                PROJECTION_XRAY, study_uid, "1.2.826.0.1.3680043.10.1.7", FLUORO_GUIDED
            ),
            accumulated,
            *[_projection_event(i, e) for i, e in enumerate(events)],
            code_item(SOURCE_OF_DOSE, AUTOMATED),
        ],
        relationship=None,
    )
    return build_sr_document(root, study_instance_uid=study_uid, **document)


def radiography_report(*, study_uid: str | None = None, event_uid: str | None = None,
                       kvp_kv: float = 125.0, **document: object) -> Dataset:  # fmt: skip
    """A TID 10001 report of one chest radiograph with exposure index data (TID 10003A)."""
    study_uid = study_uid or generate_uid()
    event = container(EVENT, [
        code_item(PLANE, SINGLE_PLANE, relationship="HAS CONCEPT MOD"),
        uidref(EVENT_UID, event_uid or generate_uid()),
        datetime_item(STARTED, START),
        code_item(EVENT_TYPE, STATIONARY),
        text(PROTOCOL, "Chest PA"),
        code_item(TARGET_REGION, CHEST),
        num(DAP, 1.1e-5, "Gy.m2"),
        num(EXPOSURE_INDEX, 250.0, "1"),
        num(TARGET_EXPOSURE_INDEX, 400.0, "1"),
        num(DEVIATION_INDEX, -2.0, "1"),
        num(KVP, kvp_kv, "kV"),
        num(EXPOSURE, 2500.0, "uA.s"),
        num(EXPOSURE_TIME, 6.0, "ms"),
        num(SID, 1800.0, "mm"),
    ])  # fmt: skip
    accumulated = container(ACCUMULATED, [
        code_item(PLANE, SINGLE_PLANE, relationship="HAS CONCEPT MOD"),
        num(DAP_TOTAL, 1.1e-5, "Gy.m2"),
        num(FRAMES_TOTAL, 1, "1"),
    ])  # fmt: skip
    root = container(
        REPORT,
        [*_document_context(PROJECTION_XRAY, study_uid, "1.2.826.0.1.3680043.10.1.8", INTEGRATED),
         accumulated, event, code_item(SOURCE_OF_DOSE, AUTOMATED)],
        relationship=None,
    )  # fmt: skip
    return build_sr_document(root, study_instance_uid=study_uid, **document)


@dataclass
class CtEvent:
    """One CT acquisition of a synthetic report."""

    uid: str = field(default_factory=generate_uid)
    localizer: bool = False
    kvp_kv: float = 120.0
    tube_current_ma: float = 210.0
    exposure_time_s: float = 7.5
    scanning_length_mm: float = 420.0
    pitch: float = 0.984
    ctdivol_mgy: float = 12.4
    dlp_mgy_cm: float = 560.5
    head_phantom: bool = False
    protocol: str = "Chest-abdomen-pelvis"
    # the scanner's size-specific dose estimate (TID 10013), written when ssde_mgy is set
    ssde_mgy: float | None = None
    ssde_method: Concept = FROM_DW
    dw_mm: float | None = None
    dw_method: Concept = DW_FROM_LOCALIZER
    lateral_mm: float | None = None
    ap_mm: float | None = None
    effective_diameter_mm: float | None = None
    # TID 10014 scan range in patient coordinates, written when set
    z_top_bottom_mm: tuple[float, float] | None = None
    frame_of_reference_uid: str | None = None


def _size_items(ev: CtEvent) -> list[Dataset]:
    """TID 10013's effective dose (with a measurement method that is no size method) and its
    size-specific dose estimate, its method and the sizes it used."""
    if ev.ssde_mgy is None:
        return []
    method = code_item(MEASUREMENT_METHOD, ev.ssde_method, relationship="HAS CONCEPT MOD")
    sizes = [method]
    for concept, value in ((LATERAL_DIMENSION, ev.lateral_mm), (AP_DIMENSION, ev.ap_mm),
                           (EFFECTIVE_DIAMETER, ev.effective_diameter_mm)):  # fmt: skip
        if value is not None:
            sizes.append(num(concept, value, "mm", relationship="HAS PROPERTIES"))
    if ev.dw_mm is not None:
        dw_method = code_item(MEASUREMENT_METHOD, ev.dw_method, relationship="HAS CONCEPT MOD")
        sizes.append(
            num(WATER_EQUIVALENT_DIAMETER, ev.dw_mm, "mm", relationship="HAS PROPERTIES",
                children=[dw_method])
        )  # fmt: skip
    effective_method = ("113810", "DCM", "End of X-Ray Irradiation")  # not a size method
    return [
        num(EFFECTIVE_DOSE, 4.2, "mSv", children=[
            code_item(MEASUREMENT_METHOD, effective_method, relationship="HAS CONCEPT MOD")]),
        num(SSDE, ev.ssde_mgy, "mGy", children=sizes),
    ]  # fmt: skip


def _ct_event(ev: CtEvent, srt_codes: bool) -> Dataset:
    scan_range = []
    if ev.z_top_bottom_mm is not None:
        scan_range = [
            num(Z_TOP, ev.z_top_bottom_mm[0], "mm"),
            num(Z_BOTTOM, ev.z_top_bottom_mm[1], "mm"),
        ]
    if ev.frame_of_reference_uid is not None:
        scan_range.append(uidref(FRAME_OF_REFERENCE, ev.frame_of_reference_uid))
    params = container(CT_PARAMETERS, [
        num(EXPOSURE_TIME, ev.exposure_time_s, "s"),
        num(SCANNING_LENGTH, ev.scanning_length_mm, "mm"),
        *scan_range,
        num(SINGLE_COLLIMATION, 0.625, "mm"),
        num(TOTAL_COLLIMATION, 40.0, "mm"),
        *([] if ev.localizer else [num(PITCH, ev.pitch, "{ratio}")]),
        num(NUMBER_OF_SOURCES, 1, "{X-Ray sources}"),
        container(CT_SOURCE, [
            text(SOURCE_ID, "A"),
            num(KVP, ev.kvp_kv, "kV"),
            num(MAX_TUBE_CURRENT, ev.tube_current_ma * 1.5, "mA"),
            num(TUBE_CURRENT, ev.tube_current_ma, "mA"),
            *([] if ev.localizer else [num(ROTATION_TIME, 0.5, "s")]),
        ]),
    ])  # fmt: skip
    acquisition_type = CONSTANT_ANGLE if ev.localizer else (SPIRAL_SRT if srt_codes else SPIRAL)
    items = [
        text(PROTOCOL, ev.protocol),
        code_item(TARGET_REGION, ABDOMEN),
        code_item(CT_ACQUISITION_TYPE, acquisition_type),
        uidref(EVENT_UID, ev.uid),
        params,
    ]
    if not ev.localizer:  # localizers often carry no CT Dose container (DICOM-NOTES 2.7)
        items.append(container(CT_DOSE, [
            num(MEAN_CTDIVOL, ev.ctdivol_mgy, "mGy"),
            code_item(PHANTOM_TYPE, HEAD_PHANTOM if ev.head_phantom else BODY_PHANTOM),
            num(DLP, ev.dlp_mgy_cm, "mGy.cm"),
            *_size_items(ev),
        ]))  # fmt: skip
    return container(CT_ACQUISITION, items)


def ct_report(
    events: list[CtEvent] | None = None,
    *,
    study_uid: str | None = None,
    srt_codes: bool = False,
    dlp_total_mgy_cm: float | None = None,
    **document: object,
) -> Dataset:
    """A TID 10011 CT report: a localizer without CT Dose and a spiral acquisition.

    ``srt_codes`` writes the retired SNOMED-RT codes of older reports
    (P5-08000 CT X-Ray, P5-08001 Spiral Acquisition).
    """
    study_uid = study_uid or generate_uid()
    if events is None:
        events = [
            CtEvent(localizer=True, tube_current_ma=20.0, exposure_time_s=3.1,
                    scanning_length_mm=500.0, protocol="Scout"),
            CtEvent(),
        ]  # fmt: skip
    total = dlp_total_mgy_cm
    if total is None:
        total = sum(e.dlp_mgy_cm for e in events if not e.localizer)
    accumulated = container(CT_ACCUMULATED, [
        num(TOTAL_EVENTS, len(events), "{events}"),
        num(DLP_TOTAL, total, "mGy.cm"),
    ])  # fmt: skip
    procedure = CT_XRAY_SRT if srt_codes else CT_XRAY
    root = container(
        REPORT,
        [*_document_context(procedure, study_uid, "1.2.826.0.1.3680043.10.1.9", None),
         accumulated, *[_ct_event(e, srt_codes) for e in events],
         code_item(SOURCE_OF_DOSE, AUTOMATED)],
        relationship=None,
    )  # fmt: skip
    document.setdefault("station_name", "CT-1")
    return build_sr_document(root, study_instance_uid=study_uid, **document)


@dataclass
class MammoEvent:
    """One mammography exposure of a synthetic report."""

    uid: str = field(default_factory=generate_uid)
    left: bool = True
    view: Concept = CRANIO_CAUDAL
    tomosynthesis: bool = False
    kvp_kv: float = 29.0
    exposure_uas: float = 98000.0
    thickness_mm: float = 52.0
    force_n: float = 110.0
    entrance_mgy: float = 6.1
    agd_mgy: float = 1.42
    hvl_mm: float = 0.52
    srt_codes: bool = False
    #: CID 4015 modifiers of the Image View (HAS CONCEPT MOD of row Image View)
    view_modifiers: tuple[Concept, ...] = ()


def _mammography_event(index: int, ev: MammoEvent) -> Dataset:
    side = (LEFT_SRT if ev.srt_codes else LEFT) if ev.left else RIGHT
    laterality = LATERALITY_SRT if ev.srt_codes else LATERALITY
    return container(EVENT, [
        code_item(PLANE, SINGLE_PLANE, relationship="HAS CONCEPT MOD"),
        uidref(EVENT_UID, ev.uid),
        datetime_item(STARTED, START.replace(minute=15 + index)),
        code_item(EVENT_TYPE, ROTATIONAL if ev.tomosynthesis else STATIONARY),
        text(PROTOCOL, ("Tomo " if ev.tomosynthesis else "") + ev.view[2]),
        code_item(TARGET_REGION, BREAST, children=[
            code_item(laterality, side, relationship="HAS CONCEPT MOD")]),
        code_item(IMAGE_VIEW, ev.view, children=[
            code_item(IMAGE_VIEW_MODIFIER, m, relationship="HAS CONCEPT MOD")
            for m in ev.view_modifiers]),
        num(COMPRESSION_THICKNESS, ev.thickness_mm, "mm"),
        num(COMPRESSION_FORCE, ev.force_n, "N"),
        num(ENTRANCE_AT_RP, ev.entrance_mgy, "mGy"),
        num(HVL, ev.hvl_mm, "mm"),
        # TID 10003B source data
        num(AGD, ev.agd_mgy, "mGy"),
        num(KVP, ev.kvp_kv, "kV"),
        num(EXPOSURE, ev.exposure_uas, "uA.s"),
        code_item(ANODE, TUNGSTEN),
        container(FILTERS, [
            code_item(FILTER_TYPE, FLAT_FILTER),
            code_item(FILTER_MATERIAL, RHODIUM),
            num(FILTER_MIN, 0.05, "mm"),
            num(FILTER_MAX, 0.05, "mm"),
        ]),
    ])  # fmt: skip


def _with_side(item: Dataset, side: Concept, laterality: Concept = LATERALITY) -> Dataset:
    """``item`` with a Laterality modifier (as TID 10005 writes the breast side)."""
    from pydicom.sequence import Sequence

    item.ContentSequence = Sequence([code_item(laterality, side, relationship="HAS CONCEPT MOD")])
    return item


def mammography_report(
    events: list[MammoEvent] | None = None,
    *,
    study_uid: str | None = None,
    srt_codes: bool = False,
    accumulated_by_side: bool = True,
    intent: Concept = DIAGNOSTIC_INTENT,
    **document: object,
) -> Dataset:
    """A TID 10001 mammography report (procedure (71651007, SCT)): by default a left CC, a
    left tomosynthesis sweep and a right MLO, with TID 10005 accumulated glandular dose per
    breast (CID 6022 Side modifiers)."""
    study_uid = study_uid or generate_uid()
    if events is None:
        events = [
            MammoEvent(srt_codes=srt_codes),
            MammoEvent(tomosynthesis=True, agd_mgy=1.71, exposure_uas=62000.0, kvp_kv=31.0,
                       srt_codes=srt_codes),
            MammoEvent(left=False, view=MEDIO_LATERAL_OBLIQUE, agd_mgy=1.30, thickness_mm=48.0,
                       force_n=95.0),
        ]  # fmt: skip
    left = sum(e.agd_mgy for e in events if e.left)
    right = sum(e.agd_mgy for e in events if not e.left)
    if accumulated_by_side:
        left_side = LEFT_BREAST_SRT if srt_codes else LEFT_BREAST
        laterality = LATERALITY_SRT if srt_codes else LATERALITY
        agd_items = [
            _with_side(num(ACCUMULATED_AGD, round(left, 6), "mGy"), left_side, laterality),
            _with_side(num(ACCUMULATED_AGD, round(right, 6), "mGy"), RIGHT_BREAST, laterality),
        ]
    else:
        agd_items = [num(ACCUMULATED_AGD, round(left + right, 6), "mGy")]
    accumulated = container(
        ACCUMULATED, [code_item(PLANE, SINGLE_PLANE, relationship="HAS CONCEPT MOD"), *agd_items]
    )
    root = container(
        REPORT,
        [*_document_context(MAMMOGRAPHY, study_uid, "1.2.826.0.1.3680043.10.1.9", INTEGRATED,
                            intent),
         accumulated, *[_mammography_event(i, e) for i, e in enumerate(events)],
         code_item(SOURCE_OF_DOSE, AUTOMATED)],
        relationship=None,
    )  # fmt: skip
    return build_sr_document(root, study_instance_uid=study_uid, **document)
