"""Figures: tested on fig.data and fig.layout, on invented demo data (conftest.py)."""

from __future__ import annotations

import copy
import math
from typing import Any

import pandas as pd
import plotly.graph_objects as go
import pytest

from beamaudit.dashboards import (
    TableError,
    build_dap_ratio_history,
    build_distribution,
    build_overview_heatmap,
    build_room_history,
    build_spectrum,
)
from beamaudit.dashboards.wording import OKABE_ITO, STATUS_LOOK

Rows = list[dict[str, Any]]


def _cell(fig: go.Figure, trace: int, x: str, y: str) -> Any:
    data = fig.data[trace]
    return data.z[list(data.y).index(y)][list(data.x).index(x)]


def _text(fig: go.Figure, x: str, y: str) -> str:
    data = fig.data[0]
    return str(data.text[list(data.y).index(y)][list(data.x).index(x)])


# ---------------------------------------------------------------- heatmap


def test_heatmap_cells_are_log2_of_the_largest_ratio(demo_groups: Rows) -> None:
    fig = build_overview_heatmap(demo_groups)
    rows = [
        g
        for g in demo_groups
        if g["room"] == "Ortho DR"
        and g["exam_type"] == "Pelvis AP"
        and g["quantity"] == "dap_gy_cm2"
    ]
    largest = max(g["ratio_to_level"] for g in rows)
    z = _cell(fig, 0, "Pelvis AP<br>DAP (Gy·cm²)", "Ortho DR")
    assert z == pytest.approx(math.log2(largest))
    assert _cell(fig, 1, "Pelvis AP<br>DAP (Gy·cm²)", "Ortho DR") is None


def test_heatmap_text_carries_the_status_symbol_not_only_colour(demo_groups: Rows) -> None:
    fig = build_overview_heatmap(demo_groups)
    over = _text(fig, "Pelvis AP<br>DAP (Gy·cm²)", "Ortho DR")
    assert over.startswith(STATUS_LOOK["above_level"].symbol)
    assert "×" in over
    no_level = _text(fig, "Chest PA<br>ESAK (mGy)", "West DR 1")
    assert no_level == f"{STATUS_LOOK['no_level'].symbol} {STATUS_LOOK['no_level'].brief}"


def test_heatmap_puts_too_few_patients_in_the_grey_trace(demo_groups: Rows) -> None:
    fig = build_overview_heatmap(demo_groups)
    column = "Chest PA<br>DAP (Gy·cm²)"
    assert _cell(fig, 0, column, "Ortho DR") is None  # 9 patients: not coloured by ratio
    assert _cell(fig, 1, column, "Ortho DR") == 0.0
    assert STATUS_LOOK["insufficient_sample"].brief in _text(fig, column, "Ortho DR")


def test_heatmap_ratio_colour_scale_is_centred_on_one(demo_groups: Rows) -> None:
    heat = build_overview_heatmap(demo_groups).data[0]
    assert heat.zmid == 0.0  # log2(1)
    assert heat.zmin == -heat.zmax
    assert heat.colorbar.title.text == "Median ÷ level (1)"
    assert heat.colorscale[0][1] == OKABE_ITO["blue"]
    assert heat.colorscale[-1][1] == OKABE_ITO["vermillion"]
    assert "1" in heat.colorbar.ticktext


def test_heatmap_first_room_reads_at_the_top(demo_groups: Rows) -> None:
    fig = build_overview_heatmap(demo_groups)
    assert list(fig.layout.yaxis.categoryarray) == ["West DR 2", "West DR 1", "Ortho DR", "CT 1"]


def test_heatmap_rooms_across_swaps_the_axes(demo_groups: Rows) -> None:
    fig = build_overview_heatmap(demo_groups, rooms_across=True)
    assert list(fig.data[0].x) == ["CT 1", "Ortho DR", "West DR 1", "West DR 2"]
    assert fig.layout.xaxis.title.text == "Room"
    assert _cell(fig, 0, "Ortho DR", "Pelvis AP<br>DAP (Gy·cm²)") == pytest.approx(
        _cell(build_overview_heatmap(demo_groups), 0, "Pelvis AP<br>DAP (Gy·cm²)", "Ortho DR")
    )


def test_heatmap_of_no_groups_says_so() -> None:
    fig = build_overview_heatmap([])
    assert len(fig.data) == 0
    assert "No review groups" in fig.layout.annotations[0].text


def test_heatmap_rejects_an_unknown_status(demo_groups: Rows) -> None:
    bad = copy.deepcopy(demo_groups[:1])
    bad[0]["status"] = "fine"
    with pytest.raises(TableError, match=r"groups table, column 'status'.*'fine'"):
        build_overview_heatmap(bad)


# ----------------------------------------------------------- distribution


def test_distribution_separates_standard_patients_by_symbol_and_colour(
    demo_events: Rows,
) -> None:
    fig = build_distribution(demo_events, quantity="dap_gy_cm2", exam_type="Pelvis AP")
    standard, other = fig.data
    assert (standard.name, other.name) == ("Standard-size patients", "Other patients")
    assert standard.marker.symbol != other.marker.symbol
    assert standard.marker.color != other.marker.color
    expected = [
        e
        for e in demo_events
        if e["exam_type"] == "Pelvis AP" and e["standard_patient"] and e["dap_gy_cm2"] is not None
    ]
    assert len(standard.y) == len(expected)
    assert set(standard.x) == {"Ortho DR", "West DR 1"}
    assert fig.layout.boxmode == "group"


def test_distribution_axes_have_units_and_counts(demo_events: Rows) -> None:
    fig = build_distribution(demo_events, quantity="ctdivol_mgy", exam_type="CT head")
    assert fig.layout.yaxis.title.text == "CTDIvol (mGy)"
    assert fig.layout.xaxis.title.text == "Room (number of examinations)"
    n = sum(1 for e in demo_events if e["exam_type"] == "CT head")
    assert list(fig.layout.xaxis.ticktext) == [f"CT 1 ({n})"]


def test_distribution_draws_local_dashed_and_national_solid(
    demo_events: Rows, demo_groups: Rows
) -> None:
    fig = build_distribution(
        demo_events, quantity="dap_gy_cm2", exam_type="Chest PA", levels=demo_groups
    )
    lines = {shape.y0: shape.line.dash for shape in fig.layout.shapes}
    assert lines == {0.10: "dash", 0.12: "solid"}  # the invented demo levels
    labels = sorted(a.text for a in fig.layout.annotations)
    assert labels == ["Local level 0.1 Gy·cm²", "National level 0.12 Gy·cm²"]


def test_distribution_ignores_levels_of_other_quantities(
    demo_events: Rows, demo_groups: Rows
) -> None:
    fig = build_distribution(
        demo_events, quantity="esak_mgy", exam_type="Chest PA", levels=demo_groups
    )
    assert len(fig.layout.shapes) == 0


def test_distribution_log_axis(demo_events: Rows) -> None:
    fig = build_distribution(demo_events, quantity="dap_gy_cm2", exam_type="Chest PA", log_y=True)
    assert fig.layout.yaxis.type == "log"


def test_distribution_rejects_a_column_that_is_not_a_dose(demo_events: Rows) -> None:
    with pytest.raises(TableError, match="quantity 'kvp_kv' is not a dose column"):
        build_distribution(demo_events, quantity="kvp_kv", exam_type="Chest PA")


def test_distribution_without_values_says_so(demo_events: Rows) -> None:
    fig = build_distribution(demo_events, quantity="dlp_mgy_cm", exam_type="Chest PA")
    assert len(fig.data) == 0
    assert fig.layout.annotations[0].text == "No DLP values"


def test_figures_do_not_change_their_input(demo_events: Rows, demo_groups: Rows) -> None:
    frame = pd.DataFrame(demo_events)
    before = frame.copy()
    groups = copy.deepcopy(demo_groups)
    build_distribution(frame, quantity="dap_gy_cm2", exam_type="Chest PA", levels=groups)
    build_overview_heatmap(groups)
    pd.testing.assert_frame_equal(frame, before)
    assert groups == demo_groups


# ---------------------------------------------------------------- history


def test_room_history_one_line_per_exam_and_change_points(demo_history: Rows) -> None:
    fig = build_room_history(demo_history, quantity="dap_gy_cm2", room="West DR 1")
    names = [t.name for t in fig.data]
    assert names == ["Chest PA", "Lumbar spine AP", "Pelvis AP", "Change detected"]
    change = fig.data[-1]
    assert [pd.Timestamp(x).strftime("%Y-%m") for x in change.x] == ["2025-11"]
    assert list(change.customdata) == ["Lumbar spine AP"]
    assert len({t.marker.symbol for t in fig.data[:3]}) == 3  # not colour alone


def test_room_history_axes(demo_history: Rows) -> None:
    fig = build_room_history(demo_history, quantity="esak_mgy")
    assert fig.layout.yaxis.title.text == "Median ESAK (mGy)"
    assert fig.layout.xaxis.title.text == "Month"
    assert fig.layout.showlegend is True
    assert fig.layout.yaxis.type != "log"


def test_room_history_takes_a_log_axis_when_medians_span_a_decade(demo_history: Rows) -> None:
    # Chest PA about 0.085 and Pelvis AP about 1.35 Gy·cm² share the axis
    fig = build_room_history(demo_history, quantity="dap_gy_cm2")
    assert fig.layout.yaxis.type == "log"
    assert 0.1 in fig.layout.yaxis.tickvals and 1.0 in fig.layout.yaxis.tickvals
    linear = build_room_history(demo_history, quantity="dap_gy_cm2", log_y=False)
    assert linear.layout.yaxis.type != "log"


def test_dap_ratio_history_band_line_and_outside_marks(demo_history: Rows) -> None:
    fig = build_dap_ratio_history(demo_history, room="West DR 1")
    lower, upper, line, outside = fig.data
    assert upper.name == "Tolerance band" and upper.fill == "tonexty"
    assert set(lower.y) == {0.85} and set(upper.y) == {1.15}
    assert line.name == "All examinations" and len(line.x) == 12
    assert [pd.Timestamp(x).strftime("%Y-%m") for x in outside.x] == [
        "2026-01",
        "2026-02",
        "2026-03",
    ]
    assert outside.marker.symbol == "x-thin-open"
    assert fig.layout.yaxis.title.text == "Reported ÷ reconstructed DAP (1)"
    assert fig.layout.shapes[0].y0 == 1.0


def test_dap_ratio_history_splits_by_exam_when_ratios_differ(demo_history: Rows) -> None:
    rows = copy.deepcopy(demo_history)
    for row in rows:
        if row["exam_type"] == "Pelvis AP":
            row["dap_ratio_median"] = 0.95
    fig = build_dap_ratio_history(rows)
    names = [t.name for t in fig.data if t.mode == "lines+markers"]
    assert names == ["Chest PA", "Lumbar spine AP", "Pelvis AP"]


def test_dap_ratio_history_rejects_two_bands_in_one_month(demo_history: Rows) -> None:
    rows = copy.deepcopy(demo_history)
    rows[0]["tolerance_high"] = 1.2
    with pytest.raises(TableError, match=r"tolerance band differs .*\(2025-04\)"):
        build_dap_ratio_history(rows)


# --------------------------------------------------------------- spectrum


def test_spectrum_figure(demo_exam: dict[str, Any]) -> None:
    spectrum = demo_exam["exposures"][0]["spectrum"]
    fig = build_spectrum(spectrum, kvp_kv=81)
    (trace,) = fig.data
    assert len(trace.x) == len(spectrum["energies_kev"]) == len(trace.y)
    assert fig.layout.xaxis.title.text == "Photon energy (keV)"
    assert "mm⁻²·mAs⁻¹·keV⁻¹ at 1 m" in fig.layout.yaxis.title.text
    notes = fig.layout.annotations[0].text
    assert "HVL₁ 3.40 mm Al" in notes and "52 µGy/mAs at 1 m" in notes
    assert fig.layout.shapes[0].x0 == 81.0


@pytest.mark.parametrize(
    ("spectrum", "message"),
    [
        ({"energies_kev": [10, 20], "fluence_per_mas_1m": [1.0]}, "has 2 values but"),
        ({"energies_kev": [20, 10], "fluence_per_mas_1m": [1, 2]}, "must increase"),
        (
            {"energies_kev": [10, 20], "fluence_per_mas_1m": [1, -2]},
            r"\[1\]: expected a number >= 0",
        ),
        ({"energies_kev": [10, 20]}, "missing 'fluence_per_mas_1m'"),
        (
            {"energies_kev": [10, 20], "fluence_per_mas_1m": [1, 2], "hvl1_mm_al": "3"},
            "hvl1_mm_al: expected a number",
        ),
    ],
)
def test_spectrum_rejects_bad_input(spectrum: dict[str, Any], message: str) -> None:
    with pytest.raises(TableError, match=message):
        build_spectrum(spectrum)


# ------------------------------------------------------------ every figure


def _all_figures(demo: tuple[Rows, Rows, Rows, dict[str, Any]]) -> list[go.Figure]:
    events, groups, history, exam = demo
    return [
        build_overview_heatmap(groups),
        build_distribution(events, quantity="dap_gy_cm2", exam_type="Chest PA", levels=groups),
        build_room_history(history, quantity="dap_gy_cm2"),
        build_dap_ratio_history(history),
        build_spectrum(exam["exposures"][0]["spectrum"]),
    ]


_CATEGORY_AXES = {
    "Room",
    "Month",
    "Examination · quantity (unit)",
    "Room (number of examinations)",
}


def test_every_value_axis_states_its_unit(
    demo_events: Rows, demo_groups: Rows, demo_history: Rows, demo_exam: dict[str, Any]
) -> None:
    for fig in _all_figures((demo_events, demo_groups, demo_history, demo_exam)):
        for axis in (fig.layout.xaxis, fig.layout.yaxis):
            title = axis.title.text
            assert title, fig.layout.title.text
            assert title in _CATEGORY_AXES or title.endswith(")"), title


# Okabe M, Ito K, Color Universal Design (2002): a palette kept apart under common colour-vision
# deficiencies; the ink colour #1d2a33 is near-black.
def test_every_colour_is_okabe_ito_or_grey(
    demo_events: Rows, demo_groups: Rows, demo_history: Rows, demo_exam: dict[str, Any]
) -> None:
    allowed = {c.lower() for c in OKABE_ITO.values()}
    for fig in _all_figures((demo_events, demo_groups, demo_history, demo_exam)):
        for trace in fig.data:
            colour = getattr(getattr(trace, "marker", None), "color", None)
            if isinstance(colour, str):
                assert colour.lower() in allowed or colour.startswith("#1d2a33"), colour
