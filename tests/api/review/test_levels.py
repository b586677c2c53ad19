"""Reference-level sets: shipped values against their published sources, versions, CSV files."""

from __future__ import annotations

import io
from datetime import date

import pytest

from beamaudit.api.review.errors import CsvFormatError, ReviewError
from beamaudit.api.review.examtypes import load_default_catalogue
from beamaudit.api.review.levels import (
    LEVEL_COLUMNS,
    LEVELS_TABLE_COLUMNS,
    LevelEntry,
    ReferenceLevelSet,
    applicable_levels,
    check_level_sets,
    levels_in_effect,
    levels_table,
    load_demo_local_levels,
    load_national_levels,
    read_levels_csv,
    write_levels_csv,
)
from beamaudit.api.review.quantities import normalise_unit, to_canonical_unit

HEADER = ",".join(LEVEL_COLUMNS)
UK = "UK NDRL (UKHSA)"
BSS = "IAEA BSS 115 guidance levels"
DEMO = "Hollowbrook General Hospital local DRLs (INVENTED)"


def national(name: str) -> ReferenceLevelSet:
    (found,) = [s for s in load_national_levels() if s.name == name]
    return found


def row(**cells: str) -> str:
    base = {
        "set_name": "Local",
        "kind": "local",
        "version": "1",
        "effective_from": "2025-01-01",
        "set_source": "committee",
        "exam_type": "chest_pa",
        "quantity": "dap_gy_cm2",
        "value": "0.1",
        "unit": "Gy.cm2",
        "source": "",
        "note": "",
    }
    base.update(cells)
    return ",".join(base[c] for c in LEVEL_COLUMNS)


def read(*rows: str, catalogue: bool = False) -> list[ReferenceLevelSet]:
    text = HEADER + "\n" + "\n".join(rows) + "\n"
    return read_levels_csv(io.StringIO(text), load_default_catalogue() if catalogue else None)


# ------------------------------------------------------------------ shipped national values
@pytest.mark.parametrize(
    ("exam_type", "quantity", "value"),
    [
        # UKHSA, "National Diagnostic Reference Levels (NDRLs) from 20 November 2024", Table 1
        # (adult CT), gov.uk (PUBLISHED-VALUES f, high)
        ("ct_head", "ctdivol_mgy", 47.0),
        ("ct_head", "dlp_mgy_cm", 790.0),
        ("ct_chest", "ctdivol_mgy", 8.5),
        ("ct_chest", "dlp_mgy_cm", 290.0),
        ("ct_chest_abdomen_pelvis", "dlp_mgy_cm", 660.0),
        ("ct_abdomen_pelvis", "ctdivol_mgy", 10.0),
        ("ct_abdomen_pelvis", "dlp_mgy_cm", 530.0),
        ("ct_pulmonary_angiogram", "ctdivol_mgy", 9.1),
        ("ct_pulmonary_angiogram", "dlp_mgy_cm", 310.0),
        ("ct_kub", "ctdivol_mgy", 6.3),
        ("ct_kub", "dlp_mgy_cm", 290.0),
        ("ct_chest_hrct", "ctdivol_mgy", 8.0),
        ("ct_chest_hrct", "dlp_mgy_cm", 300.0),
        ("ct_cervical_spine", "ctdivol_mgy", 16.0),
        ("ct_cervical_spine", "dlp_mgy_cm", 400.0),
        ("ct_sinuses", "ctdivol_mgy", 12.0),
        ("ct_sinuses", "dlp_mgy_cm", 160.0),
    ],
)
def test_uk_ct_ndrl_values(exam_type: str, quantity: str, value: float) -> None:
    uk = national(UK)
    assert uk.effective_from == date(2024, 11, 20)
    entry = uk.get(exam_type, quantity)
    assert entry is not None
    assert entry.value == value
    assert "UKHSA" in entry.source and "Table 1" in entry.source


def test_uk_set_holds_exactly_the_published_rows() -> None:
    # CAP has DLP only in the table; nothing else may have slipped in
    assert len(national(UK).entries) == 17
    assert national(UK).get("ct_chest_abdomen_pelvis", "ctdivol_mgy") is None


@pytest.mark.parametrize(
    ("exam_type", "value"),
    [
        # IAEA Safety Series 115 (1996), Schedule III, Table III-1, entrance surface dose per
        # radiograph, in air with backscatter (PUBLISHED-VALUES f, high)
        ("lumbar_spine_ap", 10.0),
        ("lumbar_spine_lat", 30.0),
        ("lumbar_spine_lsj", 40.0),
        ("abdomen_ap", 10.0),
        ("pelvis_ap", 10.0),
        ("hip_ap", 10.0),
        ("chest_pa", 0.4),
        ("chest_lat", 1.5),
        ("thoracic_spine_ap", 7.0),
        ("thoracic_spine_lat", 20.0),
        ("skull_ap_pa", 5.0),
        ("skull_lat", 3.0),
    ],
)
def test_bss_115_esd_guidance_levels(exam_type: str, value: float) -> None:
    entry = national(BSS).get(exam_type, "esak_mgy")
    assert entry is not None
    assert entry.value == value
    assert entry.unit == "mGy"
    assert "Table III-1" in entry.source


def test_every_shipped_national_value_names_its_source_and_its_exam_type_exists() -> None:
    catalogue = load_default_catalogue()
    for s in load_national_levels():
        # IAEA Safety Series No. 115 is international guidance, a kind of its own
        assert s.kind == ("international" if s.name == BSS else "national")
        assert s.source
        for e in s.entries:
            assert e.source, (s.name, e.exam_type, e.quantity)
            assert e.exam_type in catalogue


def test_demo_local_set_says_it_is_invented() -> None:
    sets = load_demo_local_levels()
    assert {s.version for s in sets} == {"2024", "2025"}
    for s in sets:
        assert s.kind == "local"
        assert "INVENTED" in s.name and "INVENTED" in s.source
        assert all("invented" in e.note for e in s.entries)


# --------------------------------------------------------------------------- versions in effect
def test_newest_version_in_effect_is_chosen() -> None:
    sets = load_demo_local_levels()
    assert applicable_levels(sets, "chest_pa", "dap_gy_cm2", date(2023, 12, 31)) == []
    (v2024,) = applicable_levels(sets, "chest_pa", "dap_gy_cm2", date(2024, 6, 1))
    assert (v2024.version, v2024.value) == ("2024", 0.09)
    (v2025,) = applicable_levels(sets, "chest_pa", "dap_gy_cm2", date(2025, 1, 1))
    assert (v2025.version, v2025.value) == ("2025", 0.075)


def test_a_newer_version_supersedes_without_falling_back() -> None:
    sets = load_demo_local_levels()
    assert applicable_levels(sets, "knee_ap", "dap_gy_cm2", date(2024, 6, 1))
    assert applicable_levels(sets, "knee_ap", "dap_gy_cm2", date(2025, 6, 1)) == []


def test_uk_levels_apply_from_their_date_and_local_levels_come_first() -> None:
    sets = load_national_levels() + load_demo_local_levels()
    before = applicable_levels(sets, "ct_head", "dlp_mgy_cm", date(2024, 11, 19))
    assert [a.set_name for a in before] == [DEMO]
    after = applicable_levels(sets, "ct_head", "dlp_mgy_cm", date(2024, 11, 20))
    assert [(a.kind, a.value) for a in after] == [("local", 900.0), ("national", 790.0)]
    assert after[1].source.startswith("UKHSA NDRLs from 20 November 2024")


def test_levels_table_lists_every_level_in_effect() -> None:
    sets = load_national_levels() + load_demo_local_levels()
    table = levels_table(sets, date(2025, 3, 1))
    assert list(table.columns) == list(LEVELS_TABLE_COLUMNS)
    n_expected = sum(len(s.entries) for s in levels_in_effect(sets, date(2025, 3, 1)))
    assert len(table) == n_expected
    assert table["level_kind"].iloc[0] == "local"


def test_versions_must_not_clash() -> None:
    a = ReferenceLevelSet("X", "local", "1", date(2025, 1, 1), "", ())
    b = ReferenceLevelSet("X", "local", "2", date(2025, 1, 1), "", ())
    with pytest.raises(ReviewError, match="two versions in effect from 2025-01-01"):
        check_level_sets([a, b])
    with pytest.raises(ReviewError, match="version '1' twice"):
        check_level_sets([a, a])
    c = ReferenceLevelSet("X", "national", "3", date(2026, 1, 1), "", ())
    with pytest.raises(ReviewError, match="both local and national"):
        check_level_sets([a, c])


def test_a_set_refuses_bad_entries() -> None:
    with pytest.raises(ReviewError, match="own unit"):
        ReferenceLevelSet(
            "X", "local", "1", date(2025, 1, 1), "", (LevelEntry("a", "dap_gy_cm2", 1.0, "mGy"),)
        )
    with pytest.raises(ReviewError, match="not a positive number"):
        ReferenceLevelSet(
            "X", "local", "1", date(2025, 1, 1), "", (LevelEntry("a", "dap_gy_cm2", 0.0, "Gy.cm2"),)
        )


# -------------------------------------------------------------------------------------- CSV files
def test_shipped_files_round_trip() -> None:
    sets = load_national_levels() + load_demo_local_levels()
    text = write_levels_csv(sets, comments=["exported"])
    assert isinstance(text, str) and text.startswith("# exported\n")
    assert read_levels_csv(io.StringIO(text)) == sets


def test_units_are_converted_on_import() -> None:
    (s,) = read(
        row(value="100", unit="mGy·cm²"),
        row(exam_type="chest_lat", value="30", unit="cGy cm2"),
        row(exam_type="abdomen_ap", value="2.5", unit="Gy.cm2"),
        row(exam_type="pelvis_ap", value="0.25", unit="mGy.m2"),
        row(exam_type="ct_head", quantity="dlp_mgy_cm", value="0.8", unit="Gy.cm"),
    )
    values = {(e.exam_type, e.quantity): e.value for e in s.entries}
    assert values[("chest_pa", "dap_gy_cm2")] == pytest.approx(0.1)
    assert values[("chest_lat", "dap_gy_cm2")] == pytest.approx(0.3)
    assert values[("abdomen_ap", "dap_gy_cm2")] == 2.5
    assert values[("pelvis_ap", "dap_gy_cm2")] == pytest.approx(2.5)  # 1 mGy·m² = 10 Gy·cm²
    assert values[("ct_head", "dlp_mgy_cm")] == pytest.approx(800.0)
    assert all(e.unit in ("Gy.cm2", "mGy.cm") for e in s.entries)


def test_unit_helpers() -> None:
    assert normalise_unit(" µGy·m² ") == "ugym2"
    assert to_canonical_unit("esak_mgy", 2.0, "Gy") == 2000.0
    with pytest.raises(ReviewError, match="not a unit of ctdivol_mgy"):
        to_canonical_unit("ctdivol_mgy", 1.0, "mGy.cm")
    with pytest.raises(ReviewError, match="unknown quantity"):
        to_canonical_unit("dose", 1.0, "mGy")


@pytest.mark.parametrize(
    ("cells", "message"),
    [
        ({"kind": "regional"}, "kind must be one of local, national, international"),
        ({"effective_from": "01/02/2025"}, "is not a date YYYY-MM-DD"),
        ({"effective_from": "2025-02-30"}, "is not a valid date"),
        ({"quantity": "dap"}, "quantity 'dap' is not one of"),
        ({"value": "high"}, "value 'high' is not a number"),
        ({"value": "-1"}, "must be a positive number"),
        ({"value": "0"}, "must be a positive number"),
        ({"unit": "mGy"}, "not a unit of dap_gy_cm2"),
        ({"exam_type": ""}, "exam_type is empty"),
        ({"kind": "national"}, "a national level needs its published source"),
        ({"kind": "international"}, "an? international level needs its published source"),
        ({"exam_type": "chest_xray"}, "not in the catalogue"),
        ({"set_name": ""}, "set_name and version must not be empty"),
    ],
)
def test_level_file_errors_name_the_line(cells: dict[str, str], message: str) -> None:
    with pytest.raises(CsvFormatError, match=rf"line 2: .*{message}"):
        read(row(**cells), catalogue=True)


def test_set_fields_must_agree_within_a_version() -> None:
    with pytest.raises(
        CsvFormatError, match=r"line 3: effective_from '2025-02-01' differs .* line 2"
    ):
        read(row(), row(exam_type="chest_lat", effective_from="2025-02-01"))


def test_a_value_may_be_given_once_per_version() -> None:
    with pytest.raises(
        CsvFormatError, match=r"line 3: chest_pa dap_gy_cm2 already given on line 2"
    ):
        read(row(), row(value="0.2"))


def test_two_versions_on_one_date_are_refused_for_the_whole_file() -> None:
    with pytest.raises(CsvFormatError, match="two versions in effect from 2025-01-01"):
        read(row(), row(version="2"))


def test_versions_and_order_of_a_file() -> None:
    sets = read(row(version="1"), row(version="2", effective_from="2026-01-01", value="0.09"))
    assert [(s.version, s.entries[0].value) for s in sets] == [("1", 0.1), ("2", 0.09)]
    assert applicable_levels(sets, "chest_pa", "dap_gy_cm2", date(2026, 1, 2))[0].value == 0.09


# ----------------------------------------------------------- patient groups and indications
QUALIFIED = HEADER + ",patient_group,clinical_indication"


def qualified(group: str = "", indication: str = "", **cells: str) -> str:
    return row(**cells) + f",{group},{indication}"


def read_qualified(*rows: str) -> list[ReferenceLevelSet]:
    return read_levels_csv(io.StringIO(QUALIFIED + "\n" + "\n".join(rows) + "\n"))


def test_levels_for_a_paediatric_band_and_an_indication() -> None:
    (s,) = read_qualified(
        qualified(exam_type="ct_head", quantity="dlp_mgy_cm", value="900", unit="mGy.cm"),
        qualified(
            "", "acute_stroke", exam_type="ct_head", quantity="dlp_mgy_cm", value="800",
            unit="mGy.cm",
        ),
        qualified("age_1_6y", exam_type="ct_head", quantity="dlp_mgy_cm", value="400",
                  unit="mGy.cm"),
    )  # fmt: skip
    get = s.get
    assert get("ct_head", "dlp_mgy_cm").value == 900  # type: ignore[union-attr]
    assert get("ct_head", "dlp_mgy_cm", "", "acute_stroke").value == 800  # type: ignore[union-attr]
    assert get("ct_head", "dlp_mgy_cm", "", "trauma").value == 900  # type: ignore[union-attr]
    assert get("ct_head", "dlp_mgy_cm", "age_1_6y").value == 400  # type: ignore[union-attr]
    assert get("ct_head", "dlp_mgy_cm", "age_6y_up") is None  # an adult level is not a child's
    applied = applicable_levels([s], "ct_head", "dlp_mgy_cm", date(2025, 3, 1),
                                patient_group="age_1_6y")  # fmt: skip
    assert [a.value for a in applied] == [400]
    table = levels_table([s], date(2025, 3, 1))
    assert table["patient_group"].tolist() == ["", "", "age_1_6y"]
    assert table["clinical_indication"].tolist() == ["", "acute_stroke", ""]


def test_qualified_levels_round_trip_and_plain_files_keep_their_layout() -> None:
    sets = read_qualified(qualified("weight_15_30kg", exam_type="chest_pa", value="0.05"))
    text = write_levels_csv(sets) or ""
    assert text.splitlines()[0] == QUALIFIED
    assert read_levels_csv(io.StringIO(text))[0].entries == sets[0].entries
    plain = write_levels_csv(load_national_levels()) or ""  # adult levels only
    header = next(line for line in plain.splitlines() if not line.startswith("#"))
    assert header == HEADER
    # the demo's invented local set holds a band's level (RAD 2's children): the long layout
    demo = write_levels_csv(load_demo_local_levels()) or ""
    assert next(line for line in demo.splitlines() if not line.startswith("#")) == QUALIFIED


@pytest.mark.parametrize(
    ("line", "message"),
    [
        (qualified("weight_15_30"), "patient_group 'weight_15_30' is not a band"),
        (qualified("", "Acute Stroke"), "clinical_indication 'Acute Stroke' must be lower-case"),
    ],
)
def test_bad_groups_and_indications_are_refused(line: str, message: str) -> None:
    with pytest.raises(CsvFormatError, match=f"line 2: {message}"):
        read_qualified(line)


def test_a_band_and_an_indication_do_not_clash_with_the_plain_level() -> None:
    band = "weight_15_30kg"
    sets = read_qualified(
        qualified(), qualified(band), qualified("", "pneumonia"), qualified(band, "pneumonia")
    )
    assert len(sets[0].entries) == 4
    with pytest.raises(CsvFormatError, match=r"\(patient group weight_15_30kg\) already given"):
        read_qualified(qualified("weight_15_30kg"), qualified("weight_15_30kg"))
