"""The invented scenario of the beamaudit demo: a hospital, its rooms, their exams and techniques.

**Everything in this module is invented.** Hollowbrook General Hospital, its rooms, devices,
manufacturers, model names, serial numbers, patients and every number below are made up for the
demo; none describes a real hospital, device or person. Technique factors and patient sizes are
chosen to look like common practice for adult radiography, fluoroscopy and CT (``# common
practice`` below means "a plausible value of the trade", not a value read in a publication);
they are not recommendations.

The scenario is data: :data:`ROOMS` (one :class:`RoomSpec` per room), the view programs and
procedures of each room, :data:`CT_PROTOCOLS` and :data:`FLUORO_PROTOCOLS`; the findings planted
in it are :data:`beamaudit.api.demo.plants.PLANTED`. The generator
(:mod:`beamaudit.api.demo.generate`) turns it into DICOM files.

Exam types and DICOM terms follow the shipped catalogue and mapping rules
(``beamaudit/api/data/exam_types.csv``, ``mapping_rules.csv``): each view program names the exam
type its body part and view position map to.
"""

from __future__ import annotations

from dataclasses import dataclass, replace
from functools import partial
from types import MappingProxyType
from typing import Literal

__all__ = [
    "CT_PROTOCOLS",
    "DEPARTMENT",
    "FLUORO_PROTOCOLS",
    "INSTITUTION",
    "INVENTED_NOTICE",
    "PROCEDURES",
    "ROOMS",
    "CtProtocol",
    "FluoroProtocol",
    "Procedure",
    "RoomSpec",
    "ViewProgram",
]

INSTITUTION = "Hollowbrook General Hospital"
DEPARTMENT = "Diagnostic Imaging"
INVENTED_NOTICE = (
    "INVENTED DEMO DATA: Hollowbrook General Hospital, its devices and its patients do not exist"
)

Receptor = Literal["wall_bucky", "table_bucky", "direct"]
Delivery = Literal["folder", "cstore"]
RoomKind = Literal[
    "radiography", "mobile", "cr", "fluoroscopy", "interventional", "ct", "mammography"
]


@dataclass(frozen=True, slots=True)
class ViewProgram:
    """One projection of a room's exam menu: what the console writes and how it exposes.

    ``mas_ref`` is the tube charge for the 75 kg standard patient on a tube of output efficiency
    1; with ``aec`` the charge follows patient thickness
    (:func:`~beamaudit.api.demo.physics.aec_exposure_mas`), without it the radiographer judges
    it, on the R10 scale of mAs settings. ``field_cm`` is the collimated field at the image
    receptor (width x height).
    """

    exam_type: str
    protocol_name: str
    body_part: str
    view_position: str
    kvp_kv: float
    mas_ref: float
    sid_mm: float
    field_cm: tuple[float, float]
    thickness_ref_mm: float
    thickness_exponent: float
    doubling_mm: float
    receptor: Receptor
    aec: bool = True
    grid: bool = True


@dataclass(frozen=True, slots=True)
class Procedure:
    """A booked radiography examination: its study description and its views (program keys)."""

    key: str
    study_description: str
    views: tuple[str, ...]


@dataclass(frozen=True, slots=True)
class CtProtocol:
    """A CT protocol: a localiser and one helical acquisition (invented scanner constants).

    ``ctdivol_ref_mgy`` is the CTDIvol for the 75 kg standard patient; with tube-current modulation
    it scales as ``(W/75)**size_exponent``. ``ctdi_per_100mas_mgy`` is the scanner's CTDIvol per 100
    effective mAs at 120 kV in the protocol's phantom (invented, of the usual size).
    """

    key: str
    exam_type: str
    study_description: str
    protocol_name: str
    body_part: str
    target_region: tuple[str, str, str]
    phantom: Literal["head", "body"]
    kvp_kv: float
    ctdivol_ref_mgy: float
    size_exponent: float
    scan_length_mm: float
    scan_length_sd_mm: float
    pitch: float
    rotation_time_s: float
    single_collimation_mm: float
    n_channels: int
    ctdi_per_100mas_mgy: float
    localizer_length_mm: float


@dataclass(frozen=True, slots=True)
class FluoroProtocol:
    """A fluoroscopy examination: pulsed fluoroscopy runs and spot acquisitions (invented).

    Fluoroscopy runs use the room's 0.2 mm Cu spectral filter, spot images 0.1 mm Cu. Automatic
    brightness control raises kV and mA with patient size: ``kv = kv_ref * (W/75)**0.25``,
    ``ma = ma_ref * (W/75)**1.5`` (invented).
    """

    key: str
    exam_type: str
    study_description: str
    protocol_name: str
    target_region: tuple[str, str, str]
    fluoro_time_median_s: float
    fluoro_time_sigma: float
    runs: tuple[int, int]
    spots: tuple[int, int]
    kv_ref: float
    ma_ref: float
    spot_mas: float
    pulse_rate_per_s: float
    pulse_width_ms: float
    field_cm: tuple[float, float]


@dataclass(frozen=True, slots=True)
class RoomSpec:
    """One invented room (or mobile unit) and everything the generator needs to know about it."""

    key: str
    name: str
    station_name: str
    kind: RoomKind
    modality: str
    delivery: Delivery
    manufacturer: str
    model_name: str
    serial_number: str
    software_versions: str
    anode_angle_deg: float
    inherent_al_mm: float
    added_filters: tuple[tuple[str, float], ...]
    output_efficiency: float
    dap_meter_factor: float
    detector_mm: tuple[float, float]
    pixel_spacing_mm: float
    studies_per_weekday: float
    studies_per_weekend_day: float
    target_exposure_index: float
    calibrated: bool = False
    programs: MappingProxyType[str, ViewProgram] | None = None
    procedures: tuple[tuple[str, float], ...] = ()
    technique_recorded_fraction: float = 1.0
    weight_recorded_fraction: float = 0.95
    age_mean_y: float = 55.0
    age_sd_y: float = 19.0

    @property
    def filtration(self) -> tuple[tuple[str, float], ...]:
        """Total filtration layers, inherent first (material symbol, mm)."""
        return (("Al", self.inherent_al_mm), *self.added_filters)


# --------------------------------------------------------------------------- radiography views
# Geometry and technique of adult radiography, common practice for a digital room with AEC: chest
# at high kV on the wall stand (SID 180 cm), trunk views on the table bucky (SID 115 cm),
# extremities without grid directly on the detector. Field sizes are collimated fields at the
# receptor. Doubling thicknesses: about 4.5 cm of soft tissue doubles the mAs at 70-90 kV; chest
# exposures depend less on thickness (mostly lung), 8 cm. All common practice estimates. A view
# program's key is its exam type (one program per exam type and room).


def _view(
    exam_type: str,
    protocol: str,
    body_part: str,
    view: str,
    kvp_kv: float,
    mas_ref: float,
    field_cm: tuple[float, float],
    thickness_ref_mm: float,
    *,
    receptor: Receptor = "table_bucky",
    sid_mm: float = 1150.0,
    exponent: float = 0.4,
    doubling_mm: float = 45.0,
    aec: bool = True,
    grid: bool = True,
) -> ViewProgram:
    return ViewProgram(
        exam_type=exam_type,
        protocol_name=protocol,
        body_part=body_part,
        view_position=view,
        kvp_kv=kvp_kv,
        mas_ref=mas_ref,
        sid_mm=sid_mm,
        field_cm=field_cm,
        thickness_ref_mm=thickness_ref_mm,
        thickness_exponent=exponent,
        doubling_mm=doubling_mm,
        receptor=receptor,
        aec=aec,
        grid=grid,
    )


_wall = partial(_view, receptor="wall_bucky", sid_mm=1800.0, doubling_mm=80.0)
_heavy = partial(_view, doubling_mm=50.0)  # thick lateral views
_neck = partial(_view, exponent=0.3)
_neck_wall = partial(_view, receptor="wall_bucky", sid_mm=1500.0, exponent=0.3)
_head = partial(_view, exponent=0.1)
_knee = partial(_view, receptor="direct", sid_mm=1100.0, exponent=0.3, aec=False, grid=False)
_BASE_VIEWS: dict[str, ViewProgram] = {
    v.exam_type: v
    for v in (
        _wall("chest_pa", "CHEST PA", "CHEST", "PA", 125, 1.0, (35, 40), 230),
        _wall("chest_lat", "CHEST LAT", "CHEST", "LL", 125, 2.6, (30, 40), 320),
        _view("abdomen_ap", "ABDOMEN AP", "ABDOMEN", "AP", 80, 15.0, (35, 43), 230),
        _view("pelvis_ap", "PELVIS AP", "PELVIS", "AP", 78, 15.0, (43, 35), 220),
        _view("hip_ap", "HIP AP", "HIP", "AP", 75, 11.0, (24, 30), 200),
        _view("hip_lat", "HIP LAT", "HIP", "LL", 80, 18.0, (24, 30), 260),
        _view("lumbar_spine_ap", "L-SPINE AP", "LSPINE", "AP", 80, 17.0, (20, 40), 230),
        _heavy("lumbar_spine_lat", "L-SPINE LAT", "LSPINE", "LL", 90, 28.0, (18, 40), 320),
        _view("thoracic_spine_ap", "T-SPINE AP", "TSPINE", "AP", 77, 12.0, (17, 43), 220),
        _heavy("thoracic_spine_lat", "T-SPINE LAT", "TSPINE", "LL", 85, 20.0, (17, 43), 320),
        _neck("cervical_spine_ap", "C-SPINE AP", "CSPINE", "AP", 70, 8.0, (15, 20), 130),
        _neck_wall("cervical_spine_lat", "C-SPINE LAT", "CSPINE", "LL", 75, 10.0, (15, 24), 120),
        _head("skull_ap_pa", "SKULL PA", "SKULL", "PA", 75, 14.0, (24, 30), 190),
        _head("skull_lat", "SKULL LAT", "SKULL", "LL", 70, 10.0, (24, 30), 150),
        _knee("knee_ap", "KNEE AP", "KNEE", "AP", 65, 3.2, (18, 24), 120),
        _knee("knee_lat", "KNEE LAT", "KNEE", "LL", 65, 3.2, (18, 24), 110),
    )
}

# bedside: detector behind the patient, SID measured by the unit (about 100 cm), no AEC (the
# radiographer judges the charge), a clip-on grid for abdomen and pelvis; common practice
_bedside = partial(_view, receptor="direct", sid_mm=1050.0, aec=False)
_bedside_chest = partial(_bedside, sid_mm=1000.0, doubling_mm=60.0, grid=False)
_MOBILE_VIEWS: dict[str, ViewProgram] = {
    v.exam_type: v
    for v in (
        _bedside_chest("chest_ap", "CHEST AP BEDSIDE", "CHEST", "AP", 90, 2.0, (35, 40), 220),
        _bedside("abdomen_ap", "ABDOMEN AP BEDSIDE", "ABDOMEN", "AP", 80, 9.0, (35, 43), 230),
        _bedside("pelvis_ap", "PELVIS AP BEDSIDE", "PELVIS", "AP", 78, 9.0, (43, 35), 220),
    )
}

_PROCEDURES: dict[str, Procedure] = {
    p.key: p
    for p in (
        Procedure("chest", "XR CHEST", ("chest_pa",)),
        Procedure("chest2", "XR CHEST PA AND LATERAL", ("chest_pa", "chest_lat")),
        Procedure("abdomen", "XR ABDOMEN", ("abdomen_ap",)),
        Procedure("pelvis", "XR PELVIS", ("pelvis_ap",)),
        Procedure("hip", "XR HIP", ("hip_ap", "hip_lat")),
        Procedure("lspine", "XR LUMBAR SPINE", ("lumbar_spine_ap", "lumbar_spine_lat")),
        Procedure("tspine", "XR THORACIC SPINE", ("thoracic_spine_ap", "thoracic_spine_lat")),
        Procedure("cspine", "XR CERVICAL SPINE", ("cervical_spine_ap", "cervical_spine_lat")),
        Procedure("skull", "XR SKULL", ("skull_ap_pa", "skull_lat")),
        Procedure("knee", "XR KNEE", ("knee_ap", "knee_lat")),
        Procedure("mobile_chest", "XR CHEST MOBILE", ("chest_ap",)),
        Procedure("mobile_abdomen", "XR ABDOMEN MOBILE", ("abdomen_ap",)),
        Procedure("mobile_pelvis", "XR PELVIS MOBILE", ("pelvis_ap",)),
    )
}


def _programs(
    base: dict[str, ViewProgram], **changes: dict[str, float]
) -> MappingProxyType[str, ViewProgram]:
    out = dict(base)
    for key, change in changes.items():
        out[key] = replace(out[key], **change)  # type: ignore[arg-type]
    return MappingProxyType(out)


# Each room's programs differ a little from the base (kV habits, AEC dose levels); the invented
# local levels are set at about 1.5-1.7 times the healthy rooms' median DAP and ESAK.
_RAD1_PROGRAMS = _programs(_BASE_VIEWS, abdomen_ap={"mas_ref": 13.0}, pelvis_ap={"mas_ref": 13.0})
_RAD2_PROGRAMS = _programs(
    _BASE_VIEWS,
    chest_pa={"kvp_kv": 117, "mas_ref": 1.2},
    chest_lat={"kvp_kv": 117, "mas_ref": 3.0},
    abdomen_ap={"mas_ref": 11.0},
    lumbar_spine_ap={"mas_ref": 15.0},
)
_CR_PROGRAMS = _programs(
    _BASE_VIEWS,
    # a storage-phosphor room: about 1.3 times the charge of the flat-panel rooms (common practice)
    chest_pa={"kvp_kv": 110, "mas_ref": 1.45},
    chest_lat={"kvp_kv": 110, "mas_ref": 3.6},
    abdomen_ap={"mas_ref": 17.0},
    pelvis_ap={"mas_ref": 17.0},
    hip_ap={"mas_ref": 14.0},
    hip_lat={"mas_ref": 22.0},
    knee_ap={"mas_ref": 4.0},
    knee_lat={"mas_ref": 4.0},
)
_MOBILE_PROGRAMS = MappingProxyType(dict(_MOBILE_VIEWS))

ROOMS: tuple[RoomSpec, ...] = (
    RoomSpec(
        key="rad1",
        name="RAD 1",
        station_name="HGH-RAD1",
        kind="radiography",
        modality="DX",
        delivery="folder",
        manufacturer="Wrenfield Imaging",
        model_name="WR-700 DR",
        serial_number="WR7-10231",
        software_versions="WR-OS 5.2.1",
        anode_angle_deg=12.0,
        inherent_al_mm=1.5,
        added_filters=(("Al", 1.0),),
        output_efficiency=0.93,
        dap_meter_factor=1.0,
        detector_mm=(430.0, 430.0),
        pixel_spacing_mm=10.0,
        studies_per_weekday=7.0,
        studies_per_weekend_day=0.0,
        target_exposure_index=400.0,
        calibrated=True,
        programs=_RAD1_PROGRAMS,
        procedures=(
            ("chest", 0.30),
            ("chest2", 0.22),
            ("abdomen", 0.06),
            ("pelvis", 0.06),
            ("hip", 0.06),
            ("lspine", 0.08),
            ("tspine", 0.03),
            ("cspine", 0.04),
            ("skull", 0.03),
            ("knee", 0.12),
        ),
    ),
    RoomSpec(
        key="rad2",
        name="RAD 2",
        station_name="HGH-RAD2",
        kind="radiography",
        modality="DX",
        delivery="cstore",
        manufacturer="Wrenfield Imaging",
        model_name="WR-700 DR",
        serial_number="WR7-10477",
        software_versions="WR-OS 5.2.1",
        anode_angle_deg=12.0,
        inherent_al_mm=1.5,
        added_filters=(("Al", 1.0),),
        output_efficiency=1.02,
        dap_meter_factor=1.03,
        detector_mm=(430.0, 430.0),
        pixel_spacing_mm=10.0,
        studies_per_weekday=8.0,
        studies_per_weekend_day=0.0,
        target_exposure_index=400.0,
        programs=_RAD2_PROGRAMS,
        procedures=(
            ("chest", 0.14),
            ("chest2", 0.06),
            ("abdomen", 0.39),
            ("pelvis", 0.10),
            ("hip", 0.07),
            # fewer than 20 lumbar spines a month: the lateral view's ESAK spreads too widely
            # (thick patients) for one level to sit far from both its half and twice a single exam
            ("lspine", 0.08),
            ("tspine", 0.04),
            ("cspine", 0.05),
            ("skull", 0.02),
            ("knee", 0.05),
        ),
    ),
    RoomSpec(
        key="cr1",
        name="CR 1",
        station_name="HGH-CR1",
        kind="cr",
        modality="CR",
        delivery="folder",
        manufacturer="Corvale Medical",
        model_name="CV-CR 3",
        serial_number="CV3-55012",
        software_versions="CVR 3.4",
        anode_angle_deg=14.0,
        inherent_al_mm=1.5,
        added_filters=(("Al", 1.0),),
        output_efficiency=0.97,
        dap_meter_factor=0.97,
        detector_mm=(350.0, 430.0),
        pixel_spacing_mm=10.0,
        studies_per_weekday=4.0,
        studies_per_weekend_day=0.0,
        target_exposure_index=500.0,
        programs=_CR_PROGRAMS,
        procedures=(
            ("chest", 0.30),
            ("chest2", 0.10),
            ("abdomen", 0.10),
            ("pelvis", 0.10),
            ("hip", 0.10),
            ("knee", 0.30),
        ),
        # the reader learns kV and mAs only when the radiographer types them in (common for
        # cassette rooms); otherwise it writes 0, "not recorded"
        technique_recorded_fraction=0.6,
    ),
    RoomSpec(
        key="mobile1",
        name="MOBILE 1",
        station_name="HGH-MOB1",
        kind="mobile",
        modality="DX",
        delivery="cstore",
        manufacturer="Corvale Medical",
        model_name="CV-M2 Mobile",
        serial_number="CVM-20877",
        software_versions="CVM 2.0.7",
        anode_angle_deg=16.0,
        inherent_al_mm=2.5,
        added_filters=(),
        output_efficiency=0.98,
        dap_meter_factor=1.02,
        detector_mm=(350.0, 430.0),
        pixel_spacing_mm=10.0,
        studies_per_weekday=5.0,
        studies_per_weekend_day=3.0,
        target_exposure_index=300.0,
        programs=_MOBILE_PROGRAMS,
        procedures=(("mobile_chest", 0.86), ("mobile_abdomen", 0.08), ("mobile_pelvis", 0.06)),
        weight_recorded_fraction=0.9,
        age_mean_y=71.0,
        age_sd_y=14.0,
    ),
    RoomSpec(
        key="fluoro1",
        name="FLUORO 1",
        station_name="HGH-FL1",
        kind="fluoroscopy",
        modality="RF",
        delivery="cstore",
        manufacturer="Halden & Pike Radiologic",
        model_name="HP-RF 9",
        serial_number="HPRF9-0412",
        software_versions="HPR 9.1",
        anode_angle_deg=12.0,
        inherent_al_mm=2.5,
        added_filters=(("Cu", 0.2),),
        output_efficiency=1.0,
        dap_meter_factor=0.98,
        detector_mm=(430.0, 430.0),
        pixel_spacing_mm=10.0,
        studies_per_weekday=4.0,
        studies_per_weekend_day=0.0,
        target_exposure_index=0.0,
        weight_recorded_fraction=0.95,
        age_mean_y=58.0,
        age_sd_y=16.0,
    ),
    RoomSpec(
        key="ct1",
        name="CT 1",
        station_name="HGH-CT1",
        kind="ct",
        modality="CT",
        delivery="folder",
        manufacturer="Brindlewood Systems",
        model_name="BW-CT64",
        serial_number="BW64-3308",
        software_versions="BWCT 12.3",
        anode_angle_deg=7.0,
        inherent_al_mm=3.0,
        added_filters=(),
        output_efficiency=1.0,
        dap_meter_factor=1.0,
        detector_mm=(500.0, 500.0),
        pixel_spacing_mm=31.25,
        studies_per_weekday=5.0,
        studies_per_weekend_day=2.0,
        target_exposure_index=0.0,
        weight_recorded_fraction=0.95,
        age_mean_y=62.0,
        age_sd_y=16.0,
    ),
    # a W/Rh screening unit (beamaudit.api.demo.mammography); listed last, so that the other
    # rooms' random draws are those they were before it was added
    RoomSpec(
        key="mammo1",
        name="MAMMO 1",
        station_name="HGH-MAMMO1",
        kind="mammography",
        modality="MG",
        delivery="folder",
        manufacturer="Larkspur Medical",
        model_name="LK-Breast 3",
        serial_number="LKB-30418",
        software_versions="LK 3.1.7",
        anode_angle_deg=16.0,
        inherent_al_mm=0.0,
        added_filters=(("Rh", 0.05),),
        output_efficiency=1.0,
        dap_meter_factor=1.0,
        detector_mm=(240.0, 300.0),
        pixel_spacing_mm=10.0,
        studies_per_weekday=4.0,
        studies_per_weekend_day=0.0,
        target_exposure_index=0.0,
        weight_recorded_fraction=0.0,
        age_mean_y=58.0,
        age_sd_y=6.0,
    ),
    # an interventional C-arm whose dose reports carry the beam and table geometry (TID 10003C);
    # its procedures are few and planted (beamaudit.api.demo.interventional)
    RoomSpec(
        key="angio1",
        name="ANGIO 1",
        station_name="HGH-IR1",
        kind="interventional",
        modality="XA",
        delivery="cstore",
        manufacturer="Halden & Pike Radiologic",
        model_name="HP-XA 4",
        serial_number="HPXA4-0077",
        software_versions="HPX 4.2",
        anode_angle_deg=11.0,
        inherent_al_mm=2.5,
        added_filters=(("Cu", 0.3),),
        output_efficiency=1.0,
        dap_meter_factor=1.0,
        detector_mm=(300.0, 300.0),
        pixel_spacing_mm=10.0,
        studies_per_weekday=0.0,
        studies_per_weekend_day=0.0,
        target_exposure_index=0.0,
        weight_recorded_fraction=1.0,
        age_mean_y=66.0,
        age_sd_y=10.0,
    ),
)

PROCEDURES = MappingProxyType(_PROCEDURES)

# ------------------------------------------------------------------------------------------ CT
# Invented scanner constants of the usual size for a 64-slice scanner: CTDIvol per 100 effective
# mAs at 120 kV about 16 mGy in the 16 cm head phantom and 7 mGy in the 32 cm body phantom
# (common practice). Reference CTDIvol and DLP values sit at about 60-70 % of the strictest shipped
# level (UK NDRL or the invented local one): away from it and from half of it (the low-dose review).
CT_PROTOCOLS: tuple[tuple[CtProtocol, float], ...] = (
    (
        CtProtocol(
            key="ct_head",
            exam_type="ct_head",
            study_description="CT HEAD",
            protocol_name="HEAD ROUTINE",
            body_part="HEAD",
            target_region=("69536005", "SCT", "Head"),
            phantom="head",
            kvp_kv=120,
            ctdivol_ref_mgy=30.0,
            size_exponent=0.1,
            scan_length_mm=170,
            scan_length_sd_mm=12,
            pitch=0.55,
            rotation_time_s=1.0,
            ctdi_per_100mas_mgy=16.0,
            localizer_length_mm=250,
            single_collimation_mm=0.625,
            n_channels=64,
        ),
        0.40,
    ),
    (
        CtProtocol(
            key="ct_chest",
            exam_type="ct_chest",
            study_description="CT CHEST",
            protocol_name="CHEST ROUTINE",
            body_part="CHEST",
            target_region=("816094009", "SCT", "Chest"),
            phantom="body",
            kvp_kv=110,
            ctdivol_ref_mgy=5.8,
            size_exponent=1.0,
            scan_length_mm=345,
            scan_length_sd_mm=25,
            pitch=0.984,
            rotation_time_s=0.5,
            ctdi_per_100mas_mgy=7.0,
            localizer_length_mm=500,
            single_collimation_mm=0.625,
            n_channels=64,
        ),
        0.30,
    ),
    (
        CtProtocol(
            key="ct_abdomen_pelvis",
            exam_type="ct_abdomen_pelvis",
            study_description="CT ABDOMEN PELVIS",
            protocol_name="ABDO PELVIS PORTAL",
            body_part="ABDOMEN",
            target_region=("818981001", "SCT", "Abdomen"),
            phantom="body",
            kvp_kv=120,
            ctdivol_ref_mgy=6.9,
            size_exponent=1.0,
            scan_length_mm=510,
            scan_length_sd_mm=35,
            pitch=0.984,
            rotation_time_s=0.5,
            ctdi_per_100mas_mgy=7.0,
            localizer_length_mm=650,
            single_collimation_mm=0.625,
            n_channels=64,
        ),
        0.30,
    ),
)

# ----------------------------------------------------------------------------------- fluoroscopy
# An under-couch fluoroscopy room: pulsed fluoroscopy at 7.5 pulses/s, 8 ms pulses, 0.2 mm Cu;
# spot images at 0.1 mm Cu. Screening times and spot counts are common-practice guesses for
# adult contrast studies; median totals sit at about 60-65 % of the shipped invented local levels.
FLUORO_PROTOCOLS: tuple[tuple[FluoroProtocol, float], ...] = (
    (
        FluoroProtocol(
            key="swallow",
            exam_type="fluoro_barium_swallow",
            study_description="FL BARIUM SWALLOW",
            protocol_name="BARIUM SWALLOW",
            target_region=("32849002", "SCT", "Esophagus"),
            fluoro_time_median_s=110,
            runs=(2, 4),
            spots=(3, 6),
            kv_ref=78,
            ma_ref=18,
            spot_mas=10.0,
            field_cm=(25, 30),
            pulse_rate_per_s=7.5,
            pulse_width_ms=8.0,
            fluoro_time_sigma=0.25,
        ),
        0.40,
    ),
    (
        FluoroProtocol(
            key="meal",
            exam_type="fluoro_barium_meal",
            study_description="FL BARIUM MEAL",
            protocol_name="BARIUM MEAL",
            target_region=("69695003", "SCT", "Stomach"),
            fluoro_time_median_s=180,
            runs=(3, 5),
            spots=(4, 7),
            kv_ref=82,
            ma_ref=18,
            spot_mas=12.0,
            field_cm=(28, 30),
            pulse_rate_per_s=7.5,
            pulse_width_ms=8.0,
            fluoro_time_sigma=0.25,
        ),
        0.30,
    ),
    (
        FluoroProtocol(
            key="enema",
            exam_type="fluoro_barium_enema",
            study_description="FL BARIUM ENEMA",
            protocol_name="BARIUM ENEMA",
            target_region=("71854001", "SCT", "Colon"),
            fluoro_time_median_s=240,
            runs=(4, 6),
            spots=(5, 8),
            kv_ref=85,
            ma_ref=15,
            spot_mas=12.0,
            field_cm=(30, 35),
            pulse_rate_per_s=7.5,
            pulse_width_ms=8.0,
            fluoro_time_sigma=0.25,
        ),
        0.30,
    ),
)
