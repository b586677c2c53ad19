"""Figures: tested on fig.data and fig.layout, on invented demo data (conftest.py)."""

from __future__ import annotations

import copy
import math
from typing import Any

import pandas as pd
import plotly.graph_objects as go
import pytest
from dashboards_demo import (
    ENEMA_DAP_GY_CM2,
    INTERNATIONAL_SET,
    LOCAL_SET,
    NAMES,
    NATIONAL_SET,
)

from beamaudit.dashboards import (
    TableError,
    build_dap_ratio_history,
    build_distribution,
    build_overview_heatmap,
    build_ratio_history,
    build_room_history,
    build_spectrum,
)
from beamaudit.dashboards._heatmap_figure import TOO_FEW_FILL, heatmap_key
from beamaudit.dashboards.wording import OKABE_ITO, STATUS_LOOK

Rows = list[dict[str, Any]]


PELVIS_DAP = "Pelvis AP · DAP (Gy·cm²)"
CHEST_DAP = "Chest PA · DAP (Gy·cm²)"


def _cell(fig: go.Figure, trace: int, x: str, y: str) -> Any:
    data = fig.data[trace]
    return data.z[list(data.y).index(y)][list(data.x).index(x)]


def _text(fig: go.Figure, trace: int, x: str, y: str) -> str:
    data = fig.data[trace]
    return str(data.text[list(data.y).index(y)][list(data.x).index(x)])


def _heatmap(groups: Rows, **options: Any) -> go.Figure:
    return build_overview_heatmap(groups, exam_names=NAMES, **options)


# ---------------------------------------------------------------- heatmap


def test_heatmap_names_examinations_from_the_catalogue(demo_groups: Rows) -> None:
    fig = _heatmap(demo_groups)
    labels = set(fig.data[0].y)
    assert PELVIS_DAP in labels and "Barium enema · DAP (Gy·cm²)" in labels
    assert not any("_" in label for label in labels)  # no code such as pelvis_ap
    coded = build_overview_heatmap(demo_groups)  # without names: the codes, as they are
    assert "pelvis_ap · DAP (Gy·cm²)" in set(coded.data[0].y)


def test_heatmap_keeps_a_paediatric_band_apart_and_names_it(demo_groups: Rows) -> None:
    # ICRP 135: children of a weight band are judged against their band's level; their row is
    # their own, named; a band every group of a quantity shares is not repeated on each row
    pelvis = next(g for g in demo_groups if g["exam_type"] == "pelvis_ap")
    band = {**pelvis, "patient_group_label": "children 15-<30 kg (ICRP 135 weight band)"}
    labels = set(_heatmap([pelvis, band]).data[0].y)
    assert labels == {PELVIS_DAP, PELVIS_DAP.replace(" ·", ", children 15-<30 kg ·", 1)}
    alone = _heatmap([band]).data[0]
    assert PELVIS_DAP in {*alone.x, *alone.y}


def test_heatmap_cells_are_log2_of_the_largest_ratio(demo_groups: Rows) -> None:
    fig = _heatmap(demo_groups)
    rows = [
        g for g in demo_groups
        if (g["room"], g["exam_type"], g["quantity"]) == ("Ortho DR", "pelvis_ap", "dap_gy_cm2")
    ]  # fmt: skip
    largest = max(g["ratio_to_level"] for g in rows)
    assert _cell(fig, 0, "Ortho DR", PELVIS_DAP) == pytest.approx(math.log2(largest))
    assert _cell(fig, 1, "Ortho DR", PELVIS_DAP) is None


def test_heatmap_puts_examinations_down_the_side_when_they_outnumber_rooms(
    demo_groups: Rows,
) -> None:
    fig = _heatmap(demo_groups)
    assert list(fig.data[0].x) == ["CT 1", "Fluoro 1", "Mobile 1", "Ortho DR", "West DR 1",
                                   "West DR 2"]  # fmt: skip
    assert fig.layout.yaxis.categoryarray[-1] == "Abdomen AP · DAP (Gy·cm²)"  # reads at the top
    across = _heatmap(demo_groups, rooms_across=False)
    assert list(across.layout.yaxis.categoryarray) == sorted(across.data[0].y, reverse=True)
    assert _cell(across, 0, PELVIS_DAP, "Ortho DR") == _cell(fig, 0, "Ortho DR", PELVIS_DAP)


def test_heatmap_text_carries_the_status_symbol_not_only_colour(demo_groups: Rows) -> None:
    fig = _heatmap(demo_groups)
    above = _text(fig, 0, "Ortho DR", PELVIS_DAP)
    assert above.startswith(STATUS_LOOK["above_level"].symbol) and above.endswith("×")
    below = _text(fig, 0, "West DR 2", CHEST_DAP)
    assert below.startswith(STATUS_LOOK["below_level"].symbol)


def test_heatmap_draws_only_groups_that_have_a_level(demo_groups: Rows) -> None:
    fig = _heatmap(demo_groups)
    assert "Pelvis AP · ESAK (mGy)" not in set(fig.data[0].y)  # no level: the table lists it
    assert any(g["status"] == "no_level" for g in demo_groups)


def test_too_few_patients_have_no_colour_a_dashed_outline_and_words(demo_groups: Rows) -> None:
    fig = _heatmap(demo_groups)
    assert _cell(fig, 0, "Ortho DR", CHEST_DAP) is None  # 9 patients: not coloured by ratio
    assert _cell(fig, 1, "Ortho DR", CHEST_DAP) == 0.0
    few = fig.data[1]
    assert {c for _, c in few.colorscale} == {TOO_FEW_FILL}  # white: not a colour of the scale
    assert TOO_FEW_FILL not in {c for _, c in fig.data[0].colorscale}
    assert _text(fig, 1, "Ortho DR", CHEST_DAP) == "○ too few"
    dotted = [s for s in fig.layout.shapes if s.line.dash == "dot"]
    n_few = sum(1 for row in few.z for v in row if v == 0.0)
    assert len(dotted) == n_few > 0


def test_heatmap_colours_stay_readable_under_the_ink(demo_groups: Rows) -> None:
    # WCAG 2.1 relative luminance and contrast ratio; 4.5:1 for normal text (SC 1.4.3)
    def luminance(hex_colour: str) -> float:
        channels = [int(hex_colour[i : i + 2], 16) / 255 for i in (1, 3, 5)]
        linear = [c / 12.92 if c <= 0.04045 else ((c + 0.055) / 1.055) ** 2.4 for c in channels]
        return 0.2126 * linear[0] + 0.7152 * linear[1] + 0.0722 * linear[2]

    ink = luminance("#1d2a33")
    for _, colour in _heatmap(demo_groups).data[0].colorscale:
        assert (luminance(colour) + 0.05) / (ink + 0.05) >= 4.5, colour


def test_heatmap_colour_bar_is_centred_on_one_and_titled_plainly(demo_groups: Rows) -> None:
    heat = _heatmap(demo_groups).data[0]
    assert heat.zmid == 0.0  # log2(1)
    assert heat.zmin == -heat.zmax
    assert heat.colorbar.title.text == "Median ÷ level"
    assert "1×" in heat.colorbar.ticktext
    assert _heatmap(demo_groups, colour_bar=False).data[0].showscale is False


def test_heatmap_keeps_its_text_with_many_columns(demo_groups: Rows) -> None:
    # 17 rooms by 10 examination-quantity pairs, rooms across: every cell still says its status
    wide = [dict(g, room=f"Room {k:02d}") for k in range(17) for g in demo_groups]
    fig = _heatmap(wide, rooms_across=True)
    assert len(fig.data[0].x) == 17
    texts = [t for row in fig.data[0].text for t in row if t]
    assert texts and all(t[0] in "▲◆●" for t in texts)
    few = [t for row in fig.data[1].text for t in row if t]
    assert few and all(t.startswith("○") for t in few)
    narrow = _heatmap(demo_groups, width_px=700, colour_bar=False)  # the committee report's
    for trace in narrow.data:
        for z_row, text_row in zip(trace.z, trace.text, strict=True):
            assert all(t for z, t in zip(z_row, text_row, strict=True) if z is not None)


def test_heatmap_key_names_every_colour(demo_groups: Rows) -> None:
    key = heatmap_key()
    figure_colours = {c for _, c in _heatmap(demo_groups).data[0].colorscale}
    assert {c for _, c in key["stops"]} == figure_colours
    assert [w for _, w in key["symbols"]] == ["Above the level", "Possibly above",
                                              "Below the level"]  # fmt: skip
    assert key["too_few"].short == "Too few patients"


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
    fig = build_distribution(demo_events, quantity="dap_gy_cm2", exam_type="pelvis_ap")
    standard, other = (t for t in fig.data if t.type == "box")
    assert (standard.name, other.name) == ("Standard-size patients", "Other patients")
    assert standard.marker.symbol != other.marker.symbol
    assert standard.marker.color != other.marker.color
    expected = [
        e for e in demo_events
        if e["exam_type"] == "pelvis_ap" and e["standard_patient"] and e["dap_gy_cm2"] is not None
    ]  # fmt: skip
    assert len(standard.y) == len(expected)
    assert set(standard.x) == {"Ortho DR", "West DR 1"}
    assert fig.layout.boxmode == "group"


def test_distribution_legend_shows_the_symbols_the_points_have(demo_events: Rows) -> None:
    # a box's own legend entry is a square: the boxes stay out of the legend, and a marker
    # entry of the same symbol and colour stands for each patient group
    fig = build_distribution(demo_events, quantity="dap_gy_cm2", exam_type="pelvis_ap")
    boxes = [t for t in fig.data if t.type == "box"]
    assert all(b.showlegend is False for b in boxes)
    entries = {t.name: t for t in fig.data if t.type == "scatter" and t.mode == "markers"}
    for box in boxes:
        entry = entries[box.name]
        assert (entry.marker.symbol, entry.marker.color) == (box.marker.symbol, box.marker.color)
    assert {entries[b.name].marker.symbol for b in boxes} == {"circle", "diamond-open"}


def test_distribution_axes_have_units_and_counts(demo_events: Rows) -> None:
    fig = build_distribution(demo_events, quantity="ctdivol_mgy", exam_type="ct_head")
    assert fig.layout.yaxis.title.text == "CTDIvol (mGy)"
    assert fig.layout.xaxis.title.text == "Room (number of exposures)"
    n = sum(1 for e in demo_events if e["exam_type"] == "ct_head")
    assert list(fig.layout.xaxis.ticktext) == [f"CT 1 ({n})"]


def test_distribution_of_an_examination_level_type_sums_each_study(demo_events: Rows) -> None:
    # the 187 Gy·cm² enema is one point of 187, not thirty exposures of a few Gy·cm²
    per_event = build_distribution(demo_events, quantity="dap_gy_cm2",
                                   exam_type="fluoro_barium_enema")  # fmt: skip
    per_study = build_distribution(demo_events, quantity="dap_gy_cm2",
                                   exam_type="fluoro_barium_enema", per_study="sum",
                                   exam_name="Barium enema")  # fmt: skip
    values = [v for t in per_study.data if t.type == "box" for v in t.y]
    assert max(values) == pytest.approx(ENEMA_DAP_GY_CM2, rel=1e-3)
    assert max(v for t in per_event.data if t.type == "box" for v in t.y) < 60
    studies = {e["study_uid"] for e in demo_events if e["exam_type"] == "fluoro_barium_enema"}
    assert len(values) == len(studies)
    assert per_study.layout.yaxis.title.text == "DAP per examination (Gy·cm²)"
    assert per_study.layout.xaxis.title.text == "Room (number of examinations)"
    assert "sum over each study's exposures" in per_study.layout.title.text


def test_distribution_draws_each_kind_of_level_in_its_own_line(
    demo_events: Rows, demo_groups: Rows
) -> None:
    fig = build_distribution(demo_events, quantity="dap_gy_cm2", exam_type="chest_pa",
                             levels=demo_groups)  # fmt: skip
    lines = {shape.y0: shape.line.dash for shape in fig.layout.shapes}
    assert lines == {0.10: "dash", 0.12: "solid"}  # the invented demo levels
    esak = build_distribution(demo_events, quantity="esak_mgy", exam_type="chest_pa",
                              levels=demo_groups)  # fmt: skip
    assert {s.y0: s.line.dash for s in esak.layout.shapes} == {0.4: "dot"}  # international
    legend = [t.name for t in esak.data if t.type == "scatter" and t.mode == "lines"]
    assert legend == [f"International guidance 0.4 mGy ({INTERNATIONAL_SET})"]


def test_distribution_names_levels_in_the_legend_with_the_line_they_have(
    demo_events: Rows, demo_groups: Rows
) -> None:
    fig = build_distribution(demo_events, quantity="dap_gy_cm2", exam_type="chest_pa",
                             levels=demo_groups)  # fmt: skip
    entries = {t.name: t.line.dash for t in fig.data if t.type == "scatter" and t.mode == "lines"}
    assert entries == {
        f"Local level 0.1 Gy·cm² ({LOCAL_SET})": "dash",
        f"National level 0.12 Gy·cm² ({NATIONAL_SET})": "solid",
    }


def test_distribution_units_are_written_once(demo_events: Rows) -> None:
    fig = build_distribution(demo_events, quantity="recon_dap_gy_cm2", exam_type="chest_pa")
    assert fig.layout.yaxis.title.text == "Reconstructed DAP (Gy·cm²)"  # not "DAP (…) (Gy·cm²)"


def test_distribution_ignores_levels_of_other_quantities(
    demo_events: Rows, demo_groups: Rows
) -> None:
    fig = build_distribution(demo_events, quantity="recon_dap_gy_cm2", exam_type="chest_pa",
                             levels=demo_groups)  # fmt: skip
    assert len(fig.layout.shapes) == 0


def test_distribution_log_axis(demo_events: Rows) -> None:
    fig = build_distribution(demo_events, quantity="dap_gy_cm2", exam_type="chest_pa", log_y=True)
    assert fig.layout.yaxis.type == "log"


def test_distribution_rejects_a_column_that_is_not_a_dose(demo_events: Rows) -> None:
    with pytest.raises(TableError, match="quantity 'kvp_kv' is not a dose column"):
        build_distribution(demo_events, quantity="kvp_kv", exam_type="chest_pa")


def test_distribution_without_values_says_so(demo_events: Rows) -> None:
    fig = build_distribution(demo_events, quantity="dlp_mgy_cm", exam_type="chest_pa")
    assert len(fig.data) == 0
    assert fig.layout.annotations[0].text == "No DLP values"


def test_figures_do_not_change_their_input(demo_events: Rows, demo_groups: Rows) -> None:
    frame = pd.DataFrame(demo_events)
    before = frame.copy()
    groups = copy.deepcopy(demo_groups)
    build_distribution(frame, quantity="dap_gy_cm2", exam_type="fluoro_barium_enema",
                       levels=groups, per_study="sum")  # fmt: skip
    build_overview_heatmap(groups)
    pd.testing.assert_frame_equal(frame, before)
    assert groups == demo_groups


# ---------------------------------------------------------------- history


def test_room_history_one_line_per_exam_and_change_points(demo_history: Rows) -> None:
    fig = build_room_history(demo_history, quantity="dap_gy_cm2", room="West DR 1",
                             exam_names=NAMES)  # fmt: skip
    names = [t.name for t in fig.data]
    assert len(names) == 20 and names[-1] == "Change detected"
    assert names[:3] == ["Abdomen AP", "Cervical spine AP", "Cervical spine lateral"]
    assert not any("_" in n for n in names)  # catalogue names, never codes
    change = fig.data[-1]
    assert [pd.Timestamp(x).strftime("%Y-%m") for x in change.x] == ["2025-11"]
    assert list(change.customdata) == ["Lumbar spine AP"]


def test_nineteen_exam_lines_never_share_colour_and_marker(demo_history: Rows) -> None:
    fig = build_room_history(demo_history, quantity="dap_gy_cm2", exam_names=NAMES)
    lines = [t for t in fig.data if t.mode == "lines+markers"]
    looks = {(t.line.color, t.marker.symbol) for t in lines}
    assert len(lines) == 19 and len(looks) == 19
    assert {t.line.dash for t in lines} == {"solid", "dash", "dot"}  # a third channel beyond 7
    assert fig.layout.legend.y < 0  # a long legend goes below the plot


def test_room_history_axes(demo_history: Rows) -> None:
    fig = build_room_history(demo_history, quantity="esak_mgy", log_y=False)
    assert fig.layout.yaxis.title.text == "Median ESAK (mGy)"
    assert fig.layout.xaxis.title.text == "Month"
    assert fig.layout.showlegend is True
    assert fig.layout.yaxis.type != "log"


def test_room_history_takes_a_log_axis_when_medians_span_a_decade(demo_history: Rows) -> None:
    # Hand PA about 0.015 and Lumbar spine lateral about 1.5 Gy·cm² share the axis
    fig = build_room_history(demo_history, quantity="dap_gy_cm2")
    assert fig.layout.yaxis.type == "log"
    assert 0.1 in fig.layout.yaxis.tickvals and 1.0 in fig.layout.yaxis.tickvals
    linear = build_room_history(demo_history, quantity="dap_gy_cm2", log_y=False)
    assert linear.layout.yaxis.type != "log"


def test_dap_ratio_history_band_line_and_outside_marks(demo_history: Rows) -> None:
    fig = build_dap_ratio_history(demo_history, room="West DR 1")
    lower, upper, line, outside = fig.data
    assert upper.name == "Tolerance band" and upper.fill == "tonexty"
    assert set(lower.y) == {0.75} and set(upper.y) == {1.25}
    assert line.name == "All examinations" and len(line.x) == 12
    assert [pd.Timestamp(x).strftime("%Y-%m") for x in outside.x] == [
        "2026-01",
        "2026-02",
        "2026-03",
    ]
    assert outside.marker.symbol == "x-thin-open"
    assert fig.layout.yaxis.title.text == "Reported ÷ reconstructed DAP"  # a ratio: no "(1)"
    assert fig.layout.shapes[0].y0 == 1.0


def test_dap_ratio_history_splits_by_exam_when_ratios_differ(demo_history: Rows) -> None:
    rows = [r for r in copy.deepcopy(demo_history) if r["exam_type"] in ("chest_pa", "pelvis_ap")]
    for row in rows:
        if row["exam_type"] == "pelvis_ap":
            row["dap_ratio_median"] = 0.95
    fig = build_dap_ratio_history(rows, exam_names=NAMES)
    names = [t.name for t in fig.data if t.mode == "lines+markers"]
    assert names == ["Chest PA", "Pelvis AP"]


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
    # the beam's figures under the title, not in a box over the curve (and its K lines)
    assert not [a for a in fig.layout.annotations if "HVL" in (a.text or "")]
    assert fig.layout.title.subtitle.text == "HVL₁ 3.44 mm Al · output 52.0 µGy/mAs at 1 m"
    assert fig.layout.shapes[0].x0 == 81.0
    assert fig.layout.xaxis.range[1] == pytest.approx(81.0 * 1.08)


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
        build_distribution(events, quantity="dap_gy_cm2", exam_type="chest_pa", levels=groups),
        build_distribution(
            events,
            quantity="dap_gy_cm2",
            exam_type="fluoro_barium_enema",
            levels=groups,
            per_study="sum",
        ),
        build_room_history(history, quantity="dap_gy_cm2"),
        build_dap_ratio_history(history),
        build_spectrum(exam["exposures"][0]["spectrum"]),
    ]


_CATEGORY_AXES = {
    "",  # rooms along the top of the heatmap: its title says "by room"
    "Room",
    "Month",
    "Examination · quantity (unit)",
    "Room (number of examinations)",
    "Room (number of exposures)",
    "Reported ÷ reconstructed DAP",  # a ratio of two doses: no unit
}


def test_every_value_axis_states_its_unit(
    demo_events: Rows, demo_groups: Rows, demo_history: Rows, demo_exam: dict[str, Any]
) -> None:
    for fig in _all_figures((demo_events, demo_groups, demo_history, demo_exam)):
        for axis in (fig.layout.xaxis, fig.layout.yaxis):
            title = axis.title.text or ""
            assert title in _CATEGORY_AXES or title.endswith(")"), title
            assert "(1)" not in title and ") (" not in title, title  # no unit "1", no doubled units


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


def test_mgd_ratio_history_bands_the_rooms_usual_ratio_not_one() -> None:
    # invented: a unit at 1.10 x the Dance D_G, then 1.50 x; the band is the usual ratio ± 20 %
    months = ["2025-10", "2025-11", "2025-12", "2026-01"]
    rows = [
        {"month": mo, "exam_type": None, "quantity": "mgd_mgy", "median": None, "n": 0,
         "change_point": False, "dap_ratio_median": None, "tolerance_low": None,
         "tolerance_high": None, "mgd_ratio_median": r, "mgd_band_low": lo,
         "mgd_band_high": hi}
        for mo, r, lo, hi in zip(months, [1.1, 1.12, 1.09, 1.5], [None, 0.88, 0.88, 0.88],
                                 [None, 1.32, 1.32, 1.32], strict=True)
    ]  # fmt: skip
    fig = build_ratio_history(rows, ratio="mgd_ratio", room="Breast 1")
    lower, upper, line, outside = fig.data
    assert upper.name == "Room's usual ratio ± tolerance" and upper.fill == "tonexty"
    assert list(lower.y) == [0.88] * 3 and list(upper.y) == [1.32] * 3
    assert list(line.y) == [1.1, 1.12, 1.09, 1.5]
    assert [pd.Timestamp(x).strftime("%Y-%m") for x in outside.x] == ["2026-01"]
    assert fig.layout.yaxis.title.text == "Unit's AGD ÷ reconstructed D_G"
    assert not fig.layout.shapes  # no line at 1: vendors' methods differ
