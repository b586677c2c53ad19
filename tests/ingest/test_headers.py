"""Image-header parsing against real files shipped in pydicom and pydicom-data.

Expected values are the files' own attribute values, as listed in DICOM-NOTES
section 4 (read there with pydicom 3.0.2): CT_small.dcm (NEMA WG04 CT1, GE),
bad_sequence.dcm (Siemens CT with CTDIvol), RG1_UNCI.dcm (Philips CR with a
DAP), the Agfa CR files of dicomdirtests/77654033 (KVP and Exposure 0).
Synthetic enhanced objects check the functional-group rules of PS3.3 C.7.6.16.
"""

from __future__ import annotations

import itertools

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from ingest_samples import DICOMDIR_TESTS, PSEUDONYMISER, header, sample, to_bytes
from pydicom import dcmread
from pydicom.dataset import Dataset
from pydicom.sequence import Sequence
from pydicom.uid import generate_uid

from beamaudit.ingest import IngestError, read_bytes, read_dataset, read_file
from beamaudit.ingest.events import FilterLayer
from beamaudit.ingest.headers import parse_filter_text


def one_event(path: str):
    result = read_file(path, pseudonymiser=PSEUDONYMISER)
    assert len(result.events) == 1
    return result.events[0]


def test_ct_small_technique_and_geometry() -> None:
    # DICOM-NOTES 4: KVP 120, XRayTubeCurrent 170, ExposureTime 1601, Exposure 170,
    # DistanceSourceToDetector 1099.3100585938, DistanceSourceToPatient 630, FocalSpots 0.7
    event = one_event(sample("CT_small.dcm"))
    assert event.kvp_kv == 120.0
    assert event.tube_current_ma == 170.0
    assert event.exposure_time_ms == 1601.0
    assert event.exposure_mas == 170.0
    assert event.sid_mm == 1099.3100585938
    assert event.source_to_patient_mm == 630.0
    assert event.focal_spot_mm == 0.7
    assert event.filter_type == "LARGE BOWTIE FIL"
    assert event.event_type == "ct_spiral"  # ScanOptions HELICAL MODE
    assert event.manufacturer == "GE MEDICAL SYSTEMS"
    assert event.station_name == "CT01_OC0"
    assert event.modality_family == "ct"
    assert event.ctdivol_mgy is None and event.dlp_mgy_cm is None


def test_ct_small_placeholders_are_not_recorded() -> None:
    # PatientWeight 0.000000 and PatientAge 000Y (anonymised) mean "not recorded"
    event = one_event(sample("CT_small.dcm"))
    assert event.patient_weight_kg is None
    assert event.patient_age_years is None
    assert event.patient_sex == "O"
    assert any("PatientWeight" in note for note in event.notes)


def test_ct_small_provenance_names_the_tags() -> None:
    event = one_event(sample("CT_small.dcm"))
    assert event.provenance["kvp_kv"] == "(0018,0060) KVP"
    assert event.provenance["exposure_mas"] == "(0018,1152) Exposure"
    assert event.provenance["tube_current_ma"] == "(0018,1151) XRayTubeCurrent"


def test_bad_sequence_ctdivol_is_read_as_is() -> None:
    # DICOM-NOTES 4: KVP 120, mA 442, ExposureTime 1000, Exposure 442,
    # CTDIvol 29.769628200000003 (FD)
    event = one_event(sample("bad_sequence.dcm"))
    assert event.kvp_kv == 120.0
    assert event.tube_current_ma == 442.0
    assert event.exposure_time_ms == 1000.0
    assert event.exposure_mas == 442.0
    assert event.ctdivol_mgy == 29.769628200000003
    assert event.provenance["ctdivol_mgy"] == "(0018,9345) CTDIvol"
    assert event.ct_pitch_factor == 1.0
    assert event.ct_total_collimation_mm == 38.4
    assert event.sid_mm == 1085.6
    assert event.body_part == "NECK"
    assert event.dlp_mgy_cm is None  # image headers carry no DLP


def test_rg1_cr_dap_converted_from_dgy_cm2() -> None:
    # (0018,115E) 1.200 dGy·cm² = 0.12 Gy·cm² (PS3.3 C.8.7.8: DAP in dGy*cm*cm)
    event = one_event(sample("RG1_UNCI.dcm"))
    assert event.dap_gy_cm2 == pytest.approx(0.12, rel=1e-12)
    assert event.provenance["dap_gy_cm2"] == "(0018,115E) ImageAndFluoroscopyAreaDoseProduct"
    assert event.kvp_kv == 150.0
    assert event.exposure_mas == 2.0
    assert event.exposure_time_ms == 8.0
    assert event.sid_mm == 1996.0
    assert event.station_name == "THORAVISION"
    assert event.device_serial_number == "92.00.003"
    assert event.view_position == "PA"


def test_rg1_filter_text_becomes_layers_and_edges_are_not_a_field() -> None:
    event = one_event(sample("RG1_UNCI.dcm"))
    assert event.filter_type == "0.1Cu 1Al"
    assert event.filters == (FilterLayer("copper", 0.1), FilterLayer("aluminium", 1.0))
    # edges -184/184 are not pixel positions (DICOM-NOTES 1.3): kept, no field size
    assert event.collimator_edges_px == (-184, 184, 907, 1299)
    assert event.field_width_mm is None


@pytest.mark.parametrize(
    "relative", ["77654033/CR1/6154", "77654033/CR2/6247", "77654033/CR3/6278"]
)
def test_agfa_cr_zero_technique_is_kept_without_technique(relative: str) -> None:
    # DICOM-NOTES 4: Agfa ADC CR, KVP 0 and Exposure 0 -> "not recorded", event kept
    event = one_event(str(DICOMDIR_TESTS / relative))
    assert event.kvp_kv is None
    assert event.exposure_mas is None
    assert event.manufacturer == "Agfa-Gevaert AG"
    assert any("KVP recorded as 0" in note for note in event.notes)


def test_ct_images_of_one_acquisition_share_an_acquisition_key() -> None:
    # GE axial images: (0020,0012) AcquisitionNumber tells which images one rotation made
    paths = sorted((DICOMDIR_TESTS / "77654033" / "CT2").iterdir())
    events = [one_event(str(p)) for p in paths]
    numbers = [int(dcmread(p, stop_before_pixels=True).AcquisitionNumber) for p in paths]
    assert len(set(numbers)) < len(numbers)  # the sample has two images of one acquisition
    for (event_a, number_a), (event_b, number_b) in itertools.combinations(
        zip(events, numbers, strict=True), 2
    ):
        assert (event_a.acquisition_key == event_b.acquisition_key) == (number_a == number_b)
    assert len({e.event_key for e in events}) == len(events)  # one event per image
    assert {e.kvp_kv for e in events} == {140.0}
    assert {e.exposure_mas for e in events} == {420.0}


def test_scout_mode_is_a_localizer() -> None:
    event = one_event(str(DICOMDIR_TESTS / "98892001" / "CT2N" / "6924"))
    assert event.event_type == "ct_localizer"
    assert event.tube_current_ma == 10.0 and event.exposure_mas == 65.0


def parse(ds: Dataset):
    return read_bytes(to_bytes(ds), pseudonymiser=PSEUDONYMISER, source="test")


@pytest.mark.parametrize(
    ("keyword", "value", "message"),
    [
        ("KVP", "180", r"\(0018,0060\) KVP 180 kV is outside 20-150 kV"),
        ("KVP", "12", r"KVP 12 kV is outside 20-150"),
        ("Exposure", "-3", r"\(0018,1152\) Exposure -3 mA.s is outside >= 0"),
        (
            "DistanceSourceToDetector",
            "0",
            r"\(0018,1110\) DistanceSourceToDetector 0 mm is outside > 0",
        ),
        ("ImageAndFluoroscopyAreaDoseProduct", "-1.5", r"AreaDoseProduct -0.15 Gy.cm2 is outside"),
        # dose ceilings: 1,000 x the NCRP Report 168 substantial radiation dose levels (from
        # memory, PUBLISHED-VALUES: PKA 500 Gy.cm2, peak skin dose 3 Gy); CTDIvol 1,000 Gy
        (
            "ImageAndFluoroscopyAreaDoseProduct",
            "1e300",
            r"AreaDoseProduct 1e\+299 Gy.cm2 is outside 0-500000 Gy.cm2 \(ceiling: 1,000 x NCRP",
        ),
        ("EntranceDoseInmGy", "4e6", r"EntranceDoseInmGy 4e\+06 mGy is outside 0-3e\+06 mGy"),
        ("CTDIvol", 2e6, r"CTDIvol 2e\+06 mGy is outside 0-1e\+06 mGy"),
    ],
)
def test_values_outside_physical_range_are_rejected(
    keyword: str, value: object, message: str
) -> None:
    ds = header(**{keyword: value})
    with pytest.raises(IngestError, match=message) as info:
        parse(ds)
    assert info.value.code == "out_of_range"
    assert info.value.source == "test"


def test_extreme_but_real_doses_are_kept() -> None:
    # a long interventional procedure's 2,000 Gy.cm2 (written in dGy.cm2) and a brain-perfusion
    # CTDIvol of 1,500 mGy are high but real (common practice): stored, not refused
    event = parse(header(ImageAndFluoroscopyAreaDoseProduct="20000")).events[0]
    assert event.dap_gy_cm2 == pytest.approx(2000.0)
    assert parse(header(CTDIvol=1500.0)).events[0].ctdivol_mgy == pytest.approx(1500.0)


def test_wrong_value_for_vr_is_a_bad_value() -> None:
    ds = header()
    ds.add_new(0x00180060, "DS", "120")
    encoded = to_bytes(ds)
    assert encoded.count(b"120 ") == 1  # DS padded to even length
    raw = encoded.replace(b"120 ", b"1x0 ")
    with pytest.raises(IngestError, match=r"\(0018,0060\) KVP '1x0' is not a number") as info:
        read_bytes(raw, pseudonymiser=PSEUDONYMISER, source="t")
    assert info.value.code == "bad_value"


def test_wrong_vr_is_a_bad_value() -> None:
    ds = header()
    ds.add_new(0x00180060, "PN", "Doe^John")  # KVP written with a person-name VR
    with pytest.raises(IngestError, match=r"KVP is encoded with VR PN, PS3.6 gives DS"):
        parse(ds)


def test_demographics_out_of_range_are_dropped_with_a_warning() -> None:
    result = parse(header(PatientSize="170", PatientWeight="72", KVP="80"))
    event = result.events[0]
    assert event.patient_height_m is None  # cm written as m: refused, not rescaled
    assert event.patient_weight_kg == 72.0
    assert any("PatientSize 170 m is outside" in w for w in result.warnings)


def test_exposure_index_and_preferred_precision_tags() -> None:
    ds = header(ExposureIndex="176.0", TargetExposureIndex="876.0", DeviationIndex="-7.0",
                Exposure="3", ExposureInuAs="3200", ExposureTime="12", ExposureTimeInuS="12500",
                XRayTubeCurrent="250", XRayTubeCurrentInuA="256000", EntranceDoseInmGy="0.81",
                EntranceDose=0)  # fmt: skip
    event = parse(ds).events[0]
    # values of highdicom's dx_image.dcm as listed in DICOM-NOTES 1.4 (EI 176, EI_T 876, DI -7)
    assert (event.exposure_index, event.target_exposure_index, event.deviation_index) == (
        176.0,
        876.0,
        -7.0,
    )
    assert event.exposure_mas == 3.2  # (0018,1153) in µAs wins over the integer (0018,1152)
    assert event.exposure_time_ms == 12.5
    assert event.tube_current_ma == 256.0
    assert event.entrance_dose_mgy == 0.81


def test_collimator_edges_inside_the_image_give_a_detector_field() -> None:
    ds = header(CollimatorShape="RECTANGULAR", CollimatorLeftVerticalEdge="101",
                CollimatorRightVerticalEdge="2100", CollimatorUpperHorizontalEdge="201",
                CollimatorLowerHorizontalEdge="2200", ImagerPixelSpacing=["0.15", "0.2"],
                Rows=2500, Columns=2500)  # fmt: skip
    event = parse(ds).events[0]
    assert event.field_width_mm == pytest.approx(2000 * 0.2)
    assert event.field_height_mm == pytest.approx(2000 * 0.15)
    assert event.field_area_cm2 == pytest.approx(400 * 300 / 100)
    assert event.field_plane == "detector"


def test_filter_material_lists_become_layers() -> None:
    ds = header(FilterMaterial=["COPPER", "ALUMINUM"], FilterThicknessMinimum=["0.2", "1.0"])
    event = parse(ds).events[0]
    assert event.filters == (FilterLayer("copper", 0.2), FilterLayer("aluminium", 1.0))


@pytest.mark.parametrize(
    ("text", "layers"),
    [
        ("0.1Cu 1Al", [("copper", 0.1), ("aluminium", 1.0)]),
        ("1.0 mm Al + 0.2 mm Cu", [("aluminium", 1.0), ("copper", 0.2)]),
        ("FLAT", None),
        ("BODY FILTER", None),
        ("LARGE BOWTIE FIL", None),
    ],
)
def test_parse_filter_text(text: str, layers: list[tuple[str, float]] | None) -> None:
    parsed = parse_filter_text(text)
    assert (None if parsed is None else [(f.material, f.thickness_mm) for f in parsed]) == layers


def _enhanced_ct(frames: list[tuple[str, float, float]]) -> Dataset:
    """Enhanced CT header: one per-frame item per (event UID, CTDIvol, mAs)."""
    ds = header("1.2.840.10008.5.1.4.1.1.2.1", "CT")
    shared = Dataset()
    details = Dataset()
    details.KVP = "100"
    shared.CTXRayDetailsSequence = Sequence([details])
    ds.SharedFunctionalGroupsSequence = Sequence([shared])
    per_frame = []
    for uid, ctdivol, mas in frames:
        fg = Dataset()
        exposure = Dataset()
        exposure.CTDIvol = ctdivol
        exposure.ExposureInmAs = mas
        fg.CTExposureSequence = Sequence([exposure])
        ident = Dataset()
        ident.IrradiationEventUID = uid
        fg.IrradiationEventIdentificationSequence = Sequence([ident])
        per_frame.append(fg)
    ds.PerFrameFunctionalGroupsSequence = Sequence(per_frame)
    ds.NumberOfFrames = len(frames)
    return ds


def test_enhanced_ct_groups_frames_by_irradiation_event_and_never_sums_ctdivol() -> None:
    a, b = generate_uid(), generate_uid()
    ds = _enhanced_ct([(a, 8.5, 50.0), (a, 8.5, 50.0), (a, 8.5, 50.0), (b, 12.0, 80.0)])
    events = parse(ds).events
    assert [e.irradiation_event_uid for e in events] == [a, b]
    assert [e.event_key for e in events] == [a, b]
    assert [e.ctdivol_mgy for e in events] == [8.5, 12.0]  # per acquisition, not 25.5
    assert [e.exposure_mas for e in events] == [50.0, 80.0]  # CT: frame 1 stands for the event
    assert [e.kvp_kv for e in events] == [100.0, 100.0]  # from the shared functional groups
    assert events[0].provenance["ctdivol_mgy"] == "(0018,9345) CTDIvol, frame 1 of 3"


def test_enhanced_xa_sums_per_frame_mas_over_an_event() -> None:
    ds = header("1.2.840.10008.5.1.4.1.1.12.1.1", "XA", KVP="70")
    uid = generate_uid()
    frames = []
    for _ in range(4):
        fg = Dataset()
        acq = Dataset()
        acq.ExposureInmAs = 1.25
        acq.XRayTubeCurrentInmA = 250.0
        fg.FrameAcquisitionSequence = Sequence([acq])
        ident = Dataset()
        ident.IrradiationEventUID = uid
        fg.IrradiationEventIdentificationSequence = Sequence([ident])
        frames.append(fg)
    ds.PerFrameFunctionalGroupsSequence = Sequence(frames)
    (event,) = parse(ds).events
    assert event.exposure_mas == 5.0
    assert "summed over 4 frames" in event.provenance["exposure_mas"]
    assert event.kvp_kv == 70.0


def test_object_level_dap_is_not_copied_onto_each_event() -> None:
    ds = _enhanced_ct([(generate_uid(), 5.0, 20.0), (generate_uid(), 6.0, 30.0)])
    ds.ImageAndFluoroscopyAreaDoseProduct = "3.0"
    events = parse(ds).events
    assert [e.dap_gy_cm2 for e in events] == [None, None]
    assert any("object total" in n for n in events[0].notes)


def test_read_dataset_without_file_meta() -> None:
    ds = header(KVP="81")
    del ds.file_meta
    result = read_dataset(ds, pseudonymiser=PSEUDONYMISER, source="c-store:TEST")
    assert result.events[0].kvp_kv == 81.0


@settings(max_examples=60, deadline=None)
@given(kvp=st.decimals(min_value=20, max_value=150, places=2))
def test_kvp_inside_range_reads_back_exactly(kvp) -> None:
    text = format(kvp, "f")
    event = parse(header(KVP=text)).events[0]
    assert event.kvp_kv == float(text)


@settings(max_examples=60, deadline=None)
@given(
    kvp=st.one_of(
        st.floats(min_value=150.01, max_value=1e5), st.floats(min_value=0.01, max_value=19.99)
    )
)
def test_kvp_outside_range_is_always_rejected(kvp: float) -> None:
    with pytest.raises(IngestError) as info:
        parse(header(KVP=f"{kvp:.2f}"))
    assert info.value.code == "out_of_range"


@settings(max_examples=60, deadline=None)
@given(dap=st.decimals(min_value=0, max_value=99999, places=3))
def test_dap_header_value_is_one_tenth_in_gy_cm2(dap) -> None:
    # 1 dGy·cm² = 0.1 Gy·cm² (SI prefixes)
    event = parse(header(ImageAndFluoroscopyAreaDoseProduct=format(dap, "f"))).events[0]
    assert event.dap_gy_cm2 == pytest.approx(float(dap) / 10, rel=1e-12, abs=1e-15)


def test_mammography_header_units_and_coded_view() -> None:
    # (0040,0316) OrganDose in dGy (average glandular dose for MG, PS3.3 C.8.7.8):
    # 0.0123 dGy = 1.23 mGy
    view = Dataset()
    view.CodeValue, view.CodingSchemeDesignator = "399162004", "SCT"
    view.CodeMeaning = "cranio-caudal"
    ds = header("1.2.840.10008.5.1.4.1.1.1.2", "MG", KVP="28", ExposureInmAs=63.5,
                OrganDose="0.0123", EntranceDoseInmGy="5.2", BodyPartThickness="45",
                AnodeTargetMaterial="MOLYBDENUM", FilterMaterial="RHODIUM",
                FilterThicknessMinimum="0.025", ViewCodeSequence=Sequence([view]))  # fmt: skip
    event = parse(ds).events[0]
    assert event.organ_dose_mgy == pytest.approx(1.23)
    assert event.entrance_dose_mgy == 5.2
    assert event.kvp_kv == 28.0 and event.exposure_mas == 63.5
    assert event.body_part_thickness_mm == 45.0
    assert event.anode_material == "molybdenum"
    assert event.filters == (FilterLayer("rhodium", 0.025),)
    assert event.view_position == "CC"
    assert event.modality_family == "projection"


def test_ct_header_water_equivalent_diameter_and_its_method() -> None:
    # (0018,1271) WaterEquivalentDiameter (mm) with (0018,1272) its method, CID 10024
    method = Dataset()
    method.CodeValue = "113982"
    method.CodingSchemeDesignator = "DCM"
    method.CodeMeaning = "Water Equivalent Diameter Integrated Across Scan Range"
    ds = header(
        "1.2.840.10008.5.1.4.1.1.2", "CT", WaterEquivalentDiameter=262.5,
        WaterEquivalentDiameterCalculationMethodCodeSequence=Sequence([method]),
    )  # fmt: skip
    (event,) = parse(ds).events
    assert event.water_equivalent_diameter_mm == 262.5
    assert event.water_equivalent_diameter_method == "integrated_across_scan_range"
    assert event.provenance["water_equivalent_diameter_method"] == (
        "(0018,1272) WaterEquivalentDiameterCalculationMethodCodeSequence (113982, DCM)"
    )
    method.CodeValue = "999999"
    (event,) = parse(ds).events
    assert event.water_equivalent_diameter_method is None
    assert any("not a known Dw method" in note for note in event.notes)


# ---- mammography headers: Mammography Image (PS3.3 C.8.11.7), Breast View, Enhanced
#      Mammography Image and Breast Tomosynthesis Acquisition (C.8.21.3.4) modules

MG_FOR_PRESENTATION = "1.2.840.10008.5.1.4.1.1.1.2"
BREAST_TOMOSYNTHESIS = "1.2.840.10008.5.1.4.1.1.13.1.3"
BREAST_PROJECTION = "1.2.840.10008.5.1.4.1.1.13.1.4"


def _mlo() -> Sequence:
    view = Dataset()
    view.CodeValue, view.CodingSchemeDesignator = "399368009", "SCT"
    view.CodeMeaning = "medio-lateral oblique"
    return Sequence([view])


def test_mammography_header_fields() -> None:
    ds = header(MG_FOR_PRESENTATION, "MG", KVP="29", ExposureInuAs="98000",
                OrganDose="0.0142", OrganExposed="BREAST", EntranceDoseInmGy="6.1",
                HalfValueLayer="0.52", BodyPartThickness="52", CompressionForce="110.5",
                PaddleDescription="24x30 standard", ImageLaterality="R",
                BreastImplantPresent="NO", PatientAge="055Y", AnodeTargetMaterial="TUNGSTEN",
                FilterMaterial="RHODIUM", FilterThicknessMinimum="0.05",
                ViewCodeSequence=_mlo(), ImageType=["ORIGINAL", "PRIMARY"])  # fmt: skip
    event = parse(ds).events[0]
    assert event.exposure_mas == 98.0  # (0018,1153) ExposureInuAs: 98000 uAs
    assert event.organ_dose_mgy == pytest.approx(1.42)  # (0040,0316) OrganDose in dGy
    assert event.organ_exposed == "BREAST"
    assert event.entrance_dose_mgy == 6.1 and event.hvl_mm_al == 0.52
    assert event.body_part_thickness_mm == 52.0 and event.compression_force_n == 110.5
    assert event.paddle_description == "24x30 standard"
    assert event.image_laterality == "R" and event.breast_implant_present is False
    assert event.patient_age_years == 55.0
    assert event.view_position == "MLO"
    assert event.mammography_acquisition == "2d"
    assert event.provenance["compression_force_n"] == "(0018,11A2) CompressionForce"
    assert event.provenance["image_laterality"] == "(0020,0062) ImageLaterality"
    assert event.provenance["exposure_mas"] == "(0018,1153) ExposureInuAs"


@pytest.mark.parametrize(("dgy", "mgy"), [("0.0123", 1.23), ("0.5", 50.0), ("1", 100.0)])
def test_organ_dose_is_in_decigray(dgy: str, mgy: float) -> None:
    # DICOM PS3.3 C.8.7.8: Organ Dose (0040,0316) "in dGy"; 1 dGy = 100 mGy (SI prefixes)
    event = parse(header(MG_FOR_PRESENTATION, "MG", OrganDose=dgy)).events[0]
    assert event.organ_dose_mgy == pytest.approx(mgy)


def test_tomo_image_type_marks_a_tomosynthesis_projection() -> None:
    ds = header(MG_FOR_PRESENTATION, "MG", KVP="31", ImageType=["ORIGINAL", "PRIMARY", "TOMO"])
    event = parse(ds).events[0]
    assert event.mammography_acquisition == "tomosynthesis"
    assert event.provenance["mammography_acquisition"].startswith("(0008,0008) ImageType")


def test_breast_tomosynthesis_acquisition_sums_its_projections() -> None:
    # the acquisition's values sit in XRay3DAcquisitionSequence (0018,9507); without a total
    # ExposureInmAs the projections' are summed (15 x 4.2 mAs), OrganDose likewise (dGy)
    projections = []
    for i in range(15):
        p = Dataset()
        p.ExposureInmAs = 4.2
        p.OrganDose = "0.0011"
        p.PositionerPrimaryAngle = str(-7.5 + i * 15.0 / 14)
        projections.append(p)
    acquisition = Dataset()
    acquisition.KVP = "31"
    acquisition.AnodeTargetMaterial = "TUNGSTEN"
    acquisition.FilterMaterial = "ALUMINUM"
    acquisition.FilterThicknessMinimum = "0.7"
    acquisition.BodyPartThickness = "55"
    acquisition.CompressionForce = "98"
    acquisition.HalfValueLayer = "0.61"
    acquisition.PrimaryPositionerScanArc = 15.0
    acquisition.PerProjectionAcquisitionSequence = Sequence(projections)
    ds = header(BREAST_TOMOSYNTHESIS, "MG", ImageLaterality="L",
                XRay3DAcquisitionSequence=Sequence([acquisition]))  # fmt: skip
    (event,) = parse(ds).events
    assert event.mammography_acquisition == "tomosynthesis"
    assert event.tomo_projections == 15 and event.tomo_scan_arc_deg == 15.0
    assert event.exposure_mas == pytest.approx(63.0)
    assert event.organ_dose_mgy == pytest.approx(1.65)
    assert "summed over 15 projections" in event.provenance["exposure_mas"]
    assert event.kvp_kv == 31.0 and event.body_part_thickness_mm == 55.0
    assert event.compression_force_n == 98.0 and event.hvl_mm_al == 0.61
    assert event.anode_material == "tungsten"
    assert event.filters == (FilterLayer("aluminium", 0.7),)
    assert event.image_laterality == "L"


def test_breast_projection_frame_laterality_from_functional_groups() -> None:
    anatomy = Dataset()
    anatomy.FrameLaterality = "L"
    frame = Dataset()
    frame.FrameAnatomySequence = Sequence([anatomy])
    dose = Dataset()
    dose.ExposureInmAs = 71.0
    dose.OrganDose = "0.012"
    frame.XRayAcquisitionDoseSequence = Sequence([dose])
    ds = header(BREAST_PROJECTION, "MG", KVP="28", NumberOfFrames=1,
                PerFrameFunctionalGroupsSequence=Sequence([frame]))  # fmt: skip
    (event,) = parse(ds).events
    assert event.image_laterality == "L"
    assert event.provenance["image_laterality"] == "(0020,9072) FrameLaterality"
    assert event.exposure_mas == 71.0 and event.organ_dose_mgy == pytest.approx(1.2)
    assert event.mammography_acquisition == "2d"


@pytest.mark.parametrize(
    ("keyword", "value", "warning"),
    [
        ("ImageLaterality", "X", "is not L, R, B or U"),
        ("BreastImplantPresent", "MAYBE", "is not YES or NO"),
        ("CompressionForce", "5000", "CompressionForce 5000 N is outside"),
    ],
)
def test_bad_mammography_context_is_dropped_with_a_warning(
    keyword: str, value: str, warning: str
) -> None:
    result = parse(header(MG_FOR_PRESENTATION, "MG", KVP="28", **{keyword: value}))
    (event,) = result.events
    assert event.kvp_kv == 28.0  # the exposure is kept
    assert any(warning in w for w in result.warnings), result.warnings


def test_unpaired_laterality_is_no_breast_side() -> None:
    (event,) = parse(header(MG_FOR_PRESENTATION, "MG", ImageLaterality="U")).events
    assert event.image_laterality is None


def test_non_breast_images_get_no_mammography_mode() -> None:
    (event,) = parse(header(KVP="70")).events
    assert event.mammography_acquisition is None
