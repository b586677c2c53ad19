"""CT reviews by patient size: adult CT groups in bands of the water-equivalent diameter Dw
(AAPM Report 220, eq. 2-3: the size metric; PUBLISHED-VALUES, high). No Dw band edges are
published by AAPM 204/220 or ICRP 135 (from memory), so the edges are a setting, empty by default.
Units without a Dw are counted apart and never guessed into a band; levels may carry a band."""

from __future__ import annotations

import io

import pytest

from beamaudit.api.review import ReviewError, ReviewParameters, review
from beamaudit.api.review.ct_size import (
    EXAMPLE_EDGES_CM,
    OUTSIDE_SIZE_BANDS,
    SIZE_NOT_KNOWN,
    check_edges,
    is_size_band,
    size_band_label,
    size_band_name,
)
from beamaudit.api.review.levels import LEVEL_COLUMNS, LEVEL_OPTIONAL_COLUMNS, read_levels_csv

EDGES = (20.0, 25.0, 30.0, 35.0)


def _levels(*rows: tuple[str, str, str]) -> list:
    columns = (*LEVEL_COLUMNS, *LEVEL_OPTIONAL_COLUMNS)
    head = ",".join(columns)
    lines = [head]
    for group, quantity, value in rows:
        cells = {
            "set_name": "Local", "kind": "local", "version": "1", "effective_from": "2025-01-01",
            "set_source": "committee", "exam_type": "ct_chest", "quantity": quantity,
            "value": value, "unit": "mGy" if quantity == "ctdivol_mgy" else "mGy.cm",
            "source": "", "note": "", "patient_group": group, "clinical_indication": "",
        }  # fmt: skip
        lines.append(",".join(cells[c] for c in columns))
    return read_levels_csv(io.StringIO("\n".join(lines) + "\n"))


def _ct(n: int, dw: float | None, ctdivol: float, **extra: object) -> list[dict[str, object]]:
    row = {"exam_type": "ct_chest", "modality": "CT", "ctdivol_mgy": ctdivol,
           "dlp_mgy_cm": 30 * ctdivol, "ct_dw_cm": float("nan") if dw is None else dw,
           "patient_weight_kg": 70.0, **extra}  # fmt: skip
    return [dict(row) for _ in range(n)]


def _groups(result, quantity: str = "ctdivol_mgy") -> dict:
    rows = result.groups_df.to_dict("records")
    return {r["patient_group"]: r for r in rows if r["quantity"] == quantity}


def test_without_edges_ct_groups_are_as_before(make_events) -> None:
    rows = _ct(30, 27.0, 12.0) + _ct(5, None, 9.0)
    levels = _levels(("", "ctdivol_mgy", "10"))
    groups = _groups(
        review(make_events(rows), levels=levels, params=ReviewParameters.for_month(2025, 3))
    )
    assert set(groups) == {None} and groups[None]["n"] == 35
    assert groups[None]["reference_level"] == 10.0


def test_units_go_to_their_band_and_the_band_takes_its_own_level(make_events) -> None:
    rows = (
        _ct(30, 22.0, 6.0) + _ct(30, 27.0, 12.0) + _ct(4, 36.0, 30.0) + _ct(3, 12.0, 2.0)
        + _ct(6, None, 9.0)
    )  # fmt: skip
    levels = _levels(
        ("", "ctdivol_mgy", "10"),  # the adult level: no size band, applies to no size group
        (size_band_name(20, 25), "ctdivol_mgy", "8"),
        (size_band_name(25, 30), "ctdivol_mgy", "11"),
    )
    params = ReviewParameters.for_month(2025, 3, ct_size_band_edges_cm=EDGES)
    groups = _groups(review(make_events(rows), levels=levels, params=params))
    small, middle = groups["ct_dw_20_25cm"], groups["ct_dw_25_30cm"]
    assert small["n"] == 30 and small["n_used"] == 30 and small["basis"] == "band"
    assert small["reference_level"] == 8.0 and small["status"] == "below_level"
    assert middle["reference_level"] == 11.0 and middle["status"] == "above_level"
    assert "20-25 cm" in small["patient_group_label"]
    # counted and kept visible, no level, never guessed into a band
    assert (
        groups[OUTSIDE_SIZE_BANDS]["n"] == 7 and groups[OUTSIDE_SIZE_BANDS]["status"] == "no_level"
    )
    assert groups[SIZE_NOT_KNOWN]["n"] == 6 and groups[SIZE_NOT_KNOWN]["status"] == "no_level"
    assert "not known" in groups[SIZE_NOT_KNOWN]["patient_group_label"]
    assert None not in groups


def test_edges_are_low_inclusive_high_exclusive(make_events) -> None:
    rows = _ct(1, 20.0, 5.0) + _ct(1, 25.0, 5.0) + _ct(1, 35.0, 5.0) + _ct(1, 19.99, 5.0)
    params = ReviewParameters.for_month(2025, 3, ct_size_band_edges_cm=EDGES)
    groups = _groups(review(make_events(rows), levels=[], params=params))
    assert groups["ct_dw_20_25cm"]["n"] == 1
    assert groups["ct_dw_25_30cm"]["n"] == 1
    assert groups[OUTSIDE_SIZE_BANDS]["n"] == 2


def test_children_keep_their_paediatric_band(make_events) -> None:
    rows = _ct(3, 15.0, 3.0, patient_age_years=6.0, patient_weight_kg=20.0) + _ct(2, 27.0, 9.0)
    params = ReviewParameters.for_month(2025, 3, ct_size_band_edges_cm=EDGES)
    groups = _groups(review(make_events(rows), levels=[], params=params))
    assert groups["weight_15_30kg"]["n"] == 3 and groups["ct_dw_25_30cm"]["n"] == 2


def test_the_edges_are_a_parameter_kept_with_the_run() -> None:
    params = ReviewParameters.for_month(2025, 3, ct_size_band_edges_cm=[20, 25.5])
    again = ReviewParameters.from_json_dict(params.to_json_dict())
    assert again.ct_size_band_edges_cm == (20.0, 25.5)
    assert ReviewParameters.for_month(2025, 3).ct_size_band_edges_cm == ()


@pytest.mark.parametrize("edges", [(30, 20), (20,), (0, 10), (20, 20), (20, float("nan"))])
def test_edges_that_are_no_bands_are_refused(edges) -> None:
    with pytest.raises(ReviewError, match="ct_size_band_edges_cm"):
        ReviewParameters.for_month(2025, 3, ct_size_band_edges_cm=edges)


def test_names_labels_and_the_example() -> None:
    assert size_band_name(22.5, 25) == "ct_dw_22p5_25cm"
    assert is_size_band("ct_dw_22p5_25cm") and not is_size_band(SIZE_NOT_KNOWN)
    assert not is_size_band("ct_dw_25_20cm") and not is_size_band("ct_dw_020_25cm")
    assert size_band_label("ct_dw_22p5_25cm").startswith(
        "CT patients of water-equivalent diameter 22.5-25 cm"
    )
    assert check_edges(EXAMPLE_EDGES_CM) == EXAMPLE_EDGES_CM


def test_a_level_file_may_carry_a_size_band_but_no_other_name() -> None:
    (level_set,) = _levels(("ct_dw_25_30cm", "ctdivol_mgy", "11"))
    assert level_set.entries[0].patient_group == "ct_dw_25_30cm"
    with pytest.raises(ReviewError, match="nor a CT size band"):
        _levels((SIZE_NOT_KNOWN, "ctdivol_mgy", "11"))
