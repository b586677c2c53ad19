"""Mammography reviews: per view, in the compressed-thickness band (default 50-60 mm, the band
national surveys use: common practice), about 50 views per group (ICRP 135, from memory,
medium); outside the band and without a thickness counted apart, with no level."""

from __future__ import annotations

import pytest

from beamaudit.api.review import ReviewError, ReviewParameters, load_demo_local_levels, review
from beamaudit.api.review.mammography import (
    OUTSIDE_THICKNESS_BAND,
    THICKNESS_NOT_RECORDED,
    band_label,
    band_name,
)

LEVELS = load_demo_local_levels()  # invented local set: mammo_cc 2.0 mGy, mammo_mlo 2.3 mGy
MARCH = ReviewParameters.for_month(2025, 3)


def _views(n: int, view: str, thickness: float | None, agd: float) -> list[dict[str, object]]:
    row = {"exam_type": f"mammo_{view}", "modality": "MG", "mgd_mgy": agd,
           "breast_thickness_mm": float("nan") if thickness is None else thickness}  # fmt: skip
    return [dict(row) for _ in range(n)]


def _groups(result) -> dict[tuple[str, str | None], dict[str, object]]:
    rows = result.groups_df.to_dict("records")
    return {(r["exam_type"], r["patient_group"]): r for r in rows}


def test_views_are_grouped_by_band_and_the_band_takes_the_level(make_events) -> None:
    rows = (
        _views(50, "cc", 55.0, 2.4) + _views(50, "mlo", 52.0, 1.9)
        + _views(7, "cc", 72.0, 3.5) + _views(3, "cc", None, 1.0)
    )  # fmt: skip
    groups = _groups(review(make_events(rows), levels=LEVELS, params=MARCH))
    band = groups[("mammo_cc", "breast_50_60mm")]
    assert band["n"] == 50 and band["n_used"] == 50 and band["basis"] == "band"
    assert band["reference_level"] == 2.0 and band["status"] == "above_level"
    assert band["mean_weight_check"] == "not_applicable"
    assert "50-60 mm" in band["patient_group_label"]
    assert groups[("mammo_mlo", "breast_50_60mm")]["status"] == "below_level"
    outside = groups[("mammo_cc", OUTSIDE_THICKNESS_BAND)]
    assert outside["n"] == 7 and outside["status"] == "no_level"
    assert groups[("mammo_cc", THICKNESS_NOT_RECORDED)]["n"] == 3


def test_60_mm_is_outside_and_50_inside(make_events) -> None:
    rows = _views(50, "cc", 50.0, 1.0) + _views(1, "cc", 60.0, 1.0)
    groups = _groups(review(make_events(rows), levels=LEVELS, params=MARCH))
    assert groups[("mammo_cc", "breast_50_60mm")]["n"] == 50
    assert groups[("mammo_cc", OUTSIDE_THICKNESS_BAND)]["n"] == 1


def test_the_band_is_a_setting(make_events) -> None:
    rows = _views(50, "cc", 45.0, 1.0)
    params = ReviewParameters.for_month(2025, 3, breast_thickness_band_mm=(40, 50))
    groups = _groups(review(make_events(rows), levels=LEVELS, params=params))
    assert groups[("mammo_cc", "breast_40_50mm")]["reference_level"] == 2.0
    again = ReviewParameters.from_json_dict(params.to_json_dict())
    assert again.breast_thickness_band_mm == (40.0, 50.0)


def test_a_band_that_is_no_band_is_refused() -> None:
    with pytest.raises(ReviewError, match="breast_thickness_band_mm"):
        ReviewParameters.for_month(2025, 3, breast_thickness_band_mm=(60, 50))


def test_names_and_labels() -> None:
    assert band_name((45.5, 60)) == "breast_45p5_60mm"
    assert band_label("breast_45p5_60mm").startswith("compressed breast 45.5-60 mm")


@pytest.mark.parametrize(
    ("view", "study", "protocol", "expected"),
    [
        ("CC", "SCREENING MAMMOGRAPHY", "RCC", ("mammo_cc", "screening")),
        ("MLO", "Screening", "Tomo LMLO", ("mammo_tomo_mlo", "screening")),
        ("CC", "Diagnostic mammogram", "LCC", ("mammo_cc", "diagnostic")),
        ("MLO", "Symptomatic clinic", "DBT R MLO", ("mammo_tomo_mlo", "diagnostic")),
        ("CC", None, "DBT LCC", ("mammo_tomo_cc", None)),
        ("CC", None, None, ("mammo_cc", None)),
    ],
)
def test_shipped_rules_keep_2d_and_tomosynthesis_screening_and_diagnostic_apart(
    view: str, study: str | None, protocol: str | None, expected: tuple[str, str | None]
) -> None:
    import pandas as pd

    from beamaudit.api.review import load_default_rules
    from beamaudit.api.review.examtypes import map_events_with_indication

    frame = pd.DataFrame(
        [{"modality": "MG", "room": None, "body_part": "BREAST", "view_position": view,
          "study_description": study, "series_description": None, "protocol_name": protocol}],
        dtype=object,
    )  # fmt: skip
    mapped = map_events_with_indication(frame, load_default_rules())
    assert (mapped["exam_type"][0], mapped["clinical_indication"][0]) == expected


# ---- a level may name the compressed-thickness band it is set for
def _band_levels(*rows: tuple[str, str, str, str]) -> list:
    """Levels of invented sets: ``(set name, patient_group, exam_type, value in mGy)``."""
    import io

    from beamaudit.api.review.levels import LEVEL_COLUMNS, LEVEL_OPTIONAL_COLUMNS, read_levels_csv

    columns = (*LEVEL_COLUMNS, *LEVEL_OPTIONAL_COLUMNS)
    lines = [",".join(columns)]
    for name, group, exam_type, value in rows:
        cells = {
            "set_name": name, "kind": "local", "version": "1", "effective_from": "2025-01-01",
            "set_source": "committee (invented)", "exam_type": exam_type, "quantity": "mgd_mgy",
            "value": value, "unit": "mGy", "source": "", "note": "", "patient_group": group,
            "clinical_indication": "",
        }  # fmt: skip
        lines.append(",".join(cells[c] for c in columns))
    return read_levels_csv(io.StringIO("\n".join(lines) + "\n"))


def test_a_band_takes_its_own_level_and_not_another_bands(make_events) -> None:
    levels = _band_levels(
        ("A", "", "mammo_cc", "3.0"),  # names no band: the review's band, as before
        ("A", "breast_50_60mm", "mammo_cc", "2.0"),  # the band's own: takes A's place
        ("B", "breast_45_55mm", "mammo_cc", "1.5"),  # another band: not for 50-60 mm
    )
    groups = review(make_events(_views(50, "cc", 55.0, 2.4)), levels=levels, params=MARCH)
    (row,) = [r for r in groups.groups_df.to_dict("records") if r["level_set"] is not None]
    assert (row["patient_group"], row["level_set"], row["reference_level"]) == (
        "breast_50_60mm",
        "A",
        2.0,
    )
    assert row["status"] == "above_level"


def test_a_review_in_another_band_takes_that_bands_level(make_events) -> None:
    levels = _band_levels(
        ("A", "breast_50_60mm", "mammo_cc", "2.0"),
        ("B", "breast_45_55mm", "mammo_cc", "1.5"),
    )
    params = ReviewParameters.for_month(2025, 3, breast_thickness_band_mm=(45, 55))
    result = review(make_events(_views(50, "cc", 50.0, 1.2)), levels=levels, params=params)
    rows = [r for r in result.groups_df.to_dict("records") if r["level_set"] is not None]
    assert [(r["patient_group"], r["level_set"], r["reference_level"]) for r in rows] == [
        ("breast_45_55mm", "B", 1.5)
    ]


def test_a_level_file_names_a_band_in_its_one_spelling_only() -> None:
    (level_set,) = _band_levels(("A", "breast_45p5_55mm", "mammo_mlo", "2.0"))
    assert level_set.entries[0].patient_group == "breast_45p5_55mm"
    for name in (OUTSIDE_THICKNESS_BAND, THICKNESS_NOT_RECORDED, "breast_60_50mm",
                 "breast_50.0_60mm", "breast_050_60mm", "breast_50_60"):  # fmt: skip
        with pytest.raises(ReviewError, match="nor a breast thickness band"):
            _band_levels(("A", name, "mammo_cc", "2.0"))
