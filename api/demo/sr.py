"""X-Ray Radiation Dose SR content for the demo: TID 10001 (projection) and TID 10011 (CT).

Content items are written as PS3.3 C.17.3 encodes them (ConceptNameCodeSequence, ValueType,
RelationshipType, MeasuredValueSequence with UCUM units...). Templates follow PS3.16 as summarised
in DICOM-NOTES section 2: TID 10001 with TID 10002 (its TID 10004 and TID 10007 rows flattened into
the accumulation container, as PS3.16 encodes included templates) and TID 10003 with its source
(10003B) and mechanical (10003C) rows; TID 10011 with TID 10012 and TID 10013 (CT Acquisition
Parameters, CT X-Ray Source Parameters, CT Dose). Units are those PS3.16 names: DAP in Gy.m2, Dose
(RP) in Gy, projection exposure time in ms and irradiation duration in s, exposure in uA.s, CT
exposure time in s, CTDIvol in mGy, DLP in mGy.cm.

Only the rows the demo needs are written; every row written is valid for its template. This module
builds the content tree only, from the items of ingest's SR builder
(:mod:`beamaudit.ingest.sr_build`) as plain :data:`~beamaudit.api.demo.encoding.Elements`; the
dataset around it (patient, study, series, equipment, SR document modules) is
:mod:`beamaudit.api.demo.dicom_objects`'s.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from datetime import datetime
from typing import Any

from beamaudit.ingest import sr_build as _sr

__all__ = [
    "Concept",
    "CtAcquisitionContent",
    "DeviceObserver",
    "Item",
    "ProjectionEventContent",
    "code",
    "container",
    "ct_dose_report_content",
    "datetime_item",
    "num",
    "projection_dose_report_content",
    "text",
    "uidref",
]

#: A coded concept: (CodeValue, CodingSchemeDesignator, CodeMeaning).
Concept = _sr.Concept


def _dcm(value: str, meaning: str) -> Concept:
    return (value, "DCM", meaning)


def _unit(ucum: str, meaning: str | None = None) -> Concept:
    return (ucum, "UCUM", meaning or ucum)


# Concepts of TID 10001-10013 and TID 1002 (codes: DICOM-NOTES section 2, checked in pydicom)
REPORT = _dcm("113701", "X-Ray Radiation Dose Report")
PROCEDURE_REPORTED = _dcm("121058", "Procedure reported")
PROJECTION_XRAY = _dcm("113704", "Projection X-Ray")
CT_XRAY = ("77477000", "SCT", "Computed Tomography")
HAS_INTENT = ("363703001", "SCT", "Has Intent")
DIAGNOSTIC_INTENT = ("261004008", "SCT", "Diagnostic Intent")
ACQUISITION_DEVICE_TYPE = _dcm("122142", "Acquisition Device Type")
FLUOROSCOPY_GUIDED = _dcm("113957", "Fluoroscopy-Guided Projection Radiography System")
OBSERVER_TYPE = _dcm("121005", "Observer Type")
DEVICE = _dcm("121007", "Device")
SCOPE = _dcm("113705", "Scope of Accumulation")
STUDY = _dcm("113014", "Study")
STUDY_UID = _dcm("110180", "Study Instance UID")
ACCUMULATED = _dcm("113702", "Accumulated X-Ray Dose Data")
ACQUISITION_PLANE = _dcm("113764", "Acquisition Plane")
SINGLE_PLANE = _dcm("113622", "Single Plane")
EVENT = _dcm("113706", "Irradiation Event X-Ray Data")
EVENT_UID = _dcm("113769", "Irradiation Event UID")
DATETIME_STARTED = _dcm("111526", "DateTime Started")
EVENT_TYPE = _dcm("113721", "Irradiation Event Type")
FLUOROSCOPY = ("44491008", "SCT", "Fluoroscopy")
STATIONARY = _dcm("113611", "Stationary Acquisition")
ACQUISITION_PROTOCOL = _dcm("125203", "Acquisition Protocol")
TARGET_REGION = _dcm("123014", "Target Region")
DAP = _dcm("122130", "Dose Area Product")
DOSE_RP = _dcm("113738", "Dose (RP)")
REFERENCE_POINT_DEFINITION = _dcm("113780", "Reference Point Definition")
RP_1CM_ABOVE_TABLETOP = _dcm("113862", "1cm above Tabletop")
FLUORO_MODE = _dcm("113732", "Fluoro Mode")
PULSED = _dcm("113631", "Pulsed")
PULSE_RATE = _dcm("113791", "Pulse Rate")
NUMBER_OF_PULSES = _dcm("113768", "Number of Pulses")
PULSE_WIDTH = _dcm("113793", "Pulse Width")
IRRADIATION_DURATION = _dcm("113742", "Irradiation Duration")
KVP = _dcm("113733", "KVP")
TUBE_CURRENT = _dcm("113734", "X-Ray Tube Current")
EXPOSURE_TIME = _dcm("113824", "Exposure Time")
EXPOSURE = _dcm("113736", "Exposure")
FOCAL_SPOT = _dcm("113766", "Focal Spot Size")
XRAY_FILTERS = _dcm("113771", "X-Ray Filters")
FILTER_TYPE = _dcm("113772", "X-Ray Filter Type")
FLAT_FILTER = _dcm("113653", "Flat filter")
FILTER_MATERIAL = _dcm("113757", "X-Ray Filter Material")
FILTER_MIN = _dcm("113758", "X-Ray Filter Thickness Minimum")
FILTER_MAX = _dcm("113773", "X-Ray Filter Thickness Maximum")
XRAY_GRID = _dcm("111635", "X-Ray Grid")
FOCUSED_GRID = _dcm("111642", "Focused grid")
FIELD_AREA = _dcm("113790", "Collimated Field Area")
FIELD_HEIGHT = _dcm("113788", "Collimated Field Height")
FIELD_WIDTH = _dcm("113789", "Collimated Field Width")
SOURCE_TO_DETECTOR = _dcm("113750", "Distance Source to Detector")
SOURCE_TO_TABLE = _dcm("113792", "Distance Source to Table Plane")
SOURCE_TO_RP = _dcm("113737", "Distance Source to Reference Point")
FLUORO_DAP_TOTAL = _dcm("113726", "Fluoro Dose Area Product Total")
FLUORO_RP_TOTAL = _dcm("113728", "Fluoro Dose (RP) Total")
FLUORO_TIME_TOTAL = _dcm("113730", "Total Fluoro Time")
ACQ_DAP_TOTAL = _dcm("113727", "Acquisition Dose Area Product Total")
ACQ_RP_TOTAL = _dcm("113729", "Acquisition Dose (RP) Total")
ACQ_TIME_TOTAL = _dcm("113855", "Total Acquisition Time")
DAP_TOTAL = _dcm("113722", "Dose Area Product Total")
RP_TOTAL = _dcm("113725", "Dose (RP) Total")
FRAMES_TOTAL = _dcm("113731", "Total Number of Radiographic Frames")
SOURCE_OF_DOSE_INFO = _dcm("113854", "Source of Dose Information")
AUTOMATED_COLLECTION = _dcm("113856", "Automated Data Collection")
COMMENT = _dcm("121106", "Comment")
# TID 1004 device observer identification
DEVICE_OBSERVER_UID = _dcm("121012", "Device Observer UID")
DEVICE_OBSERVER_NAME = _dcm("121013", "Device Observer Name")
DEVICE_OBSERVER_MANUFACTURER = _dcm("121014", "Device Observer Manufacturer")
DEVICE_OBSERVER_MODEL = _dcm("121015", "Device Observer Model Name")
DEVICE_OBSERVER_SERIAL = _dcm("121016", "Device Observer Serial Number")
DEVICE_OBSERVER_LOCATION = _dcm("121017", "Device Observer Physical Location During Observation")
# CT (TID 10011-10013)
START_OF_IRRADIATION = _dcm("113809", "Start of X-Ray Irradiation")
END_OF_IRRADIATION = _dcm("113810", "End of X-Ray Irradiation")
CT_ACCUMULATED = _dcm("113811", "CT Accumulated Dose Data")
TOTAL_EVENTS = _dcm("113812", "Total Number of Irradiation Events")
DLP_TOTAL = _dcm("113813", "CT Dose Length Product Total")
CT_ACQUISITION = _dcm("113819", "CT Acquisition")
CT_ACQUISITION_TYPE = _dcm("113820", "CT Acquisition Type")
SPIRAL = ("116152004", "SCT", "Spiral Acquisition")
CONSTANT_ANGLE = _dcm("113805", "Constant Angle Acquisition")
CT_PARAMETERS = _dcm("113822", "CT Acquisition Parameters")
SCANNING_LENGTH = _dcm("113825", "Scanning Length")
TOP_Z_SCANNING = _dcm("113897", "Top Z Location of Scanning Length")
BOTTOM_Z_SCANNING = _dcm("113898", "Bottom Z Location of Scanning Length")
FRAME_OF_REFERENCE = _dcm("112227", "Frame of Reference UID")
SSDE = _dcm("113930", "Size Specific Dose Estimate")
WATER_EQUIVALENT_DIAMETER = _dcm("113980", "Water Equivalent Diameter")
SINGLE_COLLIMATION = _dcm("113826", "Nominal Single Collimation Width")
TOTAL_COLLIMATION = _dcm("113827", "Nominal Total Collimation Width")
PITCH_FACTOR = _dcm("113828", "Pitch Factor")
NUMBER_OF_SOURCES = _dcm("113823", "Number of X-Ray Sources")
CT_SOURCE = _dcm("113831", "CT X-Ray Source Parameters")
SOURCE_ID = _dcm("113832", "Identification of the X-Ray Source")
MAX_TUBE_CURRENT = _dcm("113833", "Maximum X-Ray Tube Current")
TIME_PER_ROTATION = _dcm("113834", "Exposure Time per Rotation")
CT_DOSE = _dcm("113829", "CT Dose")
MEAN_CTDIVOL = _dcm("113830", "Mean CTDIvol")
PHANTOM_TYPE = _dcm("113835", "CTDIw Phantom Type")
HEAD_PHANTOM = _dcm("113690", "IEC Head Dosimetry Phantom")
BODY_PHANTOM = _dcm("113691", "IEC Body Dosimetry Phantom")
DLP = _dcm("113838", "DLP")
MODULATION_TYPE = _dcm("113842", "X-Ray Modulation Type")

#: CID 10006 filter materials by element symbol (SCT codes, DICOM-NOTES section 2.6)
FILTER_MATERIALS: dict[str, Concept] = {
    "Al": ("12503006", "SCT", "Aluminum"),
    "Cu": ("66925006", "SCT", "Copper"),
}

# TID 10003 patient position and TID 10003C mechanical data (interventional room)
PATIENT_TABLE_RELATIONSHIP = _dcm("113745", "Patient Table Relationship")
HEADFIRST = ("102540008", "SCT", "headfirst")
PATIENT_ORIENTATION = _dcm("113743", "Patient Orientation")
RECUMBENT = ("102538003", "SCT", "recumbent")
PATIENT_ORIENTATION_MODIFIER = _dcm("113744", "Patient Orientation Modifier")
SUPINE = ("40199007", "SCT", "supine")
POSITIONER_PRIMARY_ANGLE = _dcm("112011", "Positioner Primary Angle")
POSITIONER_SECONDARY_ANGLE = _dcm("112012", "Positioner Secondary Angle")
SOURCE_TO_ISOCENTER = _dcm("113748", "Distance Source to Isocenter")
TABLE_LONGITUDINAL = _dcm("113751", "Table Longitudinal Position")
TABLE_LATERAL = _dcm("113752", "Table Lateral Position")
TABLE_HEIGHT = _dcm("113753", "Table Height Position")
GY_M2 = _unit("Gy.m2")
GY = _unit("Gy")
MS = _unit("ms")
SECONDS = _unit("s")
KV = _unit("kV")
MA = _unit("mA")
UAS = _unit("uA.s")
MM = _unit("mm")
DEG = _unit("deg")
M2 = _unit("m2")
MGY = _unit("mGy")
MGY_CM = _unit("mGy.cm")
PER_S = _unit("{pulse}/s", "pulse/s")
PULSES = _unit("{pulses}", "pulses")
FRAMES = _unit("{frames}", "frames")
EVENTS = _unit("{events}", "events")
RATIO = _unit("{ratio}", "ratio")
SOURCES = _unit("{X-Ray sources}", "X-Ray sources")


# ------------------------------------------------------------------------------ content items
# The items are ingest's SR builder's (beamaudit.ingest.sr_build), as plain data; NUM values as a
# Decimal String only, as the demo's devices write them.
Item = _sr.Item
container = _sr.container_content
code = _sr.code_content
text = _sr.text_content
uidref = _sr.uidref_content
datetime_item = _sr.datetime_content


def num(concept: Concept, value: float, unit: Concept, *, relationship: str = "CONTAINS") -> Item:
    """A NUM item: the value as DS text (at most 16 characters) with its UCUM unit."""
    return _sr.num_content(concept, value, unit, relationship=relationship, floating_point=False)


# ----------------------------------------------------------------------------- observer context
@dataclass(frozen=True, slots=True)
class DeviceObserver:
    """TID 1004 device observer identification of the reporting device."""

    uid: str
    name: str
    manufacturer: str
    model_name: str
    serial_number: str
    location: str


def _observer_context(observer: DeviceObserver) -> list[Item]:
    rel = "HAS OBS CONTEXT"
    return [
        code(OBSERVER_TYPE, DEVICE, relationship=rel),
        uidref(DEVICE_OBSERVER_UID, observer.uid, relationship=rel),
        text(DEVICE_OBSERVER_NAME, observer.name, relationship=rel),
        text(DEVICE_OBSERVER_MANUFACTURER, observer.manufacturer, relationship=rel),
        text(DEVICE_OBSERVER_MODEL, observer.model_name, relationship=rel),
        text(DEVICE_OBSERVER_SERIAL, observer.serial_number, relationship=rel),
        text(DEVICE_OBSERVER_LOCATION, observer.location, relationship=rel),
    ]


def _scope(study_instance_uid: str) -> Item:
    scope = code(SCOPE, STUDY, relationship="HAS OBS CONTEXT")
    scope["ContentSequence"] = [
        uidref(STUDY_UID, study_instance_uid, relationship="HAS PROPERTIES")
    ]
    return scope


def _procedure(procedure: Concept) -> Item:
    item = code(PROCEDURE_REPORTED, procedure, relationship="HAS CONCEPT MOD")
    item["ContentSequence"] = [code(HAS_INTENT, DIAGNOSTIC_INTENT, relationship="HAS CONCEPT MOD")]
    return item


# -------------------------------------------------------------------------- projection (10001)
@dataclass(frozen=True, slots=True)
class ProjectionEventContent:
    """One TID 10003 irradiation event of a fluoroscopy room (values in the template's units).

    ``fluoroscopy`` selects the event type (Fluoroscopy, pulsed) or a stationary acquisition
    (one spot image). Field dimensions are at the image receptor plane.
    """

    event_uid: str
    started: datetime
    fluoroscopy: bool
    protocol: str
    target_region: Concept
    dap_gy_m2: float
    dose_rp_gy: float
    kvp_kv: float
    tube_current_ma: float
    exposure_uas: float
    duration_s: float
    pulse_rate_per_s: float | None
    number_of_pulses: int | None
    pulse_width_ms: float | None
    exposure_time_ms: float
    filters: tuple[tuple[str, float], ...]
    field_width_mm: float
    field_height_mm: float
    sid_mm: float
    source_to_table_mm: float
    source_to_rp_mm: float
    focal_spot_mm: float
    #: TID 10003C mechanical data and the patient's position (``records.CArmGeometry``)
    geometry: Any = None


def _geometry_items(g: Any) -> list[Item]:
    """TID 10003 patient position and TID 10003C positioner and table rows of one event."""
    orientation = code(PATIENT_ORIENTATION, RECUMBENT)
    orientation["ContentSequence"] = [
        code(PATIENT_ORIENTATION_MODIFIER, SUPINE, relationship="HAS CONCEPT MOD")
    ]
    return [
        code(PATIENT_TABLE_RELATIONSHIP, HEADFIRST),
        orientation,
        num(POSITIONER_PRIMARY_ANGLE, g.primary_angle_deg, DEG),
        num(POSITIONER_SECONDARY_ANGLE, g.secondary_angle_deg, DEG),
        num(SOURCE_TO_ISOCENTER, g.source_to_isocenter_mm, MM),
        num(TABLE_LONGITUDINAL, g.table_longitudinal_mm, MM),
        num(TABLE_LATERAL, g.table_lateral_mm, MM),
        num(TABLE_HEIGHT, g.table_height_mm, MM),
    ]


def _projection_event(event: ProjectionEventContent) -> Item:
    items = [
        code(ACQUISITION_PLANE, SINGLE_PLANE, relationship="HAS CONCEPT MOD"),
        uidref(EVENT_UID, event.event_uid),
        datetime_item(DATETIME_STARTED, event.started),
        code(EVENT_TYPE, FLUOROSCOPY if event.fluoroscopy else STATIONARY),
        text(ACQUISITION_PROTOCOL, event.protocol),
        code(TARGET_REGION, event.target_region),
        num(DAP, event.dap_gy_m2, GY_M2),
        num(DOSE_RP, event.dose_rp_gy, GY),
        code(REFERENCE_POINT_DEFINITION, RP_1CM_ABOVE_TABLETOP),
    ]
    if event.fluoroscopy:
        items.append(code(FLUORO_MODE, PULSED))
        if event.pulse_rate_per_s is not None:
            items.append(num(PULSE_RATE, event.pulse_rate_per_s, PER_S))
        if event.number_of_pulses is not None:
            items.append(num(NUMBER_OF_PULSES, event.number_of_pulses, PULSES))
        if event.pulse_width_ms is not None:
            items.append(num(PULSE_WIDTH, event.pulse_width_ms, MS))
    items += [
        num(IRRADIATION_DURATION, event.duration_s, SECONDS),
        num(KVP, event.kvp_kv, KV),
        num(TUBE_CURRENT, event.tube_current_ma, MA),
        num(EXPOSURE_TIME, event.exposure_time_ms, MS),
        num(EXPOSURE, event.exposure_uas, UAS),
        num(FOCAL_SPOT, event.focal_spot_mm, MM),
    ]
    for material, thickness_mm in event.filters:
        items.append(
            container(
                XRAY_FILTERS,
                [
                    code(FILTER_TYPE, FLAT_FILTER),
                    code(FILTER_MATERIAL, FILTER_MATERIALS[material]),
                    num(FILTER_MIN, thickness_mm, MM),
                    num(FILTER_MAX, thickness_mm, MM),
                ],
            )
        )
    area_m2 = event.field_width_mm * event.field_height_mm * 1e-6
    items += [
        code(XRAY_GRID, FOCUSED_GRID),
        num(FIELD_AREA, area_m2, M2),
        num(FIELD_HEIGHT, event.field_height_mm, MM),
        num(FIELD_WIDTH, event.field_width_mm, MM),
        num(SOURCE_TO_DETECTOR, event.sid_mm, MM),
        num(SOURCE_TO_TABLE, event.source_to_table_mm, MM),
        num(SOURCE_TO_RP, event.source_to_rp_mm, MM),
    ]
    if event.geometry is not None:
        items += _geometry_items(event.geometry)
    return container(EVENT, items)


def projection_dose_report_content(
    *,
    observer: DeviceObserver,
    study_instance_uid: str,
    events: Sequence[ProjectionEventContent],
    comment: str,
) -> Item:
    """The root CONTAINER of a TID 10001 report of a fluoroscopy-guided projection system.

    The TID 10002 accumulation (single plane) holds the TID 10004 fluoroscopy and acquisition
    totals and the TID 10007 totals, summed over ``events``.
    """
    fluoro = [e for e in events if e.fluoroscopy]
    acquisitions = [e for e in events if not e.fluoroscopy]
    rp = code(REFERENCE_POINT_DEFINITION, RP_1CM_ABOVE_TABLETOP)
    accumulated = container(
        ACCUMULATED,
        [
            code(ACQUISITION_PLANE, SINGLE_PLANE, relationship="HAS CONCEPT MOD"),
            num(FLUORO_DAP_TOTAL, sum(e.dap_gy_m2 for e in fluoro), GY_M2),
            num(FLUORO_RP_TOTAL, sum(e.dose_rp_gy for e in fluoro), GY),
            num(FLUORO_TIME_TOTAL, sum(e.duration_s for e in fluoro), SECONDS),
            num(ACQ_DAP_TOTAL, sum(e.dap_gy_m2 for e in acquisitions), GY_M2),
            num(ACQ_RP_TOTAL, sum(e.dose_rp_gy for e in acquisitions), GY),
            num(ACQ_TIME_TOTAL, sum(e.duration_s for e in acquisitions), SECONDS),
            num(DAP_TOTAL, sum(e.dap_gy_m2 for e in events), GY_M2),
            num(RP_TOTAL, sum(e.dose_rp_gy for e in events), GY),
            num(FRAMES_TOTAL, len(acquisitions), FRAMES),
            rp,
        ],
    )
    items = [
        _procedure(PROJECTION_XRAY),
        code(ACQUISITION_DEVICE_TYPE, FLUOROSCOPY_GUIDED),
        *_observer_context(observer),
        _scope(study_instance_uid),
        accumulated,
        *(_projection_event(e) for e in events),
        code(SOURCE_OF_DOSE_INFO, AUTOMATED_COLLECTION),
        text(COMMENT, comment),
    ]
    return container(REPORT, items, relationship=None, template="10001")


# ---------------------------------------------------------------------------------- CT (10011)
@dataclass(frozen=True, slots=True)
class CtAcquisitionContent:
    """One TID 10013 CT acquisition (localiser: ``spiral`` False, no CT Dose container)."""

    event_uid: str
    started: datetime
    protocol: str
    target_region: Concept
    spiral: bool
    exposure_time_s: float
    scanning_length_mm: float
    single_collimation_mm: float
    total_collimation_mm: float
    pitch: float | None
    kvp_kv: float
    max_tube_current_ma: float
    tube_current_ma: float
    rotation_time_s: float | None
    ctdivol_mgy: float | None
    head_phantom: bool
    dlp_mgy_cm: float | None
    #: TID 10014: where the scan lies along the table, in the images' frame of reference
    scan_z_top_mm: float | None = None
    scan_z_bottom_mm: float | None = None
    frame_of_reference_uid: str | None = None
    #: the scanner's own size figures (from its localizer), when it reports them
    ssde_mgy: float | None = None
    water_equivalent_diameter_mm: float | None = None


def _ct_acquisition(acq: CtAcquisitionContent) -> Item:
    source = [
        text(SOURCE_ID, "A"),
        num(KVP, acq.kvp_kv, KV),
        num(MAX_TUBE_CURRENT, acq.max_tube_current_ma, MA),
        num(TUBE_CURRENT, acq.tube_current_ma, MA),
    ]
    if acq.rotation_time_s is not None:
        source.append(num(TIME_PER_ROTATION, acq.rotation_time_s, SECONDS))
    parameters = [
        num(EXPOSURE_TIME, acq.exposure_time_s, SECONDS),
        num(SCANNING_LENGTH, acq.scanning_length_mm, MM),
        num(SINGLE_COLLIMATION, acq.single_collimation_mm, MM),
        num(TOTAL_COLLIMATION, acq.total_collimation_mm, MM),
    ]
    if acq.pitch is not None:
        parameters.append(num(PITCH_FACTOR, acq.pitch, RATIO))
    if acq.scan_z_top_mm is not None and acq.scan_z_bottom_mm is not None:
        parameters += [
            num(TOP_Z_SCANNING, acq.scan_z_top_mm, MM),
            num(BOTTOM_Z_SCANNING, acq.scan_z_bottom_mm, MM),
        ]
        if acq.frame_of_reference_uid:
            parameters.append(uidref(FRAME_OF_REFERENCE, acq.frame_of_reference_uid))
    parameters += [num(NUMBER_OF_SOURCES, 1, SOURCES), container(CT_SOURCE, source)]
    items = [
        text(ACQUISITION_PROTOCOL, acq.protocol),
        code(TARGET_REGION, acq.target_region),
        code(CT_ACQUISITION_TYPE, SPIRAL if acq.spiral else CONSTANT_ANGLE),
        uidref(EVENT_UID, acq.event_uid),
        datetime_item(DATETIME_STARTED, acq.started),
        container(CT_PARAMETERS, parameters),
    ]
    if acq.ctdivol_mgy is not None and acq.dlp_mgy_cm is not None:
        items.append(
            container(
                CT_DOSE,
                [
                    num(MEAN_CTDIVOL, acq.ctdivol_mgy, MGY),
                    code(PHANTOM_TYPE, HEAD_PHANTOM if acq.head_phantom else BODY_PHANTOM),
                    num(DLP, acq.dlp_mgy_cm, MGY_CM),
                    *(
                        [
                            num(SSDE, acq.ssde_mgy, MGY),
                            num(WATER_EQUIVALENT_DIAMETER, acq.water_equivalent_diameter_mm, MM),
                        ]
                        if acq.ssde_mgy is not None and acq.water_equivalent_diameter_mm is not None
                        else []
                    ),
                ],
            )
        )
    if acq.spiral:
        items.append(text(MODULATION_TYPE, "ANGULAR AND LONGITUDINAL"))
    return container(CT_ACQUISITION, items)


def ct_dose_report_content(
    *,
    observer: DeviceObserver,
    study_instance_uid: str,
    start: datetime,
    end: datetime,
    acquisitions: Sequence[CtAcquisitionContent],
    dlp_total_mgy_cm: float,
    comment: str,
) -> Item:
    """The root CONTAINER of a TID 10011 CT Radiation Dose report.

    ``dlp_total_mgy_cm`` is written as given (the sum of the acquisitions' DLP as the scanner
    rounds them).
    """
    accumulated = container(
        CT_ACCUMULATED,
        [
            num(TOTAL_EVENTS, len(acquisitions), EVENTS),
            num(DLP_TOTAL, dlp_total_mgy_cm, MGY_CM),
        ],
    )
    items = [
        _procedure(CT_XRAY),
        *_observer_context(observer),
        datetime_item(START_OF_IRRADIATION, start, relationship="HAS OBS CONTEXT"),
        datetime_item(END_OF_IRRADIATION, end, relationship="HAS OBS CONTEXT"),
        _scope(study_instance_uid),
        accumulated,
        *(_ct_acquisition(a) for a in acquisitions),
        code(SOURCE_OF_DOSE_INFO, AUTOMATED_COLLECTION),
        text(COMMENT, comment),
    ]
    return container(REPORT, items, relationship=None, template="10011")
