"""The drill-down record: a good one parses, a bad one names the key path at fault."""

from __future__ import annotations

import copy
from typing import Any

import pytest

from beamaudit.dashboards.errors import TableError
from beamaudit.dashboards.records import FLUENCE_UNIT, parse_exam

Exam = dict[str, Any]


def test_a_demo_exam_parses(demo_exam: Exam) -> None:
    detail = parse_exam(demo_exam)
    assert detail.room == "West DR 1"
    assert len(detail.exposures) == 2
    first = detail.exposures[1]  # the record lists the later exposure first; kept as given
    assert dict(first.technique)["kvp_kv"] == 81.0
    dap = next(d for d in first.dose if d.name == "dap_gy_cm2")
    assert (dap.value, dap.unit, dap.uncertainty, dap.reported) == (
        1.1817833415946,
        "Gy·cm²",
        0.0917,
        1.23,
    )
    assert first.spectrum is not None and first.spectrum.fluence_unit == FLUENCE_UNIT
    assert [s.assumed for s in first.why] == [False, True, False, False, False, True, True, False]
    assert first.why[5].assumptions == ("patient thickness 22 cm (no measured value)",)
    assert ("exposure_mas", "18.0") in first.why[5].inputs
    assert first.why[1].value is None  # a step that is a choice, not a number
    assert len(detail.flags) == 1 and detail.flags.iloc[0]["status"] == "open"


def test_the_dose_unit_comes_from_the_name_when_not_given(demo_exam: Exam) -> None:
    detail = parse_exam(demo_exam)
    esak = next(d for d in detail.exposures[0].dose if d.name == "esak_mgy")
    assert esak.unit == "mGy"


def test_a_minimal_exam() -> None:
    detail = parse_exam({"study_uid": "1.2.3", "room": "R", "exam_type": "Chest PA"})
    assert detail.exposures == () and detail.flags.empty
    assert detail.standard_patient is None and detail.study_datetime is None


@pytest.mark.parametrize(
    ("change", "message"),
    [
        (lambda e: e.pop("room"), r"exam.room: expected non-empty text, got None"),
        (lambda e: e.update(standard_patient="yes"), "exam.standard_patient: expected true/false"),
        (
            lambda e: e["exposures"][1]["dose"]["dap_gy_cm2"].update(value="1.4"),
            r"exam.exposures\[1\].dose\['dap_gy_cm2'\].value: expected a number",
        ),
        (
            lambda e: e["exposures"][0]["dose"].update(grid_factor={"value": 2.0}),
            r"dose\['grid_factor'\]: no 'unit' given",
        ),
        (
            lambda e: e["exposures"][0]["why"][0].pop("quantity"),
            r"exam.exposures\[0\].why\[0\].quantity",
        ),
        (
            lambda e: e["exposures"][0]["technique"].update(filters=["Cu", "Al"]),
            r"technique\['filters'\]: expected text, a number or true/false",
        ),
        (lambda e: e.update(exposures={"a": 1}), "exam.exposures: expected a list"),
        (
            lambda e: e["exposures"][0]["spectrum"].update(energies_kev=[10.0]),
            r"exam.exposures\[0\].spectrum: energies_kev has 1 values",
        ),
        (lambda e: e["flags"][0].update(status="done"), r"flags table, column 'status'"),
        (
            lambda e: e["exposures"][0].update(event_datetime="soon"),
            r"exam.exposures\[0\].event_datetime: expected a date and time",
        ),
    ],
)
def test_bad_records_name_the_key_path(demo_exam: Exam, change: Any, message: str) -> None:
    exam = copy.deepcopy(demo_exam)
    change(exam)
    with pytest.raises(TableError, match=message):
        parse_exam(exam)
