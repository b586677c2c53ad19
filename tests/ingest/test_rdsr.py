"""Dose-report parsing on synthetic reports built to the PS3.16 templates.

No Radiation Dose SR ships in any installed package (DICOM-NOTES section 4),
so rdsr_builders.py writes them. Unit conversions checked: DAP Gy·m² ->
Gy·cm² (x 1e4), Dose (RP) Gy -> mGy, Exposure µA·s -> mA·s, CT Exposure Time
s -> ms (PS3.16 TID 10003B / 10013; SI prefixes).
"""

from __future__ import annotations

from typing import Any

import pytest
import rdsr_builders
from hypothesis import given, settings
from hypothesis import strategies as st
from ingest_samples import PSEUDONYMISER, to_bytes
from pydicom.sr.coding import Code
from pydicom.uid import UID, generate_uid
from rdsr_builders import (
    DAP,
    EVENT,
    CtEvent,
    FluoroEvent,
    MammoEvent,
    ct_report,
    fluoroscopy_report,
    mammography_report,
    radiography_report,
)

from beamaudit.ingest import FilterLayer, IngestError, read_bytes
from beamaudit.ingest.rdsr import content_tree
from beamaudit.ingest.sr_build import container


def parse(ds):
    return read_bytes(to_bytes(ds), pseudonymiser=PSEUDONYMISER, source="rdsr-test")


def test_builder_concepts_are_ps3_16_codes() -> None:
    # every concept the builders write exists in pydicom's PS3.16 code dictionary
    import pydicom.sr._concepts_dict as concepts_dict

    all_concepts: dict[str, Any] = concepts_dict.concepts
    known = {
        (code, scheme)
        for scheme, by_keyword in all_concepts.items()
        for entries in by_keyword.values()
        for code in entries
    }
    concepts = [v for k, v in vars(rdsr_builders).items() if k.isupper() and isinstance(v, tuple)]
    for value, scheme, meaning in concepts:
        if scheme == "SRT":
            continue  # retired spellings, checked by test_codes
        assert (value, scheme) in known, (value, scheme, meaning)


def test_fluoroscopy_report_events_and_units() -> None:
    result = parse(fluoroscopy_report())
    assert result.source.kind == "rdsr"
    assert len(result.events) == 3
    first, second, acquisition = result.events
    assert first.dap_gy_cm2 == 2.5  # 2.5e-4 Gy·m² x 1e4
    assert first.reference_point_air_kerma_mgy == 12.0  # 0.012 Gy
    assert first.event_type == "fluoroscopy"
    assert first.fluoro_mode == "pulsed"
    assert first.pulse_rate_per_s == 15.0
    assert first.number_of_pulses == 450
    assert first.irradiation_duration_s == 30.0
    assert first.tube_current_ma == 11.5  # Average X-Ray Tube Current (113767)
    assert first.kvp_kv == 78.0
    assert second.kvp_kv == 82.0 and second.dap_gy_cm2 == 4.0
    assert acquisition.event_type == "stationary"
    assert acquisition.exposure_mas == 32.0  # 32000 µA·s
    assert acquisition.exposure_time_ms == 80.0
    assert acquisition.tube_current_ma == 400.0


def test_fluoroscopy_report_filters_geometry_and_provenance() -> None:
    event = parse(fluoroscopy_report()).events[0]
    assert event.filters == (FilterLayer("copper", 0.3), FilterLayer("aluminium", 1.0))
    assert event.filter_type == "flat"
    assert event.anode_material == "tungsten"
    assert event.grid == "focused"
    assert event.field_area_cm2 == 400.0  # 0.04 m²
    assert event.sid_mm == 1150.0 and event.source_to_isocenter_mm == 810.0
    assert event.provenance["dap_gy_cm2"] == "(122130, DCM) Dose Area Product"
    assert event.acquisition_device_type == "fluoroscopy_guided"
    assert event.device_observer_uid == "1.2.826.0.1.3680043.10.1.7"
    assert event.modality_family == "projection"


def test_fluoroscopy_report_accumulated_dose() -> None:
    (acc,) = parse(fluoroscopy_report()).accumulated
    assert acc.acquisition_plane == "single"
    assert acc.dap_total_gy_cm2 == 8.0
    assert acc.fluoro_dap_total_gy_cm2 == 6.5
    assert acc.acquisition_dap_total_gy_cm2 == 1.5
    assert acc.reference_point_air_kerma_total_mgy == 40.0
    assert acc.fluoro_time_total_s == 50.0
    assert acc.number_of_radiographic_frames == 1
    assert acc.number_of_events == 3


def test_event_keys_are_irradiation_event_uids() -> None:
    uids = [generate_uid() for _ in range(2)]
    result = parse(fluoroscopy_report([FluoroEvent(uid=uids[0]), FluoroEvent(uid=uids[1])]))
    assert [e.event_key for e in result.events] == uids
    assert [e.event_index for e in result.events] == [0, 1]


def test_ct_report_events_and_units() -> None:
    result = parse(ct_report())
    localizer, spiral = result.events
    assert localizer.event_type == "ct_localizer"
    assert localizer.ctdivol_mgy is None and localizer.dlp_mgy_cm is None  # no CT Dose container
    assert spiral.event_type == "ct_spiral"
    assert spiral.exposure_time_ms == 7500.0  # 7.5 s: CT events give seconds
    assert spiral.ctdivol_mgy == 12.4
    assert spiral.dlp_mgy_cm == 560.5
    assert spiral.ct_phantom_diameter_cm == 32.0
    assert spiral.kvp_kv == 120.0 and spiral.tube_current_ma == 210.0
    assert spiral.ct_pitch_factor == 0.984
    assert spiral.ct_scan_length_mm == 420.0
    assert spiral.ct_total_collimation_mm == 40.0
    assert spiral.modality == "CT" and spiral.modality_family == "ct"
    (acc,) = result.accumulated
    assert acc.dlp_total_mgy_cm == 560.5 and acc.number_of_events == 2
    assert result.warnings == []


def test_retired_snomed_rt_codes_match_their_current_equivalents() -> None:
    current = parse(ct_report(srt_codes=False)).events[1]
    legacy = parse(ct_report(srt_codes=True)).events[1]
    assert legacy.event_type == current.event_type == "ct_spiral"
    fluoro = parse(fluoroscopy_report(srt_codes=True)).events[0]
    assert fluoro.event_type == "fluoroscopy"
    assert fluoro.anode_material == "tungsten"
    assert fluoro.filters[0] == FilterLayer("copper", 0.3)


def test_dlp_total_disagreeing_with_events_is_a_warning() -> None:
    result = parse(ct_report(dlp_total_mgy_cm=900.0))
    assert any("differs from the sum" in w for w in result.warnings)


def test_radiography_report_exposure_index() -> None:
    (event,) = parse(radiography_report()).events
    assert (event.exposure_index, event.target_exposure_index, event.deviation_index) == (
        250.0,
        400.0,
        -2.0,
    )
    assert event.exposure_mas == 2.5 and event.dap_gy_cm2 == 0.11
    assert event.body_part == "CHEST"


def test_event_out_of_range_rejects_the_report_naming_the_event() -> None:
    uid = generate_uid()
    ds = fluoroscopy_report([FluoroEvent(), FluoroEvent(uid=uid, kvp_kv=175.0)])
    with pytest.raises(
        IngestError, match=rf"irradiation event 2 \({uid}\): \(113733, DCM\) KVP 175 kV"
    ) as info:
        parse(ds)
    assert info.value.code == "out_of_range"


def test_dap_unit_is_read_from_the_item() -> None:
    ds = radiography_report()
    tree = content_tree(ds)
    event = next(c for c in tree.children if c.code == (EVENT[0], EVENT[1]))
    dap_item = next(c for c in event.children if c.code == (DAP[0], DAP[1]))
    units = dap_item.ds.MeasuredValueSequence[0].MeasurementUnitsCodeSequence[0]
    dap_item.ds.MeasuredValueSequence[0].NumericValue = "1.1"
    dap_item.ds.MeasuredValueSequence[0].FloatingPointValue = 1.1
    units.CodeValue = "dGy.cm2"  # a writer using another unit of the same dimension
    assert parse(ds).events[0].dap_gy_cm2 == pytest.approx(0.11)
    units.CodeValue = "mGy"  # a unit of another dimension is refused
    with pytest.raises(IngestError, match=r"cannot convert 'mGy' \(dose\) to 'Gy.cm2'"):
        parse(ds)


def test_report_without_events_is_a_broken_template() -> None:
    from rdsr_builders import REPORT

    from beamaudit.ingest.sr_build import build_sr_document

    ds = build_sr_document(container(REPORT, [], relationship=None))
    with pytest.raises(IngestError, match="holds no irradiation event") as info:
        parse(ds)
    assert info.value.code == "broken_template"


def test_dose_sr_class_with_another_root_is_a_broken_template() -> None:
    from beamaudit.ingest.sr_build import build_sr_document

    ds = build_sr_document(
        container(("126000", "DCM", "Imaging Measurement Report"), [], relationship=None)
    )
    with pytest.raises(IngestError, match=r"root content item is \(126000, DCM\)") as info:
        parse(ds)
    assert info.value.code == "broken_template"


def test_comprehensive_sr_with_dose_report_root_is_accepted() -> None:
    ds = ct_report()
    ds.SOPClassUID = ds.file_meta.MediaStorageSOPClassUID = UID("1.2.840.10008.5.1.4.1.1.88.33")
    assert len(parse(ds).events) == 2


def test_comprehensive_sr_that_is_not_a_dose_report_is_unsupported() -> None:
    from beamaudit.ingest.sr_build import build_sr_document

    ds = build_sr_document(
        container(("126000", "DCM", "Imaging Measurement Report"), [], relationship=None),
        sop_class_uid="1.2.840.10008.5.1.4.1.1.88.33",
    )
    with pytest.raises(IngestError, match="not a dose report") as info:
        parse(ds)
    assert info.value.code == "unsupported_sop_class"


def test_enhanced_xray_radiation_dose_sr_is_read_by_concept() -> None:
    ds = fluoroscopy_report()
    ds.SOPClassUID = ds.file_meta.MediaStorageSOPClassUID = UID("1.2.840.10008.5.1.4.1.1.88.76")
    assert len(parse(ds).events) == 3


def test_pydicom_code_equality_agrees_on_the_retired_codes_used() -> None:
    # pydicom.sr.coding.Code equality maps SRT to SCT (DICOM-NOTES 2.9)
    assert Code("P5-08001", "SRT", "x") == Code("116152004", "SCT", "y")
    assert Code("P5-06000", "SRT", "x") == Code("44491008", "SCT", "y")


@settings(max_examples=40, deadline=None)
@given(
    dap=st.floats(min_value=1e-9, max_value=1.0, allow_nan=False),
    kvp=st.floats(min_value=20, max_value=150),
)
def test_dap_and_kvp_round_trip(dap: float, kvp: float) -> None:
    ds = fluoroscopy_report([FluoroEvent(dap_gy_m2=dap, kvp_kv=kvp)])
    (event,) = parse(ds).events
    assert event.dap_gy_cm2 == pytest.approx(dap * 1e4, rel=1e-12)
    assert event.kvp_kv == pytest.approx(kvp, rel=1e-12)


@settings(max_examples=25, deadline=None)
@given(n=st.integers(min_value=1, max_value=12))
def test_number_of_ct_events_is_preserved(n: int) -> None:
    events = [CtEvent(ctdivol_mgy=float(i + 1), dlp_mgy_cm=10.0 * (i + 1)) for i in range(n)]
    result = parse(ct_report(events))
    assert [e.ctdivol_mgy for e in result.events] == [float(i + 1) for i in range(n)]
    assert result.accumulated[0].number_of_events == n


def test_scanner_size_attributes_of_a_ct_event() -> None:
    # TID 10013's size-specific dose estimate with its method (CID 10023), the sizes it used
    # and the water-equivalent diameter with its own method (CID 10024); codes from
    # pydicom's PS3.16 dictionary (test_builder_concepts_are_ps3_16_codes)
    frame = generate_uid()
    spiral = CtEvent(
        ssde_mgy=15.1, dw_mm=281.5, lateral_mm=340.0, ap_mm=240.0, effective_diameter_mm=285.6,
        z_top_bottom_mm=(-120.0, -540.0), frame_of_reference_uid=frame,
    )  # fmt: skip
    result = parse(ct_report([spiral]))
    (event,) = result.events
    assert event.ssde_mgy == 15.1
    assert event.ssde_method == "from_water_equivalent_diameter"
    assert event.water_equivalent_diameter_mm == 281.5
    assert event.water_equivalent_diameter_method == "from_localizer"
    assert (event.ct_lateral_dimension_mm, event.ct_ap_dimension_mm) == (340.0, 240.0)
    assert event.effective_diameter_mm == 285.6
    assert (event.ct_scan_z_top_mm, event.ct_scan_z_bottom_mm) == (-120.0, -540.0)
    assert event.frame_of_reference_uid == frame
    assert event.provenance["ssde_method"] == (
        "(370129005, SCT) Measurement Method = (113988, DCM) "
        "Estimated from Water Equivalent Diameter"
    )
    assert event.provenance["effective_diameter_mm"] == "(113933, DCM) Derived Effective Diameter"
    assert result.warnings == []


def test_aapm_204_ssde_method_and_no_dw() -> None:
    spiral = CtEvent(ssde_mgy=16.0, ssde_method=rdsr_builders.AAPM204_LAT, lateral_mm=330.0)
    (event,) = parse(ct_report([spiral])).events
    assert event.ssde_method == "aapm204_lateral"
    assert event.water_equivalent_diameter_mm is None
    assert event.water_equivalent_diameter_method is None
    assert event.ct_lateral_dimension_mm == 330.0


def test_negative_size_rejects_the_report() -> None:
    with pytest.raises(IngestError, match=r"Measured Lateral Dimension -3 mm is outside > 0"):
        parse(ct_report([CtEvent(ssde_mgy=16.0, lateral_mm=-3.0)]))


# ---- TID 10003C mechanical data and the patient's position (skin-dose geometry) ----


def _geometry_report(**geometry: Any) -> Any:
    return parse(
        fluoroscopy_report([FluoroEvent(geometry=rdsr_builders.EventGeometry(**geometry))])
    )


def test_positioner_table_and_patient_position_are_read_in_our_units() -> None:
    # PS3.16 TID 10003C: angles in deg, table positions in mm from the device's own reference
    (event,) = _geometry_report(
        primary_angle_deg=-30.0,
        secondary_angle_deg=20.0,
        table_head_tilt_deg=5.0,
        table_cradle_tilt_deg=-2.0,
        table_horizontal_rotation_deg=90.0,
        source_to_reference_point_mm=660.0,
        source_to_table_mm=595.0,
    ).events
    assert event.positioner_primary_angle_deg == -30.0  # RAO 30
    assert event.positioner_secondary_angle_deg == 20.0  # CRA 20
    assert event.table_longitudinal_position_mm == 412.0
    assert event.table_lateral_position_mm == -3.5
    assert event.table_height_position_mm == 185.0
    assert event.table_head_tilt_angle_deg == 5.0
    assert event.table_cradle_tilt_angle_deg == -2.0
    assert event.table_horizontal_rotation_angle_deg == 90.0
    assert event.source_to_reference_point_mm == 660.0
    assert event.source_to_table_mm == 595.0
    assert event.field_height_mm == 160.0 and event.field_width_mm == 160.0
    assert event.pulse_width_ms == 6.5
    assert event.reference_point_definition == "isocenter_15cm_toward_source"
    assert event.patient_table_relationship == "headfirst"
    assert event.patient_orientation == "recumbent"
    assert event.patient_orientation_modifier == "supine"
    assert event.provenance["positioner_primary_angle_deg"] == (
        "(112011, DCM) Positioner Primary Angle"
    )
    assert event.provenance["table_height_position_mm"] == "(113753, DCM) Table Height Position"


def test_fluoroscopy_technique_of_each_event_is_kept() -> None:
    # kVp, added filters (Cu, Al), pulse data, fluoro mode, event type, K_a,r and DAP per event
    report = fluoroscopy_report(
        [
            FluoroEvent(kvp_kv=71.0, copper_mm=0.9, pulses=120, pulse_rate=7.5, duration_s=16.0),
            FluoroEvent(fluoroscopy=False, rotational=True, kvp_kv=90.0, copper_mm=0.1),
        ]
    )
    fluoro, rotational = parse(report).events
    assert (fluoro.kvp_kv, fluoro.event_type, fluoro.fluoro_mode) == (71.0, "fluoroscopy", "pulsed")
    assert fluoro.filters == (FilterLayer("copper", 0.9), FilterLayer("aluminium", 1.0))
    assert (fluoro.number_of_pulses, fluoro.pulse_rate_per_s) == (120, 7.5)
    assert fluoro.irradiation_duration_s == 16.0
    assert (fluoro.dap_gy_cm2, fluoro.reference_point_air_kerma_mgy) == (2.5, 12.0)
    assert rotational.event_type == "rotational" and rotational.kvp_kv == 90.0
    assert rotational.fluoro_mode is None


def test_rotational_and_stepping_end_values_are_read() -> None:
    (event,) = _geometry_report(
        primary_angle_deg=-100.0, primary_end_angle_deg=100.0, table_longitudinal_end_mm=812.0
    ).events
    assert event.positioner_primary_end_angle_deg == 100.0
    assert event.table_longitudinal_end_position_mm == 812.0


def test_retired_position_codes_and_prone_patients() -> None:
    (event,) = _geometry_report(prone=True, feet_first_srt=True).events
    assert event.patient_table_relationship == "feetfirst"  # F-10480 SRT read as 102541007 SCT
    assert event.patient_orientation_modifier == "prone"


def test_reference_point_definition_as_text_is_kept_as_written() -> None:
    (event,) = _geometry_report(reference_point_text="15 cm below isocentre").events
    assert event.reference_point_definition == "15 cm below isocentre"


def test_a_geometry_value_out_of_range_is_dropped_with_a_warning_not_the_report() -> None:
    result = _geometry_report(table_head_tilt_deg=135.0)
    (event,) = result.events
    assert event.table_head_tilt_angle_deg is None
    assert event.reference_point_air_kerma_mgy == 12.0  # the dose stays
    assert any("Table Head Tilt Angle 135" in w for w in result.warnings)


def test_events_without_mechanical_data_leave_the_geometry_unset() -> None:
    event = parse(fluoroscopy_report()).events[0]
    assert event.positioner_primary_angle_deg is None
    assert event.table_height_position_mm is None
    assert event.patient_table_relationship is None


# ---- mammography: TID 10003 mammography rows and TID 10005 (DICOM-NOTES 2.4-2.6)


def test_mammography_report_events() -> None:
    result = parse(mammography_report())
    cc, tomo, mlo = result.events
    assert {e.modality for e in result.events} == {"MG"}
    # Exposure 98000 uA.s = 98 mAs; Average Glandular Dose (111631) and Entrance Exposure at RP
    # (111636) in mGy; Compression Thickness (111633) mm; Compression Force (111647) N
    assert cc.exposure_mas == 98.0 and cc.kvp_kv == 29.0
    assert cc.organ_dose_mgy == 1.42 and cc.entrance_dose_mgy == 6.1
    assert cc.body_part_thickness_mm == 52.0 and cc.compression_force_n == 110.0
    assert cc.hvl_mm_al == 0.52
    assert cc.anode_material == "tungsten"
    assert cc.filters == (FilterLayer("rhodium", 0.05),)
    assert cc.view_position == "CC" and mlo.view_position == "MLO"
    assert (cc.image_laterality, tomo.image_laterality, mlo.image_laterality) == ("L", "L", "R")
    assert cc.provenance["compression_force_n"] == "(111647, DCM) Compression Force"
    assert cc.provenance["image_laterality"].startswith("(272741003, SCT) Laterality")


def test_mammography_report_tells_tomosynthesis_from_2d() -> None:
    # CID 10002: a tomosynthesis sweep is a Rotational Acquisition, a 2D view a Stationary one
    cc, tomo, mlo = parse(mammography_report()).events
    assert (cc.mammography_acquisition, tomo.mammography_acquisition) == ("2d", "tomosynthesis")
    assert tomo.provenance["mammography_acquisition"].startswith("(113721, DCM)")
    assert mlo.mammography_acquisition == "2d"


def test_accumulated_glandular_dose_per_breast() -> None:
    # TID 10005: one Accumulated Average Glandular Dose per breast, CID 6022 Side modifier
    (acc,) = parse(mammography_report()).accumulated
    assert acc.agd_left_mgy == pytest.approx(1.42 + 1.71)
    assert acc.agd_right_mgy == pytest.approx(1.30)
    assert acc.agd_total_mgy is None
    assert "Laterality: left breast" in acc.provenance["agd_left_mgy"]


def test_accumulated_glandular_dose_in_retired_snomed_spellings() -> None:
    # G-C171 Laterality and T-04030 Left breast (SNOMED-RT) are the same as 272741003 and
    # 80248007 (SNOMED CT), per pydicom's mapping
    result = parse(mammography_report(srt_codes=True))
    (acc,) = result.accumulated
    assert acc.agd_left_mgy == pytest.approx(3.13)
    assert result.events[0].image_laterality == "L"


def test_accumulated_glandular_dose_without_a_side_is_the_total() -> None:
    (acc,) = parse(mammography_report(accumulated_by_side=False)).accumulated
    assert acc.agd_total_mgy == pytest.approx(4.43)
    assert acc.agd_left_mgy is None and acc.agd_right_mgy is None


def test_mammography_protocol_decides_tomosynthesis_without_an_event_type() -> None:
    ds = mammography_report([MammoEvent(tomosynthesis=True)])
    event = ds.ContentSequence[-2]  # the one event container
    event.ContentSequence = [
        item for item in event.ContentSequence
        if item.ConceptNameCodeSequence[0].CodeValue != "113721"
    ]  # fmt: skip
    (parsed,) = parse(ds).events
    assert parsed.mammography_acquisition == "tomosynthesis"
    assert any("inferred from the acquisition protocol" in n for n in parsed.notes)


# -- the content items' short texts read from their bytes -----------------------------------------
def _items(ds: Any) -> Any:
    """Every dataset of a content tree: the items, their codes and measured values."""
    yield ds
    for keyword in ("ContentSequence", "ConceptNameCodeSequence", "ConceptCodeSequence",
                    "MeasuredValueSequence", "MeasurementUnitsCodeSequence"):  # fmt: skip
        for child in ds.get(keyword) or ():
            yield from _items(child)


def _reads_equal_pydicom(ds: Any) -> int:
    """Each element of ``rdsr._TAGS`` of each item read by ``rdsr._get`` (first, while the
    element is still raw) and by pydicom: the same value, of the same type; the reads made."""
    from beamaudit.ingest import rdsr

    reads = 0
    for item in _items(ds):
        for keyword in rdsr._TAGS:
            ours, theirs = rdsr._get(item, keyword), item.get(keyword)
            assert type(ours) is type(theirs) and ours == theirs, (keyword, ours, theirs)
            reads += 1
    return reads


@pytest.mark.parametrize("name", ["reportsi.dcm", "reportsi_with_empty_number_tags.dcm",
                                  "test-SR.dcm"])  # fmt: skip
def test_content_item_texts_read_from_bytes_equal_pydicom_on_sample_files(name: str) -> None:
    # real SR files shipped with pydicom (DICOM-NOTES section 4): Basic Text SR in implicit VR,
    # one with empty number elements, a Comprehensive SR in explicit VR
    from ingest_samples import sample
    from pydicom import dcmread

    assert _reads_equal_pydicom(dcmread(sample(name))) > 100


@pytest.mark.parametrize("charset", [None, "ISO_IR 100", "ISO_IR 192", "ISO 2022 IR 87"])
@pytest.mark.parametrize("implicit", [False, True])
def test_content_item_texts_read_from_bytes_equal_pydicom_in_each_character_set(
    charset: str | None, implicit: bool
) -> None:
    """Padding kept and removed as pydicom does (a leading space stays), several values, a text
    that is not ASCII (left to pydicom), in the character sets of PS3.3 C.12.1.1.2."""
    import io

    from pydicom.filebase import DicomBytesIO
    from pydicom.filereader import read_dataset
    from pydicom.filewriter import write_dataset

    report = fluoroscopy_report()
    item = report.ContentSequence[0].ConceptNameCodeSequence[0]
    item.CodeMeaning = "Dose (RP) in µGy  " if charset in ("ISO_IR 100", "ISO_IR 192") else "RP\0"
    item.CodeValue = " 113 "
    item.CodingSchemeDesignator = "DCM\\99LOCAL"
    report.ContentSequence[0].ValueType = " CODE "
    if charset is not None:
        report.SpecificCharacterSet = charset
    del report.file_meta
    encoded = DicomBytesIO()
    encoded.is_little_endian, encoded.is_implicit_VR = True, implicit
    write_dataset(encoded, report)
    back = read_dataset(io.BytesIO(encoded.getvalue()), implicit, True)
    assert _reads_equal_pydicom(back) > 500
    assert back.ContentSequence[0].ConceptNameCodeSequence[0].CodeValue == " 113"


def test_a_report_reads_the_same_through_pydicom_alone(monkeypatch: pytest.MonkeyPatch) -> None:
    from beamaudit.ingest import rdsr

    report = to_bytes(fluoroscopy_report())
    fast = read_bytes(report, pseudonymiser=PSEUDONYMISER, source="rdsr-test")
    monkeypatch.setattr(rdsr, "_SHORT_TEXT_VRS", frozenset())  # every value through pydicom
    plain = read_bytes(report, pseudonymiser=PSEUDONYMISER, source="rdsr-test")
    assert fast.events == plain.events and fast.warnings == plain.warnings
