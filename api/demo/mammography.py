"""The demo's mammography room: screening mammograms of a W/Rh unit, and its planted finding.

**Everything here is invented**: the room, its unit, the women, and every number. The unit is a
tungsten-anode system with a 0.05 mm rhodium filter (a W/Rh beam); each study is the four views
of a screening round (right and left CC and MLO), written as Digital Mammography X-Ray images
with the Breast dose fields a unit writes: Body Part Thickness (the compressed thickness),
Compression Force, kV, the exposure in uAs, Anode Target Material, Filter Material and
thickness, View Position, Image Laterality, Patient's Age, Organ Dose (0040,0316) **in dGy** and
Organ Exposed BREAST.

The unit's own average glandular dose (what Organ Dose reports) follows its AEC: about
``agd_ref`` at 55 mm, doubling every 20 mm of breast (common practice shape, invented numbers),
with a few percent spread; the tube loading is then the unit's AGD over what its own dosimetry
method gives per mAs, taken as beamaudit's Dance-method figure times ``VENDOR_FACTOR`` (the
unit's method reads 10 % above ours, a constant a review sees as the room's AGD ratio).

Planted (:data:`MAMMOGRAPHY_PLAN`): the CC views' AGD runs at 1.2 times the invented local level
of ``mammo_cc`` (2.0 mGy) in the 50-60 mm band, every month, so the review's group of that view
and band is above the local level; the MLO views stay at about 0.75 times theirs (2.3 mGy).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from datetime import date, datetime, timedelta
from functools import lru_cache
from typing import Any

import numpy as np

from beamaudit.api.demo.context import _GIVEN_F, _SURNAMES, SimulationContext, at
from beamaudit.api.demo.dicom_objects import _common, presentation_pixels
from beamaudit.api.demo.records import Patient
from beamaudit.api.demo.scenario import INVENTED_NOTICE, RoomSpec

__all__ = [
    "MAMMOGRAPHY_IMAGE",
    "MAMMOGRAPHY_PLAN",
    "VENDOR_FACTOR",
    "MammoStudy",
    "MammoView",
    "MammographyPlan",
    "mammogram",
    "simulate_mammography",
]

#: Digital Mammography X-Ray Image Storage - For Presentation (PS3.4)
MAMMOGRAPHY_IMAGE = "1.2.840.10008.5.1.4.1.1.1.2"
#: the unit's AGD over beamaudit's D_G for the same exposure (invented)
VENDOR_FACTOR = 1.10
_VIEWS = (("R", "CC"), ("L", "CC"), ("R", "MLO"), ("L", "MLO"))


@dataclass(frozen=True, slots=True)
class MammographyPlan:
    """The mammography room's planted finding (see the module docstring)."""

    room: str = "mammo1"
    exam_type: str = "mammo_cc"
    band_mm: tuple[float, float] = (50.0, 60.0)
    #: the unit's AGD at 55 mm per view, mGy: CC 1.2 x the local level, MLO 0.75 x its level
    agd_ref_mgy: tuple[tuple[str, float], ...] = (("CC", 2.4), ("MLO", 1.72))


MAMMOGRAPHY_PLAN = MammographyPlan()


@dataclass(slots=True)
class MammoView:
    """One exposure of one breast."""

    index: int
    laterality: str  # R or L
    view_position: str  # CC or MLO
    exam_type: str
    sop_uid: str
    event_uid: str
    acquired: datetime
    thickness_mm: float
    compression_force_n: float
    kvp_kv: float
    exposure_mas: float
    mgd_mgy: float  # the unit's own
    planted: list[str] = field(default_factory=list)


@dataclass(slots=True)
class MammoStudy:
    """A screening round: the four views of both breasts in one series."""

    room: str
    study_uid: str
    series_uid: str
    accession: str
    patient: Patient
    start: datetime
    study_description: str
    views: list[MammoView] = field(default_factory=list)


@lru_cache(maxsize=512)
def _dance_per_mas(kv: float, thickness_mm: float) -> float:
    """beamaudit's D_G per mAs of the unit's W/Rh beam (50-64 age group's glandularity)."""
    from beamaudit.model import FilterSpec
    from beamaudit.model.glandular_dose import mean_glandular_dose
    from beamaudit.model.mammography import MammographyTechnique

    technique = MammographyTechnique(
        kv=kv, anode="W", filters=(FilterSpec("Rh", 0.05),), thickness_mm=thickness_mm
    )
    return mean_glandular_dose(technique, exposure_mas=1.0).mgd_mgy


def _kv(thickness_mm: float) -> float:
    """The AEC's voltage for a W/Rh beam: 26 kV at 40 mm, one more per 10 mm (invented)."""
    return float(np.clip(round(26.0 + (thickness_mm - 40.0) / 10.0), 25.0, 33.0))


def _patient(rng: np.random.Generator, on: date, number: int) -> Patient:
    age = float(np.clip(rng.normal(58.0, 6.0), 47.0, 73.0))  # a screening programme's ages
    birth = on - timedelta(days=int(age * 365.25 + rng.integers(0, 365)))
    return Patient(
        patient_id=f"HM{number:07d}",
        name=f"{_SURNAMES[int(rng.integers(len(_SURNAMES)))]}^"
        f"{_GIVEN_F[int(rng.integers(len(_GIVEN_F)))]}",
        sex="F",
        birth_date=birth,
        height_m=float(np.clip(rng.normal(1.63, 0.065), 1.45, 1.85)),
        weight_kg=float(np.clip(rng.normal(70.0, 13.0), 42.0, 140.0)),
    )


def _view(
    ctx: SimulationContext, study: MammoStudy, rng: np.random.Generator, index: int,
    laterality: str, view: str, cc_thickness: float, plan: MammographyPlan,
) -> MammoView:  # fmt: skip
    thickness = cc_thickness if view == "CC" else cc_thickness + float(rng.normal(4.0, 2.0))
    thickness = float(np.clip(round(thickness), 25.0, 95.0))
    agd_ref = dict(plan.agd_ref_mgy)[view]
    agd = agd_ref * 2.0 ** ((thickness - 55.0) / 20.0) * math.exp(float(rng.normal(0.0, 0.06)))
    kv = _kv(thickness)
    bucket = 5.0 * round(thickness / 5.0)  # the unit's method in 5 mm steps
    mas = round(agd / (VENDOR_FACTOR * _dance_per_mas(kv, bucket)), 1)
    planted = []
    low, high = plan.band_mm
    if f"mammo_{view.lower()}" == plan.exam_type and low <= thickness < high:
        planted.append("group_above_level")
    return MammoView(
        index=index,
        laterality=laterality,
        view_position=view,
        exam_type=f"mammo_{view.lower()}",
        sop_uid=ctx.uids.uid("image", study.study_uid, index),
        event_uid=ctx.uids.uid("event", study.study_uid, index),
        acquired=study.start + timedelta(minutes=index + float(rng.uniform(0, 0.8))),
        thickness_mm=thickness,
        compression_force_n=float(round(np.clip(rng.normal(95.0, 20.0), 40.0, 180.0))),
        kvp_kv=kv,
        exposure_mas=mas,
        mgd_mgy=round(agd, 3),
        planted=planted,
    )


def simulate_mammography(
    room: RoomSpec, ctx: SimulationContext, plan: MammographyPlan = MAMMOGRAPHY_PLAN
) -> list[MammoStudy]:
    """Every screening round of the mammography room over the context's calendar."""
    rng = ctx.rng(f"mammography:{room.key}")
    studies: list[MammoStudy] = []
    number = 0
    for day in ctx.calendar.days():
        rate = room.studies_per_weekday if day.weekday() < 5 else room.studies_per_weekend_day
        n = int(rng.poisson(rate))
        for seq, hour in enumerate(np.sort(rng.uniform(8.5, 16.5, n))):
            number += 1
            accession = f"HM{day:%Y%m%d}{seq:02d}"
            study_uid = ctx.uids.uid("study", room.key, accession)
            study = MammoStudy(
                room=room.key,
                study_uid=study_uid,
                series_uid=ctx.uids.uid("series", study_uid),
                accession=accession,
                patient=_patient(rng, day, number),
                start=at(day, float(hour)),
                study_description="SCREENING MAMMOGRAPHY",
            )
            # compressed thickness of a screening population: about 55 +/- 9 mm (invented)
            thickness = {side: float(rng.normal(55.0, 9.0)) for side in ("R", "L")}
            for index, (side, view) in enumerate(_VIEWS):
                study.views.append(_view(ctx, study, rng, index, side, view, thickness[side], plan))
            studies.append(study)
    return studies


def mammogram(room: RoomSpec, study: MammoStudy, view: MammoView) -> dict[str, Any]:
    """A Digital Mammography X-Ray image (For Presentation) of one view, with its dose fields."""
    ds: dict[str, Any] = {}
    _common(
        ds, room=room, patient=study.patient, study_uid=study.study_uid,
        accession=study.accession, study_description=study.study_description,
        start=study.start, weight_recorded=False,
    )  # fmt: skip
    when = view.acquired
    ds["ImageType"] = ["ORIGINAL", "PRIMARY"]
    ds["SOPClassUID"] = MAMMOGRAPHY_IMAGE
    ds["SOPInstanceUID"] = view.sop_uid
    ds["SeriesDate"] = ds["AcquisitionDate"] = ds["ContentDate"] = when.strftime("%Y%m%d")
    ds["SeriesTime"] = study.start.strftime("%H%M%S")
    ds["AcquisitionTime"] = ds["ContentTime"] = when.strftime("%H%M%S")
    ds["AcquisitionDateTime"] = when.strftime("%Y%m%d%H%M%S")
    ds["Modality"] = "MG"
    ds["PresentationIntentType"] = "FOR PRESENTATION"
    # the procedure performed (General Study, Type 3): an invented local code whose meaning
    # says screening, as ingest reads it (ingest/headers.py::_read_intent)
    ds["ProcedureCodeSequence"] = [
        {
            "CodeValue": "MGSCR2",
            "CodingSchemeDesignator": "99FERNMOOR",
            "CodeMeaning": "Screening mammography, both breasts",
        }
    ]
    ds["SeriesDescription"] = f"{view.laterality}{view.view_position}"
    ds["IrradiationEventUID"] = view.event_uid
    ds["ImageComments"] = INVENTED_NOTICE
    ds["BodyPartExamined"] = "BREAST"
    ds["ProtocolName"] = f"{view.laterality}{view.view_position}"
    ds["ViewPosition"] = view.view_position
    ds["KVP"] = f"{view.kvp_kv:g}"
    ds["ExposureInuAs"] = round(view.exposure_mas * 1000)
    ds["Exposure"] = round(view.exposure_mas)
    ds["ExposureControlMode"] = "AUTOMATIC"
    ds["BodyPartThickness"] = f"{view.thickness_mm:.0f}"
    ds["CompressionForce"] = f"{view.compression_force_n:.0f}"
    ds["AnodeTargetMaterial"] = "TUNGSTEN"
    ds["FilterMaterial"] = "RHODIUM"
    ds["FilterThicknessMinimum"] = "0.05"
    ds["FilterThicknessMaximum"] = "0.05"
    ds["OrganDose"] = f"{view.mgd_mgy / 100.0:.6g}"  # dGy (DICOM PS3.3)
    ds["OrganExposed"] = "BREAST"
    ds["BreastImplantPresent"] = "NO"
    ds["ImageLaterality"] = view.laterality
    spacing = f"{room.pixel_spacing_mm:g}"
    ds["ImagerPixelSpacing"] = [spacing, spacing]
    ds["DetectorType"] = "DIRECT"
    ds["SeriesInstanceUID"] = study.series_uid
    ds["SeriesNumber"] = 1
    ds["InstanceNumber"] = view.index + 1
    ds["PatientOrientation"] = ["A", "R"] if view.laterality == "L" else ["P", "L"]
    presentation_pixels(ds, room)
    return ds
