"""What needs attention: the overview's lines written from the flags, and their ranking."""

from __future__ import annotations

import copy
from typing import Any

import pandas as pd
import pytest
from dashboards_demo import EXAM_TYPES, PERIOD, make_flags, make_ingest_errors

from beamaudit.dashboards import ATTENTION, TableError, attention_from_flags, rank_attention

Rows = list[dict[str, Any]]


@pytest.fixture
def lines() -> pd.DataFrame:
    flags = [f for f in make_flags() if f["period"] == PERIOD]
    return attention_from_flags(
        flags, ingest_errors=make_ingest_errors(), exam_types=EXAM_TYPES, period=PERIOD
    )


def _line(lines: pd.DataFrame, kind: str) -> dict[str, Any]:
    (row,) = lines[lines["kind"] == kind].to_dict("records")
    return row


def test_the_lines_follow_the_contract(lines: pd.DataFrame) -> None:
    ATTENTION.validate(lines)  # the overview's input, as the API may also pass it
    assert list(lines.columns) == list(ATTENTION.names)


def test_only_open_findings_make_lines(lines: pd.DataFrame) -> None:
    assert not lines["headline"].str.contains("5.9 Gy·cm²").any()  # acknowledged: in hand
    assert not lines["headline"].str.contains("Lumbar spine AP in West DR 2").any()  # closed


def test_ranked_by_severity_then_tier_then_size(lines: pd.DataFrame) -> None:
    kinds = list(lines["kind"])
    assert kinds[0] == "group_above_level"  # the one action
    # then the findings about every patient of a room, largest first: a dose doubled (2.1 ×)
    # before a DAP meter 1.35 × high; then the single exam (8.5 ×); then the data
    assert kinds[1:4] == ["changepoint", "dap_ratio_out_of_tolerance",
                          "exam_above_investigation_level"]  # fmt: skip
    assert set(kinds[4:7]) == {"no_dose_data", "rejected_files", "deviation_index_out_of_range"}
    assert kinds[-2:] == ["unmapped_events", "repeat_exposure"]  # information last


def test_one_line_per_finding_of_one_place(lines: pd.DataFrame) -> None:
    group = _line(lines, "group_above_level")  # local and national level of one group
    assert group["count"] == 2 and group["severity"] == "action"
    assert group["size"] == pytest.approx(1.283)
    step = _line(lines, "changepoint")  # DAP and ESAK of one examination, one month
    assert step["count"] == 2
    assert step["headline"] == (
        "Abdomen AP in West DR 2: monthly median up 2.1 × from February 2026: "
        "DAP 0.645 → 1.34 Gy·cm²; ESAK 1.01 → 2.14 mGy"
    )
    no_dose = _line(lines, "no_dose_data")  # six studies of one room
    assert no_dose["count"] == 6 and no_dose["size"] == 6
    assert no_dose["headline"] == "Mobile 1: 6 examinations without any dose value"


def test_headlines_carry_their_numbers_and_links(lines: pd.DataFrame) -> None:
    dap = _line(lines, "dap_ratio_out_of_tolerance")
    assert dap["headline"] == (
        "West DR 1: reported DAP 1.35 × the reconstruction (median of 209 exposures; "
        "accepted 0.75–1.25): check the DAP meter"
    )
    assert dap["href"] == "/rooms/West%20DR%201#dap-ratio"
    exam = _line(lines, "exam_above_investigation_level")
    assert exam["headline"] == (
        "Barium enema in Fluoro 1: one examination at DAP 187 Gy·cm², 8.5 × the level (22 Gy·cm²)"
    )
    assert exam["href"] == "/exams/2.25.7319000001"
    assert exam["size"] == pytest.approx(8.5)
    group = _line(lines, "group_above_level")
    assert group["href"] == "/distributions?exam_type=pelvis_ap&quantity=dap_gy_cm2&period=2026-03"
    files = _line(lines, "rejected_files")
    assert files["headline"] == "3 files rejected at ingest: out of range, not DICOM, truncated"
    assert files["href"] == "/ingest-errors"
    unmapped = _line(lines, "unmapped_events")
    assert unmapped["href"] == "/unmapped?period=2026-03"
    assert unmapped["severity"] == "info"


def test_a_possible_excess_is_worded_as_possible() -> None:
    flags = [f for f in make_flags() if f["flag_id"] == "102"]  # warning: possibly above
    (line,) = attention_from_flags(flags, exam_types=EXAM_TYPES).to_dict("records")
    assert "may be 1.05 × the level (2.2 Gy·cm²)" in line["headline"]


def test_a_flag_without_numbers_is_summed_up_by_its_reason() -> None:
    flags = copy.deepcopy([f for f in make_flags() if f["flag_id"] == "104"])
    flags[0]["numbers"] = None
    (line,) = attention_from_flags(flags).to_dict("records")
    assert line["headline"] == (
        "Median ratio of reported to reconstructed DAP in room West DR 1 in 2026-03 is 1.35 "
        "over 209 exposures, outside 1 ± 0.25"
    )
    assert line["href"] == "/flags?kind=dap_ratio_out_of_tolerance&room=West+DR+1&status=open"


def test_an_unknown_kind_still_makes_a_line() -> None:
    flags = [f for f in make_flags() if f["kind"] == "repeat_exposure"]
    (line,) = attention_from_flags(flags).to_dict("records")
    assert line["headline"] == "Two chest_pa exposures 40 s apart in one study"
    assert line["tier"] == 3


def test_rank_attention_takes_lines_made_elsewhere() -> None:
    def line(headline: str, severity: str, kind: str, size: float) -> dict[str, Any]:
        return {"kind": kind, "severity": severity, "headline": headline, "href": "/",
                "size": size, "count": 1}  # fmt: skip

    ranked = rank_attention(
        [
            line("small drift", "warning", "dap_ratio_out_of_tolerance", 1.3),
            line("big single exam", "warning", "exam_above_investigation_level", 9.0),
            line("follow the patient up", "action", "srdl_exceeded", 1.1),
            line("big step", "warning", "changepoint", 2.0),
            line("note", "info", "low_dose_review", 3.0),
        ]
    )
    assert list(ranked["headline"]) == ["follow the patient up", "big step", "small drift",
                                        "big single exam", "note"]  # fmt: skip


def test_rank_attention_refuses_an_unknown_severity() -> None:
    row = {"kind": "x", "severity": "urgent", "headline": "h", "href": "/", "size": 1, "count": 1}
    with pytest.raises(TableError, match=r"attention table, column 'severity'.*'urgent'"):
        rank_attention([row])


def test_no_open_flag_makes_no_line() -> None:
    closed = [dict(f, status="closed") for f in make_flags()]
    assert attention_from_flags(closed).empty


def test_a_patient_group_is_named_and_kept_apart() -> None:
    """A paediatric band's group and the adults' group of the same examination are two lines,
    the band's naming its patients (ICRP 135 sets levels per weight band)."""
    adult = copy.deepcopy([f for f in make_flags() if f["flag_id"] == "102"])[0]
    child = copy.deepcopy(adult) | {
        "flag_id": "902",
        "patient_group": "weight_15_30kg",
        "patient_group_label": "children 15–< 30 kg",
    }
    lines = attention_from_flags([adult, child], exam_types=EXAM_TYPES)
    assert len(lines) == 2
    labelled = lines[lines["patient_group_label"].notna()].to_dict("records")
    assert len(labelled) == 1
    assert ", children 15–< 30 kg, in " in labelled[0]["headline"]
    assert labelled[0]["patient_group_label"] == "children 15–< 30 kg"


def test_an_agd_ratio_off_the_rooms_usual_is_a_line_to_its_room_figure() -> None:
    # invented: a unit that reads 1.10 x the Dance D_G as a rule, 1.45 x this month
    (flag,) = [f for f in make_flags() if f["flag_id"] == "104"]
    flag = {**flag, "kind": "mgd_ratio_off_baseline", "room": "Breast 1", "quantity": "mgd_ratio",
            "reason": "Median ratio of the device's AGD to the reconstructed D_G ...",
            "numbers": {"median_ratio": 1.45, "n": 96, "tolerance": 0.2, "baseline_ratio": 1.1,
                        "baseline_months": 6}}  # fmt: skip
    (line,) = attention_from_flags([flag]).to_dict("records")
    assert line["headline"] == (
        "Breast 1: the unit's AGD 1.45 × the reconstruction, usually 1.10 (median of 96 views; "
        "accepted 0.88–1.32): check the unit's dosimetry"
    )
    assert line["href"] == "/rooms/Breast%201#mgd-ratio"
    assert line["size"] == pytest.approx(1.45 / 1.1)
    assert line["tier"] == 1
