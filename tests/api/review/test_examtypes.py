"""Exam-type catalogue, mapping rules and the unmapped list."""

from __future__ import annotations

import hashlib
import io

import pandas as pd
import pytest

from beamaudit.api.review._csv import write_table
from beamaudit.api.review.errors import CsvFormatError, ReviewInputError
from beamaudit.api.review.examtypes import (
    CATALOGUE_COLUMNS,
    DEFAULT_AGGREGATION,
    EVENT_FIELDS,
    MappingRule,
    MappingRules,
    compile_pattern,
    load_default_catalogue,
    load_default_rules,
    map_events,
    map_events_with_indication,
    match_rules,
    read_catalogue_csv,
    read_rules_csv,
    unmapped_summary,
    write_catalogue_csv,
    write_rules_csv,
)

CATALOGUE_HEADER = ",".join(CATALOGUE_COLUMNS[:8])  # files written before paediatric_bands


def raw(**fields: object) -> dict[str, object]:
    row: dict[str, object] = {f: None for f in EVENT_FIELDS}
    row.update(fields)
    return row


def rules_from(text: str) -> MappingRules:
    return read_rules_csv(io.StringIO(text))


# ------------------------------------------------------------------------------ shipped catalogue
def test_shipped_catalogue_covers_the_issue_list() -> None:
    catalogue = load_default_catalogue()
    for exam in (
        "chest_pa",
        "chest_lat",
        "abdomen_ap",
        "pelvis_ap",
        "lumbar_spine_ap",
        "lumbar_spine_lat",
        "skull_ap_pa",
        "hip_ap",
        "knee_ap",
        "ct_head",
        "ct_chest",
        "ct_abdomen_pelvis",
        "fluoro_barium_swallow",
        "xa_coronary_angiography",
        "mammo_cc",
        "mammo_mlo",
    ):
        assert exam in catalogue


@pytest.mark.parametrize(
    ("modality_group", "allowed"),
    [
        # ICRP Publication 135 (2017), table of DRL quantities: radiography K_a,e or P_KA;
        # mammography D_G and K_a,i or K_a,e; interventional fluoroscopy P_KA and K_a,r;
        # CT CTDIvol and DLP (PUBLISHED-VALUES e, high)
        ("radiography", {"esak_mgy", "dap_gy_cm2"}),
        ("mammography", {"mgd_mgy", "esak_mgy"}),
        ("interventional", {"dap_gy_cm2", "reference_point_air_kerma_mgy"}),
        ("fluoroscopy", {"dap_gy_cm2", "reference_point_air_kerma_mgy"}),
        ("ct", {"ctdivol_mgy", "dlp_mgy_cm"}),
    ],
)
def test_catalogue_quantities_follow_icrp_135(modality_group: str, allowed: set[str]) -> None:
    types = [t for t in load_default_catalogue() if t.modality_group == modality_group]
    assert types
    for t in types:
        assert set(t.quantities) <= allowed, t.exam_type


def test_level_applies_per_projection_for_views_and_per_examination_for_ct_and_fluoro() -> None:
    catalogue = load_default_catalogue()
    for exam in ("chest_pa", "mammo_cc"):
        t = catalogue.get(exam)
        assert t is not None and t.level_applies_per == "projection"
    for t in catalogue:
        if t.modality_group in ("ct", "fluoroscopy", "interventional"):
            assert t.level_applies_per == "examination", t.exam_type


def test_default_aggregation_sums_additive_quantities_and_takes_the_largest_ctdivol() -> None:
    # DLP, DAP and K_a,r add over irradiation events; CTDIvol is an index per acquisition
    assert DEFAULT_AGGREGATION["dlp_mgy_cm"] == "sum"
    assert DEFAULT_AGGREGATION["dap_gy_cm2"] == "sum"
    assert DEFAULT_AGGREGATION["reference_point_air_kerma_mgy"] == "sum"
    assert DEFAULT_AGGREGATION["ctdivol_mgy"] == "max"


def test_catalogue_round_trip_keeps_everything_and_the_fingerprint() -> None:
    catalogue = load_default_catalogue()
    text = write_catalogue_csv(catalogue)
    assert isinstance(text, str)
    again = read_catalogue_csv(io.StringIO(text))
    assert again.types == catalogue.types
    assert again.comments == catalogue.comments
    assert again.fingerprint() == catalogue.fingerprint()
    assert list(catalogue.to_frame().columns) == list(CATALOGUE_COLUMNS)


def test_catalogue_aggregation_override_is_read() -> None:
    text = (
        f"{CATALOGUE_HEADER}\n"
        "ct_perf,CT perfusion,ct,CT,examination,ctdivol_mgy dlp_mgy_cm,ctdivol_mgy=mean,\n"
    )
    exam = read_catalogue_csv(io.StringIO(text)).get("ct_perf")
    assert exam is not None
    assert exam.aggregation_for("ctdivol_mgy") == "mean"
    assert exam.aggregation_for("dlp_mgy_cm") == "sum"


@pytest.mark.parametrize(
    ("row", "message"),
    [
        ("Chest,Chest PA,radiography,DX,projection,dap_gy_cm2,,", "must be lower-case"),
        ("chest_pa,Chest PA,radiology,DX,projection,dap_gy_cm2,,", "modality_group 'radiology'"),
        ("chest_pa,Chest PA,radiography,DX,study,dap_gy_cm2,,", "level_applies_per must be"),
        ("chest_pa,Chest PA,radiography,DX,projection,dap_mgy_cm2,,", "quantities 'dap_mgy_cm2'"),
        ("chest_pa,Chest PA,radiography,,projection,dap_gy_cm2,,", "dicom_modalities"),
        (
            "chest_pa,Chest PA,radiography,DX,projection,dap_gy_cm2,dap_gy_cm2=sum,",
            "only to examination",
        ),
        ("ct_x,CT,ct,CT,examination,dlp_mgy_cm,ctdivol_mgy=max,", "aggregation 'ctdivol_mgy=max'"),
    ],
)
def test_catalogue_errors_name_the_line(row: str, message: str) -> None:
    text = f"# a comment line\n{CATALOGUE_HEADER}\n{row}\n"
    with pytest.raises(CsvFormatError, match=rf"line 3: .*{message}"):
        read_catalogue_csv(io.StringIO(text))


def test_catalogue_repeated_exam_type_names_both_lines() -> None:
    row = "chest_pa,Chest PA,radiography,DX,projection,dap_gy_cm2,,"
    text = f"{CATALOGUE_HEADER}\n{row}\n{row}\n"
    with pytest.raises(
        CsvFormatError, match="line 3: exam_type 'chest_pa' already defined on line 2"
    ):
        read_catalogue_csv(io.StringIO(text))


def test_catalogue_header_problems_are_reported() -> None:
    with pytest.raises(CsvFormatError, match="unknown column 'modality'"):
        read_catalogue_csv(io.StringIO("exam_type,name,modality\n"))
    with pytest.raises(CsvFormatError, match="missing column"):
        read_catalogue_csv(io.StringIO("exam_type,name\n"))
    with pytest.raises(CsvFormatError, match="no header row"):
        read_catalogue_csv(io.StringIO("# only a comment\n"))


def test_catalogue_rejects_rows_with_the_wrong_number_of_cells_and_non_utf8() -> None:
    text = f"{CATALOGUE_HEADER}\nchest_pa,Chest PA\n"
    with pytest.raises(CsvFormatError, match="line 2: 2 cells where the header has 8"):
        read_catalogue_csv(io.StringIO(text))
    with pytest.raises(CsvFormatError, match="not UTF-8"):
        read_catalogue_csv(io.BytesIO(b"exam_type,name\n\xff\xfe\n"))


def test_catalogue_reads_a_file_path(tmp_path: object) -> None:
    from pathlib import Path

    path = Path(str(tmp_path)) / "types.csv"
    write_catalogue_csv(load_default_catalogue(), path)
    assert read_catalogue_csv(path) == load_default_catalogue()
    with pytest.raises(CsvFormatError, match="cannot read the file"):
        read_catalogue_csv(Path(str(tmp_path)) / "missing.csv")


# -------------------------------------------------------------------------------------- patterns
@pytest.mark.parametrize(
    ("pattern", "value", "expected"),
    [
        ("CR|DX", "DX", True),
        ("CR|DX", "dx", True),  # case-insensitive
        ("CR|DX", "DXA", False),  # a glob matches the whole value
        ("*chest*", "XR CHEST PA", True),
        ("chest", "XR CHEST PA", False),
        ("LAT*", "lateral", True),
        ("?A", "PA", True),
        ("[AP]A", "PA", True),
        ("re:\\bchest\\b", "XR CHEST PA", True),  # a regex is searched anywhere
        ("re:^chest", "XR CHEST PA", False),
        ("re:l5[ /-]?s1", "LSPINE L5/S1", True),
    ],
)
def test_pattern_syntax(pattern: str, value: str, expected: bool) -> None:
    assert (compile_pattern(pattern).search(value) is not None) is expected


def test_first_matching_rule_by_priority_wins_not_file_order() -> None:
    rules = rules_from(
        "priority,exam_type,modality,body_part\n20,chest_pa,DX,CHEST\n10,chest_lat,DX,CHEST\n"
    )
    assert [r.priority for r in rules.rules] == [10, 20]
    mapped = map_events(pd.DataFrame([raw(modality="DX", body_part="CHEST")]), rules)
    assert mapped.tolist() == ["chest_lat"]


def test_empty_cells_match_anything_but_a_pattern_never_matches_a_missing_value() -> None:
    rules = rules_from(
        "priority,exam_type,modality,view_position\n10,chest_pa,DX,PA\n20,abdomen_ap,DX,\n"
    )
    events = pd.DataFrame(
        [raw(modality="DX", view_position=None), raw(modality="DX", view_position="PA")]
    )
    assert map_events(events, rules).tolist() == ["abdomen_ap", "chest_pa"]


def test_any_description_looks_at_study_series_and_protocol() -> None:
    rules = rules_from("priority,exam_type,any_description\n10,ct_head,re:\\bhead\\b\n")
    events = pd.DataFrame(
        [
            raw(study_description="CT HEAD"),
            raw(series_description="Head 5mm"),
            raw(protocol_name="ROUTINE HEAD"),
            raw(body_part="HEAD"),  # body part is not a description
        ]
    )
    assert map_events(events, rules).tolist() == ["ct_head", "ct_head", "ct_head", None]


def test_values_are_stripped_before_matching() -> None:
    rules = rules_from("priority,exam_type,body_part\n10,chest_pa,CHEST\n")
    assert map_events(pd.DataFrame([raw(body_part="  CHEST ")]), rules).tolist() == ["chest_pa"]


def test_match_rules_reports_the_rule_priority() -> None:
    rules = load_default_rules()
    events = pd.DataFrame([raw(modality="DX", body_part="CHEST", view_position="PA"), raw()])
    priorities = match_rules(events, rules)
    assert priorities.iloc[0] == 100
    assert priorities.isna().iloc[1]


@pytest.mark.parametrize(
    ("fields", "expected"),
    [
        # DICOM Body Part Examined (0018,0015) and View Position (0018,5101) defined terms
        # (PS3.3 / PS3.16, from memory)
        ({"modality": "DX", "body_part": "CHEST", "view_position": "PA"}, "chest_pa"),
        ({"modality": "CR", "body_part": "CHEST", "view_position": "LL"}, "chest_lat"),
        ({"modality": "DX", "body_part": "ABDOMEN", "view_position": "AP"}, "abdomen_ap"),
        ({"modality": "DX", "body_part": "PELVIS", "view_position": "AP"}, "pelvis_ap"),
        ({"modality": "DX", "body_part": "LSPINE", "view_position": "AP"}, "lumbar_spine_ap"),
        ({"modality": "DX", "body_part": "LSPINE", "view_position": "RL"}, "lumbar_spine_lat"),
        (
            {
                "modality": "DX",
                "body_part": "LSPINE",
                "view_position": "LL",
                "series_description": "L5/S1",
            },
            "lumbar_spine_lsj",
        ),
        ({"modality": "DX", "body_part": "KNEE", "view_position": "AP"}, "knee_ap"),
        ({"modality": "DX", "study_description": "XR Chest PA"}, "chest_pa"),
        ({"modality": "MG", "view_position": "MLO"}, "mammo_mlo"),
        ({"modality": "MG", "view_position": "CC"}, "mammo_cc"),
        ({"modality": "CT", "study_description": "CT Head"}, "ct_head"),
        (
            {"modality": "CT", "study_description": "CT Chest Abdomen Pelvis"},
            "ct_chest_abdomen_pelvis",
        ),
        ({"modality": "CT", "study_description": "CT Abdomen and Pelvis"}, "ct_abdomen_pelvis"),
        ({"modality": "CT", "study_description": "CTPA"}, "ct_pulmonary_angiogram"),
        ({"modality": "CT", "study_description": "CT Thorax"}, "ct_chest"),
        ({"modality": "CT", "protocol_name": "Sinus"}, "ct_sinuses"),
        ({"modality": "RF", "study_description": "Barium swallow"}, "fluoro_barium_swallow"),
        ({"modality": "XA", "study_description": "Coronary angiogram"}, "xa_coronary_angiography"),
        ({"modality": "XA", "study_description": "PCI LAD stent"}, "xa_pci"),
        ({"modality": "DX", "body_part": "FOOT", "view_position": "AP"}, None),
        ({"modality": "OT", "study_description": "CT Head"}, None),
    ],
)
def test_shipped_rules_map_common_headers(fields: dict[str, str], expected: str | None) -> None:
    mapped = map_events(pd.DataFrame([raw(**fields)]), load_default_rules())
    assert mapped.iloc[0] == expected


@pytest.mark.parametrize(
    ("fields", "expected"),
    [
        # 2D or tomosynthesis by the acquisition ingest read, whatever the descriptions say: a 2D
        # view of a combined study named for tomosynthesis stays 2D, and a sweep whose
        # descriptions name no tomosynthesis is still one
        (
            {"study_description": "Screening tomo", "mammography_acquisition": "2d"},
            ("mammo_cc", "screening"),
        ),
        (
            {"study_description": "Screening", "mammography_acquisition": "tomosynthesis"},
            ("mammo_tomo_cc", "screening"),
        ),
        (
            {"study_description": "Symptomatic", "mammography_acquisition": "tomosynthesis"},
            ("mammo_tomo_cc", "diagnostic"),
        ),
        ({"mammography_acquisition": "tomosynthesis"}, ("mammo_tomo_cc", None)),
        # acquisition not recorded: the descriptions decide, as before
        ({"study_description": "Screening tomo"}, ("mammo_tomo_cc", "screening")),
        ({"study_description": "Screening"}, ("mammo_cc", "screening")),
    ],
)
def test_shipped_rules_tell_2d_from_tomosynthesis_by_the_acquisition(
    fields: dict[str, str], expected: tuple[str, str | None]
) -> None:
    event = raw(modality="MG", view_position="CC", **fields)
    mapped = map_events_with_indication(pd.DataFrame([event]), load_default_rules())
    indication = mapped["clinical_indication"].iloc[0]
    assert (mapped["exam_type"].iloc[0], indication or None) == expected


def test_a_table_without_the_acquisition_column_maps_it_as_not_recorded() -> None:
    rules = rules_from(
        "priority,exam_type,modality,mammography_acquisition\n1,mammo_tomo_cc,MG,tomosynthesis\n"
        "2,mammo_cc,MG,\n"
    )
    events = pd.DataFrame([raw(modality="MG")]).drop(columns=["mammography_acquisition"])
    assert map_events(events, rules).tolist() == ["mammo_cc"]
    events["mammography_acquisition"] = ["TOMOSYNTHESIS"]
    assert map_events(events, rules).tolist() == ["mammo_tomo_cc"]


def test_mapping_is_aligned_with_the_index_and_handles_many_rows() -> None:
    rows = [raw(modality="DX", body_part="CHEST", view_position="PA"), raw(modality="DX")] * 5000
    events = pd.DataFrame(rows, index=range(100, 10100))
    mapped = map_events(events, load_default_rules())
    assert mapped.index.equals(events.index)
    assert mapped.iloc[::2].eq("chest_pa").all()
    assert mapped.iloc[1::2].isna().all()


def test_mapping_needs_the_raw_fields() -> None:
    with pytest.raises(ReviewInputError, match="lacks the column"):
        map_events(pd.DataFrame({"modality": ["DX"]}), load_default_rules())


def test_mapping_an_empty_table() -> None:
    events = pd.DataFrame({f: pd.Series([], dtype=object) for f in EVENT_FIELDS})
    assert map_events(events, load_default_rules()).tolist() == []


# ------------------------------------------------------------------------------------ rule files
def test_shipped_rules_round_trip() -> None:
    rules = load_default_rules()
    text = write_rules_csv(rules)
    assert isinstance(text, str)
    again = read_rules_csv(io.StringIO(text), load_default_catalogue())
    assert [(r.priority, r.exam_type, r.patterns, r.note) for r in again.rules] == [
        (r.priority, r.exam_type, r.patterns, r.note) for r in rules.rules
    ]
    assert again.comments == rules.comments


@pytest.mark.parametrize(
    ("row", "message"),
    [
        ("ten,chest_pa,DX,", "priority 'ten' is not an integer"),
        ("10,,DX,", "exam_type is empty"),
        ("10,chest_pa,,", "no pattern"),
        ("10,chest_pa,DX,re:(unclosed", "invalid regular expression"),
        ("10,not_a_type,DX,", "not in the catalogue"),
    ],
)
def test_rule_errors_name_the_line(row: str, message: str) -> None:
    text = f"priority,exam_type,modality,study_description\n{row}\n"
    with pytest.raises(CsvFormatError, match=rf"line 2: .*{message}"):
        read_rules_csv(io.StringIO(text), load_default_catalogue())


def test_repeated_priority_is_an_error() -> None:
    text = "priority,exam_type,modality\n10,chest_pa,DX\n10,chest_lat,CR\n"
    with pytest.raises(CsvFormatError, match="line 3: priority 10 already used on line 2"):
        read_rules_csv(io.StringIO(text))
    with pytest.raises(ReviewInputError, match="share a priority"):
        MappingRules(rules=(MappingRule(1, "a", (("modality", "DX"),)), MappingRule(1, "b", ())))


def test_a_rule_built_in_code_is_checked_too() -> None:
    # rules kept elsewhere (the store) are built directly; a bad one never exists
    with pytest.raises(ReviewInputError, match="unknown field 'colour'"):
        MappingRule(10, "chest_pa", (("colour", "red"),))
    with pytest.raises(ReviewInputError, match="invalid regular expression"):
        MappingRule(10, "chest_pa", (("modality", "re:(DX"),))


def test_rules_validate_against_a_catalogue_afterwards() -> None:
    rules = rules_from("priority,exam_type,modality\n10,nonexistent,DX\n")
    with pytest.raises(CsvFormatError, match="line 2: exam_type 'nonexistent'"):
        rules.validate(load_default_catalogue())


def test_all_problems_are_listed_at_once() -> None:
    text = "priority,exam_type,modality\nx,chest_pa,DX\ny,chest_pa,DX\n"
    with pytest.raises(CsvFormatError) as info:
        read_rules_csv(io.StringIO(text))
    assert [line for line, _ in info.value.problems] == [2, 3]


# ---------------------------------------------------------------------------------- the unmapped
def test_unmapped_summary_lists_distinct_raw_values_most_frequent_first() -> None:
    events = pd.DataFrame(
        [
            raw(modality="DX", body_part="FOOT", view_position="AP")
            | {"study_uid": "1", "exam_type": None},
            raw(modality="DX", body_part="FOOT", view_position="AP")
            | {"study_uid": "2", "exam_type": None},
            raw(modality="DX", body_part="FOOT", view_position="AP")
            | {"study_uid": "2", "exam_type": None},
            raw(modality="DX", study_description="odd") | {"study_uid": "3", "exam_type": None},
            raw(modality="DX", body_part="CHEST") | {"study_uid": "4", "exam_type": "chest_pa"},
        ]
    )
    events["event_datetime"] = pd.to_datetime(
        ["2025-03-01", "2025-03-05", "2025-03-07", "2025-03-02", "2025-03-02"]
    )
    summary = unmapped_summary(events)
    assert summary["n_events"].tolist() == [3, 1]
    assert summary["n_studies"].tolist() == [2, 1]
    assert summary.loc[0, "body_part"] == "FOOT"
    assert summary.loc[0, "first_seen"] == pd.Timestamp("2025-03-01")
    assert summary.loc[0, "last_seen"] == pd.Timestamp("2025-03-07")
    assert summary.loc[1, "study_description"] == "odd"
    assert summary.loc[1, "body_part"] is None


def test_unmapped_summary_takes_a_mapping_result_and_is_empty_when_all_map() -> None:
    events = pd.DataFrame([raw(modality="DX", body_part="CHEST", view_position="PA")])
    mapped = map_events(events, load_default_rules())
    summary = unmapped_summary(events, mapped)
    assert len(summary) == 0
    assert "n_events" in summary.columns


# ----------------------------------------------------------------------- clinical indications
def test_a_rule_sets_the_clinical_indication_with_the_exam_type() -> None:
    rules = rules_from(
        "priority,exam_type,clinical_indication,any_description\n"
        "10,ct_head,acute_stroke,re:\\bstroke\\b\n"
        "20,ct_head,,re:\\bhead\\b\n"
    )
    events = pd.DataFrame(
        [raw(study_description="CT HEAD STROKE"), raw(study_description="CT HEAD"), raw()]
    )
    mapped = map_events_with_indication(events, rules)
    assert mapped["exam_type"].tolist() == ["ct_head", "ct_head", None]
    assert mapped["clinical_indication"].tolist() == ["acute_stroke", None, None]
    assert map_events(events, rules).tolist() == ["ct_head", "ct_head", None]  # unchanged


def test_shipped_rules_set_the_stroke_indication_of_a_head_ct() -> None:
    events = pd.DataFrame(
        [
            raw(modality="CT", study_description="CT Head - Stroke protocol"),
            raw(modality="CT", protocol_name="BRAIN ROUTINE"),
        ]
    )
    mapped = map_events_with_indication(events, load_default_rules())
    assert mapped["exam_type"].tolist() == ["ct_head", "ct_head"]
    assert mapped["clinical_indication"].tolist() == ["acute_stroke", None]


def test_rule_indications_round_trip_and_are_checked() -> None:
    rules = load_default_rules()
    again = read_rules_csv(io.StringIO(write_rules_csv(rules) or ""))
    assert [r.clinical_indication for r in again.rules] == [
        r.clinical_indication for r in rules.rules
    ]
    with pytest.raises(CsvFormatError, match="line 2: clinical_indication 'Acute stroke'"):
        rules_from("priority,exam_type,clinical_indication,modality\n10,ct_head,Acute stroke,CT\n")


def test_catalogue_paediatric_bands_are_checked() -> None:
    header = ",".join(CATALOGUE_COLUMNS)
    text = f"{header}\nchest_pa,Chest PA,radiography,DX,projection,dap_gy_cm2,,,height\n"
    with pytest.raises(CsvFormatError, match="paediatric_bands must be"):
        read_catalogue_csv(io.StringIO(text))


def test_a_catalogue_without_bands_keeps_its_fingerprint_without_the_column() -> None:
    text = f"{CATALOGUE_HEADER}\nchest_pa,Chest PA,radiography,DX,projection,dap_gy_cm2,,\n"
    catalogue = read_catalogue_csv(io.StringIO(text))
    legacy = write_table(
        None, columns=CATALOGUE_COLUMNS[:8], rows=[catalogue.to_frame().iloc[0].to_dict()]
    )
    assert catalogue.fingerprint() == hashlib.sha256((legacy or "").encode()).hexdigest()
