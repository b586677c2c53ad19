"""Table contracts: clean tables pass, bad ones fail with the column and row named."""

from __future__ import annotations

import copy
from typing import Any

import pandas as pd
import pytest

from beamaudit.dashboards.errors import DashboardError, TableError
from beamaudit.dashboards.tables import (
    ATTENTION,
    EVENTS,
    EXAM_TYPES,
    FLAGS,
    GROUPS,
    INGEST_ERRORS,
    LEVELS,
    ROOM_HISTORY,
    UNMAPPED,
)
from beamaudit.dashboards.wording import quantity_unit

Rows = list[dict[str, Any]]


def test_records_and_frames_give_the_same_table(demo_events: Rows) -> None:
    from_records = EVENTS.validate(demo_events)
    from_frame = EVENTS.validate(pd.DataFrame(demo_events))
    pd.testing.assert_frame_equal(from_records, from_frame)
    assert list(from_records.columns) == list(EVENTS.names)


def test_times_become_utc(demo_events: Rows) -> None:
    table = EVENTS.validate(demo_events[:2])
    assert str(table["event_datetime"].dt.tz) == "UTC"


def test_months_become_the_first_of_the_month(demo_history: Rows) -> None:
    rows = copy.deepcopy(demo_history[:3])
    rows[1]["month"] = pd.Timestamp("2025-04-17 10:00")
    rows[2]["month"] = pd.Period("2025-04", "M")
    table = ROOM_HISTORY.validate(rows)
    assert set(table["month"]) == {pd.Timestamp("2025-04-01")}


def test_optional_columns_may_be_left_out(demo_groups: Rows) -> None:
    rows = [{k: v for k, v in g.items() if k not in ("ci_low", "ci_high")} for g in demo_groups]
    table = GROUPS.validate(rows)
    assert table["ci_low"].isna().all()


def test_extra_columns_are_dropped(demo_groups: Rows) -> None:
    rows = [g | {"note": "x"} for g in demo_groups[:2]]
    assert "note" not in GROUPS.validate(rows).columns


def test_an_empty_list_is_an_empty_table() -> None:
    table = FLAGS.validate([])
    assert table.empty and list(table.columns) == list(FLAGS.names)


def test_missing_columns_are_named(demo_groups: Rows) -> None:
    rows = [{k: v for k, v in g.items() if k != "n_standard"} for g in demo_groups]
    with pytest.raises(TableError, match="groups table: missing column\\(s\\) 'n_standard'"):
        GROUPS.validate(rows)


@pytest.mark.parametrize(
    ("column", "value", "message"),
    [
        ("n", "thirty", "column 'n': not a number in row\\(s\\) \\[1\\]"),
        ("n", 30.5, "column 'n': not a whole number"),
        ("median", -1.0, "column 'median': value below 0"),
        ("status", "above", "'above' not among"),
        ("level_kind", "regional", "'regional' not among 'local', 'national', 'international'"),
        ("room", None, "column 'room': empty value in row\\(s\\) \\[1\\]"),
        ("room", "  ", "column 'room': empty value"),
        ("quantity", "dap", "'quantity' must be a field name ending in its unit"),
    ],
)
def test_bad_group_values_are_named(
    demo_groups: Rows, column: str, value: Any, message: str
) -> None:
    rows = copy.deepcopy(demo_groups[:3])
    rows[1][column] = value
    with pytest.raises(TableError, match=message):
        GROUPS.validate(rows)


def test_cross_column_rules(demo_groups: Rows) -> None:
    rows = copy.deepcopy(demo_groups[:2])
    rows[0]["n_standard"] = rows[0]["n"] + 1
    with pytest.raises(
        TableError, match="n_standard must not exceed n; fails in row\\(s\\) \\[0\\]"
    ):
        GROUPS.validate(rows)


def test_a_bad_time_is_named(demo_events: Rows) -> None:
    rows = copy.deepcopy(demo_events[:2])
    rows[0]["event_datetime"] = "yesterday"
    with pytest.raises(
        TableError, match="'event_datetime': not a date and time in row\\(s\\) \\[0\\]"
    ):
        EVENTS.validate(rows)


def test_true_false_must_be_booleans(demo_events: Rows) -> None:
    rows = copy.deepcopy(demo_events[:2])
    rows[0]["standard_patient"] = "yes"
    with pytest.raises(TableError, match="'standard_patient': not true/false"):
        EVENTS.validate(rows)


def test_a_bad_period_is_named(demo_flags: Rows) -> None:
    demo_flags[0]["period"] = "March 2026"
    with pytest.raises(TableError, match="'period' must be a month written YYYY-MM"):
        FLAGS.validate(demo_flags)


def test_not_a_table() -> None:
    with pytest.raises(TableError, match="expected a DataFrame or a list of rows"):
        LEVELS.validate("levels.csv")
    with pytest.raises(TableError, match="row 0 is a int"):
        LEVELS.validate([1])


def test_table_errors_are_dashboard_errors_and_value_errors() -> None:
    assert issubclass(TableError, DashboardError)
    assert issubclass(DashboardError, ValueError)


@pytest.mark.parametrize(
    "spec", [GROUPS, FLAGS, EVENTS, ROOM_HISTORY, LEVELS], ids=lambda s: s.name
)
def test_every_number_column_carries_its_unit(spec: Any) -> None:
    for column in spec.columns:
        assert column.description
        if column.kind == "float" and column.unit not in ("1", "quantity"):
            assert quantity_unit(column.name), column.name  # e.g. patient_weight_kg


@pytest.mark.parametrize(
    "spec", [ATTENTION, EXAM_TYPES, INGEST_ERRORS, UNMAPPED], ids=lambda s: s.name
)
def test_the_new_contracts_describe_every_column(spec: Any) -> None:
    for column in spec.columns:
        assert column.description
        if column.kind == "float" and column.unit not in ("1", "quantity"):
            assert quantity_unit(column.name), column.name


def test_international_guidance_is_a_level_kind(demo_groups: Rows) -> None:
    rows = [g for g in demo_groups if g["level_kind"] == "international"]
    assert rows and set(GROUPS.validate(rows)["level_kind"]) == {"international"}


def test_a_flag_carries_its_numbers_as_a_mapping(demo_flags: Rows) -> None:
    table = FLAGS.validate(demo_flags)
    assert table.loc[0, "numbers"]["ratio_to_level"] == pytest.approx(1.283)
    bad = copy.deepcopy(demo_flags)
    bad[0]["numbers"] = [1, 2]
    with pytest.raises(TableError, match=r"column 'numbers': not a mapping of names to values"):
        FLAGS.validate(bad)
