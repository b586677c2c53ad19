"""DICOM Part 10 objects of the demo: DX and CR images, CT images, X-Ray Radiation Dose SRs.

Strict on what we write: every object is a complete composite instance of its IOD as far as the
demo's content goes (PS3.3 A.26 DX, A.2 CR, A.3 CT, A.35.8 X-Ray Radiation Dose SR), with file
meta information (PS3.10), Explicit VR Little Endian. Images carry a tiny thumbnail pixel matrix
(ingest never reads pixels): a radiograph has one pixel per centimetre of the detector, so that
the collimator edges are genuine pixel positions of the image and, with the Imager Pixel Spacing,
give the collimated field at the receptor (PS3.3 C.8.7.3, C.8.11.4).

The functions take plain records (:mod:`beamaudit.api.demo.records`) and return
:data:`~beamaudit.api.demo.encoding.Elements` (keyword -> value), encoded and written by
:func:`write_part10` (see :mod:`beamaudit.api.demo.encoding` for why not through pydicom's
Dataset).
"""

from __future__ import annotations

from datetime import date, datetime
from functools import cache
from pathlib import Path
from typing import Any

import numpy as np

from beamaudit.api.demo.ct_pixels import (
    AXIAL_MATRIX,
    LOCALIZER_PIXEL_MM,
    axial_hu,
    localizer_signal,
    water_equivalent_diameter_cm,
)
from beamaudit.api.demo.encoding import part10_file
from beamaudit.api.demo.records import (
    CtStudy,
    FluoroStudy,
    Patient,
    RadiographStudy,
    RadiographView,
)
from beamaudit.api.demo.scenario import DEPARTMENT, INSTITUTION, INVENTED_NOTICE, RoomSpec
from beamaudit.api.demo.sr import (
    CtAcquisitionContent,
    DeviceObserver,
    ProjectionEventContent,
    ct_dose_report_content,
    projection_dose_report_content,
)

__all__ = [
    "CR_IMAGE",
    "CT_IMAGE",
    "DX_PRESENTATION",
    "XRAY_DOSE_SR",
    "ct_dose_report",
    "ct_image",
    "ct_localizer",
    "fluoro_dose_report",
    "part10_bytes",
    "radiograph",
    "write_part10",
]

# SOP Class UIDs, PS3.4 Table B.5-1
DX_PRESENTATION = "1.2.840.10008.5.1.4.1.1.1.1"
CR_IMAGE = "1.2.840.10008.5.1.4.1.1.1"
CT_IMAGE = "1.2.840.10008.5.1.4.1.1.2"
XRAY_DOSE_SR = "1.2.840.10008.5.1.4.1.1.88.67"

_FILTER_TERMS = {"Al": "ALUMINUM", "Cu": "COPPER"}  # (0018,7050) Defined Terms, PS3.3 C.8.7.10


Dataset = dict[str, Any]


def write_part10(path: Path, ds: Dataset) -> None:
    """Write ``ds`` as a DICOM Part 10 file (preamble, file meta, Explicit VR Little Endian)."""
    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_bytes(part10_file(ds))


def part10_bytes(ds: Dataset) -> bytes:
    """The bytes :func:`write_part10` would write."""
    return part10_file(ds)


@cache
def _thumbnail(rows: int, columns: int) -> bytes:
    """A smooth 12-bit pattern, little-endian 16-bit words (the same for every image of a size)."""
    y, x = np.mgrid[0:rows, 0:columns]
    r2 = ((y - rows / 2) / rows) ** 2 + ((x - columns / 2) / columns) ** 2
    return np.asarray(3000 - 2400 * r2, dtype="<u2").tobytes()


def _age(birth: date, on: date) -> str:
    years = on.year - birth.year - ((on.month, on.day) < (birth.month, birth.day))
    return f"{years:03d}Y"


def _common(
    ds: Dataset,
    *,
    room: RoomSpec,
    patient: Patient,
    study_uid: str,
    accession: str,
    study_description: str,
    start: datetime,
    weight_recorded: bool,
) -> None:
    """Patient, General Study, Patient Study, General Equipment and SOP Common attributes."""
    ds["SpecificCharacterSet"] = "ISO_IR 100"
    ds["InstanceCreationDate"] = start.strftime("%Y%m%d")
    ds["InstanceCreationTime"] = start.strftime("%H%M%S")
    ds["StudyDate"] = start.strftime("%Y%m%d")
    ds["StudyTime"] = start.strftime("%H%M%S")
    ds["AccessionNumber"] = accession
    ds["Manufacturer"] = room.manufacturer
    ds["InstitutionName"] = INSTITUTION
    ds["InstitutionalDepartmentName"] = DEPARTMENT
    ds["ReferringPhysicianName"] = ""
    ds["StationName"] = room.station_name
    ds["StudyDescription"] = study_description
    ds["ManufacturerModelName"] = room.model_name
    ds["PatientName"] = patient.name
    ds["PatientID"] = patient.patient_id
    ds["IssuerOfPatientID"] = "HGH"
    ds["PatientBirthDate"] = patient.birth_date.strftime("%Y%m%d")
    ds["PatientSex"] = patient.sex
    ds["PatientAge"] = _age(patient.birth_date, start.date())
    ds["PatientSize"] = f"{patient.height_m:.2f}"
    if weight_recorded:
        ds["PatientWeight"] = f"{patient.weight_kg:.0f}"
    ds["PatientComments"] = INVENTED_NOTICE
    ds["DeviceSerialNumber"] = room.serial_number
    ds["SoftwareVersions"] = room.software_versions
    ds["StudyInstanceUID"] = study_uid
    ds["StudyID"] = accession[-6:]


def _image_pixels(ds: Dataset, rows: int, columns: int) -> None:
    ds["SamplesPerPixel"] = 1
    ds["PhotometricInterpretation"] = "MONOCHROME2"
    ds["Rows"] = rows
    ds["Columns"] = columns
    ds["BitsAllocated"] = 16
    ds["BitsStored"] = 12
    ds["HighBit"] = 11
    ds["PixelRepresentation"] = 0
    ds["PixelData"] = _thumbnail(rows, columns)


def radiograph(room: RoomSpec, study: RadiographStudy, view: RadiographView) -> Dataset:
    """A DX For Presentation (DX rooms, mobile) or CR image of one radiographic exposure."""
    ds: Dataset = {}
    _common(
        ds,
        room=room,
        patient=study.patient,
        study_uid=study.study_uid,
        accession=study.accession,
        study_description=study.study_description,
        start=study.start,
        weight_recorded=study.weight_recorded,
    )
    is_cr = room.modality == "CR"
    ds["ImageType"] = ["ORIGINAL", "PRIMARY"]
    ds["SOPClassUID"] = CR_IMAGE if is_cr else DX_PRESENTATION
    ds["SOPInstanceUID"] = view.sop_uid
    when = view.acquired
    ds["SeriesDate"] = ds["AcquisitionDate"] = ds["ContentDate"] = when.strftime("%Y%m%d")
    ds["SeriesTime"] = study.start.strftime("%H%M%S")
    ds["AcquisitionTime"] = ds["ContentTime"] = when.strftime("%H%M%S")
    ds["AcquisitionDateTime"] = when.strftime("%Y%m%d%H%M%S")
    ds["Modality"] = room.modality
    if not is_cr:
        ds["PresentationIntentType"] = "FOR PRESENTATION"
    ds["SeriesDescription"] = view.series_description
    ds["IrradiationEventUID"] = view.event_uid
    ds["ImageComments"] = INVENTED_NOTICE
    if view.body_part:
        ds["BodyPartExamined"] = view.body_part
    ds["ProtocolName"] = view.protocol_name
    ds["ViewPosition"] = view.view_position
    if view.technique_recorded:
        ds["KVP"] = f"{view.kvp_kv:g}"
        ds["ExposureTime"] = round(view.exposure_time_ms)
        ds["XRayTubeCurrent"] = round(view.tube_current_ma)
        ds["Exposure"] = round(view.exposure_mas)
        ds["ExposureInuAs"] = round(view.exposure_mas * 1000)
        ds["ExposureControlMode"] = "AUTOMATIC" if view.aec else "MANUAL"
    elif view.dose_recorded:  # a cassette reader without the technique: zeros, "not recorded"
        ds["KVP"] = "0"
        ds["ExposureTime"] = 0
        ds["XRayTubeCurrent"] = 0
        ds["Exposure"] = 0
    if view.dose_recorded:
        ds["DistanceSourceToDetector"] = f"{view.sid_mm:.0f}"
        ds["DistanceSourceToPatient"] = f"{view.source_to_patient_mm:.0f}"
        ds["DistanceSourceToEntrance"] = f"{view.source_to_entrance_mm:.0f}"
        ds["BodyPartThickness"] = f"{view.thickness_mm:.0f}"
        ds["ImageAndFluoroscopyAreaDoseProduct"] = f"{view.dap_reported_gy_cm2 * 10:.5g}"
        ds["AnodeTargetMaterial"] = "TUNGSTEN"
        ds["FocalSpots"] = "1.2" if view.thickness_mm > 150 else "0.6"
        ds["Grid"] = ["FOCUSED", "RECIPROCATING"] if view.grid else "NONE"
        if room.added_filters:
            ds["FilterMaterial"] = [_FILTER_TERMS[m] for m, _ in room.added_filters]
            ds["FilterThicknessMinimum"] = [f"{t:g}" for _, t in room.added_filters]
            ds["FilterThicknessMaximum"] = [f"{t:g}" for _, t in room.added_filters]
        else:
            ds["FilterType"] = "NONE"
        ds["CollimatorShape"] = "RECTANGULAR"
        left, right, upper, lower = view.collimator_edges_px
        ds["CollimatorLeftVerticalEdge"] = left
        ds["CollimatorRightVerticalEdge"] = right
        ds["CollimatorUpperHorizontalEdge"] = upper
        ds["CollimatorLowerHorizontalEdge"] = lower
    if view.exposure_index is not None:
        ds["ExposureIndex"] = f"{view.exposure_index:.0f}"
        ds["TargetExposureIndex"] = f"{view.target_exposure_index:.0f}"
        ds["DeviationIndex"] = f"{view.deviation_index:.1f}"
    spacing = f"{room.pixel_spacing_mm:g}"
    ds["ImagerPixelSpacing"] = [spacing, spacing]
    ds["DetectorType"] = "STORAGE" if is_cr else "SCINTILLATOR"
    ds["SeriesInstanceUID"] = study.series_uid
    ds["SeriesNumber"] = 1
    ds["AcquisitionNumber"] = view.index + 1
    ds["InstanceNumber"] = view.index + 1
    ds["PatientOrientation"] = ["P", "F"] if view.view_position in ("LL", "RL") else ["L", "F"]
    ds["ImageLaterality"] = view.laterality
    presentation_pixels(ds, room)
    return ds


def presentation_pixels(ds: Dataset, room: RoomSpec) -> None:
    """The display attributes and the thumbnail pixels of a projection image for presentation."""
    ds["PixelIntensityRelationship"] = "LOG"
    ds["PixelIntensityRelationshipSign"] = 1
    ds["RescaleIntercept"] = "0"
    ds["RescaleSlope"] = "1"
    ds["RescaleType"] = "US"
    ds["PresentationLUTShape"] = "IDENTITY"
    ds["LossyImageCompression"] = "00"
    ds["BurnedInAnnotation"] = "NO"
    ds["WindowCenter"] = "2048"
    ds["WindowWidth"] = "4096"
    rows = round(room.detector_mm[1] / room.pixel_spacing_mm)
    columns = round(room.detector_mm[0] / room.pixel_spacing_mm)
    _image_pixels(ds, rows, columns)


#: the scanner's own Dw from its localizer reads this much above the drawn section's (an
#: invented difference of method: its table handling and its rim)
_SCANNER_DW_FACTOR = 1.04


def _scanner_size(study: CtStudy, acq: Any) -> dict[str, Any]:
    """TID 10014's scan range of a helical acquisition (z = 0 to z = -length in the study's
    frame of reference), and the scanner's own Dw and SSDE where it sent a localizer."""
    if not acq.spiral:
        return {}
    out: dict[str, Any] = {
        "scan_z_top_mm": 0.0,
        "scan_z_bottom_mm": -acq.scanning_length_mm,
        "frame_of_reference_uid": study.frame_of_reference_uid,
    }
    if study.size_images and acq.ctdivol_mgy is not None:
        from beamaudit.model.ssde import size_specific_dose_estimate

        region = _size_region(study)
        dw_cm = water_equivalent_diameter_cm(study.patient, region, z_fraction=0.5)
        dw_cm *= _SCANNER_DW_FACTOR
        ssde = size_specific_dose_estimate(
            ctdivol_mgy=acq.ctdivol_mgy,
            diameter_cm=dw_cm,
            phantom_diameter_cm=16.0 if acq.head_phantom else 32.0,
            body_region="head" if region == "head" else "body",
            allow_extrapolation=True,
        )
        out["water_equivalent_diameter_mm"] = round(dw_cm * 10.0, 1)
        out["ssde_mgy"] = round(ssde.ssde_mgy, 2)
    return out


def _size_region(study: CtStudy) -> str:
    return {"ct_head": "head", "ct_chest": "chest"}.get(study.exam_type, "body")


def _ct_header(room: RoomSpec, study: CtStudy, acq: Any, image_type: str, sop_uid: str) -> Dataset:
    """What every CT image of the demo scanner carries: patient, study, dates, event, notice."""
    ds: Dataset = {}
    _common(
        ds,
        room=room,
        patient=study.patient,
        study_uid=study.study_uid,
        accession=study.accession,
        study_description=study.study_description,
        start=study.start,
        weight_recorded=study.weight_recorded,
    )
    ds["ImageType"] = ["ORIGINAL", "PRIMARY", image_type]
    ds["SOPClassUID"] = CT_IMAGE
    ds["SOPInstanceUID"] = sop_uid
    when = acq.started
    ds["SeriesDate"] = ds["AcquisitionDate"] = ds["ContentDate"] = when.strftime("%Y%m%d")
    ds["SeriesTime"] = ds["AcquisitionTime"] = ds["ContentTime"] = when.strftime("%H%M%S")
    ds["Modality"] = "CT"
    ds["IrradiationEventUID"] = acq.event_uid
    ds["ImageComments"] = INVENTED_NOTICE
    ds["BodyPartExamined"] = study.body_part
    ds["ProtocolName"] = acq.protocol
    return ds


def ct_image(
    room: RoomSpec,
    study: CtStudy,
    acquisition_index: int,
    *,
    sop_uid: str | None = None,
    z_mm: float | None = None,
    instance_number: int = 1,
) -> Dataset:
    """One axial CT image of a helical acquisition, with its CTDIvol: the centre slice (its
    ``image_sop_uid``), or the slice at table position ``z_mm`` (the scan runs from z = 0 to
    z = -length) as ``sop_uid``. The pixels are the patient drawn as ellipses on the table
    (:mod:`beamaudit.api.demo.ct_pixels`)."""
    acq = study.acquisitions[acquisition_index]
    assert acq.ctdivol_mgy is not None and acq.image_sop_uid is not None
    if z_mm is None:
        z_mm = -acq.scanning_length_mm / 2
    ds = _ct_header(room, study, acq, "AXIAL", sop_uid or acq.image_sop_uid)
    ds["SeriesDescription"] = f"{acq.protocol} {acq.phase_label}".strip()
    ds["ScanOptions"] = "HELICAL MODE"
    ds["AcquisitionType"] = "SPIRAL"
    ds["SliceThickness"] = "5"
    ds["KVP"] = f"{acq.kvp_kv:g}"
    ds["DataCollectionDiameter"] = "500"
    fov = 250 if acq.head_phantom else 450
    ds["ReconstructionDiameter"] = str(fov)
    ds["DistanceSourceToDetector"] = "1085"
    ds["DistanceSourceToPatient"] = "595"
    ds["GantryDetectorTilt"] = "0"
    ds["TableHeight"] = "160"
    ds["RotationDirection"] = "CW"
    ds["ExposureTime"] = round(1000 * (acq.rotation_time_s or 1.0))
    ds["XRayTubeCurrent"] = round(acq.tube_current_ma)
    ds["Exposure"] = round(acq.tube_current_ma * (acq.rotation_time_s or 1.0))
    ds["FilterType"] = "HEAD FILTER" if acq.head_phantom else "BODY FILTER"
    ds["FocalSpots"] = "0.9"
    ds["ConvolutionKernel"] = "H30" if acq.head_phantom else "B30"
    ds["PatientPosition"] = "HFS"
    ds["RevolutionTime"] = acq.rotation_time_s
    ds["SingleCollimationWidth"] = acq.single_collimation_mm
    ds["TotalCollimationWidth"] = acq.total_collimation_mm
    pitch = acq.pitch or 1.0
    ds["TableFeedPerRotation"] = pitch * acq.total_collimation_mm
    ds["TableSpeed"] = pitch * acq.total_collimation_mm / (acq.rotation_time_s or 1.0)
    ds["SpiralPitchFactor"] = pitch
    ds["CTDIvol"] = acq.ctdivol_mgy
    ds["CTDIPhantomTypeCodeSequence"] = [
        {
            "CodeValue": "113690" if acq.head_phantom else "113691",
            "CodingSchemeDesignator": "DCM",
            "CodeMeaning": (
                "IEC Head Dosimetry Phantom" if acq.head_phantom else "IEC Body Dosimetry Phantom"
            ),
        }
    ]
    ds["ExposureModulationType"] = "ATCM_XYZ"
    ds["SeriesInstanceUID"] = acq.series_uid
    ds["SeriesNumber"] = acquisition_index + 2
    ds["AcquisitionNumber"] = acquisition_index + 1
    ds["InstanceNumber"] = instance_number
    ds["PatientOrientation"] = ""
    ds["FrameOfReferenceUID"] = study.frame_of_reference_uid
    ds["PositionReferenceIndicator"] = ""
    size = AXIAL_MATRIX
    pixel = fov / size
    corner = f"{-fov / 2 + pixel / 2:.4g}"
    ds["ImagePositionPatient"] = [corner, corner, f"{z_mm:.1f}"]
    ds["ImageOrientationPatient"] = ["1", "0", "0", "0", "1", "0"]
    ds["SliceLocation"] = f"{z_mm:.1f}"
    ds["PixelSpacing"] = [f"{pixel:.6g}"] * 2
    ds["RescaleIntercept"] = "-1024"
    ds["RescaleSlope"] = "1"
    ds["RescaleType"] = "HU"
    ds["WindowCenter"] = "40"
    ds["WindowWidth"] = "400"
    _image_pixels(ds, size, size)
    fraction = min(max(-z_mm / acq.scanning_length_mm, 0.0), 1.0)
    hu = axial_hu(study.patient, _size_region(study), z_fraction=fraction, fov_mm=fov)
    ds["PixelData"] = np.clip(np.round(hu + 1024.0), 0, 4095).astype("<u2").tobytes()
    return ds


def ct_localizer(room: RoomSpec, study: CtStudy, sop_uid: str) -> Dataset:
    """The frontal localizer of a CT study (its first acquisition), centred on the scan range of
    the helical acquisitions: rows along the table (head first), columns across the patient."""
    acq = study.acquisitions[0]
    scan = max(a.scanning_length_mm for a in study.acquisitions[1:])
    ds = _ct_header(room, study, acq, "LOCALIZER", sop_uid)
    ds["SeriesDescription"] = "TOPOGRAM AP"
    ds["ScanOptions"] = "SURVIEW"
    ds["AcquisitionType"] = "CONSTANT_ANGLE"
    ds["KVP"] = f"{acq.kvp_kv:g}"
    ds["XRayTubeCurrent"] = round(acq.tube_current_ma)
    ds["PatientPosition"] = "HFS"
    ds["SeriesInstanceUID"] = acq.series_uid
    ds["SeriesNumber"] = 1
    ds["AcquisitionNumber"] = 1
    ds["InstanceNumber"] = 1
    ds["PatientOrientation"] = ["L", "F"]
    ds["FrameOfReferenceUID"] = study.frame_of_reference_uid
    ds["PositionReferenceIndicator"] = ""
    width = 500.0
    rows = round(acq.scanning_length_mm / LOCALIZER_PIXEL_MM)
    top = -scan / 2 + rows * LOCALIZER_PIXEL_MM / 2
    ds["ImagePositionPatient"] = [f"{-width / 2 + LOCALIZER_PIXEL_MM / 2:g}", "0", f"{top:.1f}"]
    ds["ImageOrientationPatient"] = ["1", "0", "0", "0", "0", "-1"]  # coronal, head at the top
    ds["PixelSpacing"] = [f"{LOCALIZER_PIXEL_MM:g}"] * 2
    ds["RescaleIntercept"] = "0"
    ds["RescaleSlope"] = "1"
    ds["WindowCenter"] = "2000"
    ds["WindowWidth"] = "4000"
    signal = localizer_signal(study.patient, _size_region(study), rows=rows, width_mm=width)
    _image_pixels(ds, rows, signal.shape[1])
    ds["BitsStored"], ds["HighBit"] = 16, 15
    ds["PixelData"] = np.clip(np.round(signal), 0, 65535).astype("<u2").tobytes()
    return ds


def _sr_document(
    ds: Dataset, *, room: RoomSpec, sop_uid: str, series_uid: str, when: datetime, root: Dataset
) -> None:
    ds["SOPClassUID"] = XRAY_DOSE_SR
    ds["SOPInstanceUID"] = sop_uid
    ds["Modality"] = "SR"
    ds["SeriesDate"] = ds["ContentDate"] = when.strftime("%Y%m%d")
    ds["SeriesTime"] = ds["ContentTime"] = when.strftime("%H%M%S")
    ds["SeriesDescription"] = "Dose Report"
    ds["SeriesInstanceUID"] = series_uid
    ds["SeriesNumber"] = 990
    ds["InstanceNumber"] = 1
    ds["ReferencedPerformedProcedureStepSequence"] = []
    ds["CompletionFlag"] = "COMPLETE"
    ds["VerificationFlag"] = "UNVERIFIED"
    ds["PerformedProcedureCodeSequence"] = []
    ds.update(root)


def _observer(room: RoomSpec, device_uid: str) -> DeviceObserver:
    return DeviceObserver(
        uid=device_uid,
        name=room.station_name,
        manufacturer=room.manufacturer,
        model_name=room.model_name,
        serial_number=room.serial_number,
        location=f"{INSTITUTION}, {DEPARTMENT}, {room.name}",
    )


def fluoro_dose_report(room: RoomSpec, study: FluoroStudy, *, device_uid: str) -> Dataset:
    """The TID 10001 X-Ray Radiation Dose SR of one fluoroscopy examination."""
    ds: Dataset = {}
    _common(
        ds,
        room=room,
        patient=study.patient,
        study_uid=study.study_uid,
        accession=study.accession,
        study_description=study.study_description,
        start=study.start,
        weight_recorded=study.weight_recorded,
    )
    events = [
        ProjectionEventContent(
            event_uid=e.event_uid,
            started=e.started,
            fluoroscopy=e.fluoroscopy,
            protocol=study.protocol_name,
            target_region=study.target_region,
            dap_gy_m2=e.dap_reported_gy_cm2 * 1e-4,
            dose_rp_gy=e.dose_rp_reported_mgy * 1e-3,
            kvp_kv=e.kvp_kv,
            tube_current_ma=e.tube_current_ma,
            exposure_uas=e.exposure_mas * 1000,
            duration_s=e.duration_s,
            pulse_rate_per_s=e.pulse_rate_per_s,
            number_of_pulses=e.number_of_pulses,
            pulse_width_ms=e.pulse_width_ms,
            exposure_time_ms=e.exposure_time_ms,
            filters=e.filters,
            field_width_mm=e.field_width_mm,
            field_height_mm=e.field_height_mm,
            sid_mm=e.sid_mm,
            source_to_table_mm=e.source_to_table_mm,
            source_to_rp_mm=e.source_to_rp_mm,
            focal_spot_mm=0.6 if e.fluoroscopy else 1.0,
            geometry=e.geometry,
        )
        for e in study.events
    ]
    root = projection_dose_report_content(
        observer=_observer(room, device_uid),
        study_instance_uid=study.study_uid,
        events=events,
        comment=INVENTED_NOTICE,
    )
    _sr_document(
        ds,
        room=room,
        sop_uid=study.report_sop_uid,
        series_uid=study.report_series_uid,
        when=study.end,
        root=root,
    )
    return ds


def ct_dose_report(room: RoomSpec, study: CtStudy, *, device_uid: str) -> Dataset:
    """The TID 10011 X-Ray Radiation Dose SR of one CT examination."""
    ds: Dataset = {}
    _common(
        ds,
        room=room,
        patient=study.patient,
        study_uid=study.study_uid,
        accession=study.accession,
        study_description=study.study_description,
        start=study.start,
        weight_recorded=study.weight_recorded,
    )
    acquisitions = [
        CtAcquisitionContent(
            event_uid=a.event_uid,
            started=a.started,
            protocol=a.protocol,
            target_region=study.target_region,
            spiral=a.spiral,
            exposure_time_s=a.exposure_time_s,
            scanning_length_mm=a.scanning_length_mm,
            single_collimation_mm=a.single_collimation_mm,
            total_collimation_mm=a.total_collimation_mm,
            pitch=a.pitch,
            kvp_kv=a.kvp_kv,
            max_tube_current_ma=a.max_tube_current_ma,
            tube_current_ma=a.tube_current_ma,
            rotation_time_s=a.rotation_time_s,
            ctdivol_mgy=a.ctdivol_mgy,
            head_phantom=a.head_phantom,
            dlp_mgy_cm=a.dlp_mgy_cm,
            **_scanner_size(study, a),
        )
        for a in study.acquisitions
    ]
    root = ct_dose_report_content(
        observer=_observer(room, device_uid),
        study_instance_uid=study.study_uid,
        start=study.start,
        end=study.end,
        acquisitions=acquisitions,
        dlp_total_mgy_cm=study.dlp_total_mgy_cm,
        comment=INVENTED_NOTICE,
    )
    _sr_document(
        ds,
        room=room,
        sop_uid=study.report_sop_uid,
        series_uid=study.report_series_uid,
        when=study.end,
        root=root,
    )
    return ds
