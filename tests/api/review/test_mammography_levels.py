"""The shipped mammography level sets (``api/data/mammography_levels.csv``), the reviews that
use them, and the shipped rules that take screening or diagnostic as ingest read it.

The sets' values are recalled, not read in their sources (the file says so, and each source
cell gives its confidence in the reference notes' terms): IAEA Safety Series No. 115 (1996),
Schedule III, Table III-2 (average glandular dose per cranio-caudal projection, 3 mGy with grid,
for a 4.5 cm 50/50 breast; from memory, medium) and the European guidelines for quality
assurance in breast cancer screening and diagnosis, 4th ed. (2006), acceptable level 2.5 mGy for
45 mm PMMA (equivalent breast 53 mm; from memory, medium-high). The tests hold the file to that
account, not the values to a source this machine cannot read.
"""

from __future__ import annotations

import re
from importlib import resources

import pandas as pd
import pytest

from beamaudit.api.review import (
    ReviewParameters,
    load_default_rules,
    load_mammography_levels,
    review,
)
from beamaudit.api.review.errors import ReviewError
from beamaudit.api.review.examtypes import map_events_with_indication
from beamaudit.api.review.levels import SHIPPED_LEVEL_FILES, load_shipped_levels
from beamaudit.api.review.mammography import OUTSIDE_THICKNESS_BAND

MARCH = ReviewParameters.for_month(2025, 3)
CONFIDENCE = re.compile(r"From memory, confidence (high|medium-high|medium|low)$")


def test_every_shipped_mammography_value_names_its_source_and_confidence() -> None:
    sets = load_mammography_levels()
    assert {s.name for s in sets} == {
        "IAEA BSS 115 mammography guidance level",
        "European guidelines acceptable dose (PMMA 45 mm)",
    }
    for s in sets:
        assert s.kind == "international" and s.source
        for e in s.entries:
            assert e.exam_type in ("mammo_cc", "mammo_mlo") and e.quantity == "mgd_mgy"
            assert not e.patient_group and not e.clinical_indication
            assert CONFIDENCE.search(e.source), e.source
            assert "standard breast" in e.note or "equivalent breast" in e.note
    text = (
        resources.files("beamaudit.api")
        .joinpath("data", "mammography_levels.csv")
        .read_text(encoding="utf-8")
    )
    assert "NO value here was read in its" in text


def test_the_iaea_level_is_per_cranio_caudal_projection_only() -> None:
    # Schedule III Table III-2 gives one value per CC projection (from memory, medium)
    (bss,) = [s for s in load_mammography_levels() if s.name.startswith("IAEA")]
    assert [(e.exam_type, e.value, e.unit) for e in bss.entries] == [("mammo_cc", 3.0, "mGy")]
    assert "1 mGy without grid" in bss.entries[0].source


def test_shipped_level_files_by_name() -> None:
    assert set(SHIPPED_LEVEL_FILES) == {"national", "mammography"}
    assert load_shipped_levels("mammography") == load_mammography_levels()
    with pytest.raises(ReviewError, match="no shipped level file 'demo'"):
        load_shipped_levels("demo")


def _views(n: int, view: str, thickness: float, agd: float) -> list[dict[str, object]]:
    row = {"exam_type": f"mammo_{view}", "modality": "MG", "mgd_mgy": agd,
           "breast_thickness_mm": thickness}  # fmt: skip
    return [dict(row) for _ in range(n)]


def test_a_review_judges_the_band_against_each_shipped_level(make_events) -> None:
    rows = _views(50, "cc", 55.0, 2.7) + _views(50, "mlo", 53.0, 2.0) + _views(5, "cc", 75.0, 4.0)
    result = review(make_events(rows), levels=load_mammography_levels(), params=MARCH)
    groups = {
        (r["exam_type"], r["patient_group"], r["level_set"]): r
        for r in result.groups_df.to_dict("records")
    }
    band = "breast_50_60mm"
    european = "European guidelines acceptable dose (PMMA 45 mm)"
    iaea = "IAEA BSS 115 mammography guidance level"
    cc_eu, cc_iaea = groups[("mammo_cc", band, european)], groups[("mammo_cc", band, iaea)]
    assert (cc_eu["reference_level"], cc_eu["status"]) == (2.5, "above_level")
    assert (cc_iaea["reference_level"], cc_iaea["status"]) == (3.0, "below_level")
    assert "From memory, confidence medium" in cc_iaea["level_source"]
    mlo = groups[("mammo_mlo", band, european)]
    assert (mlo["reference_level"], mlo["status"]) == (2.5, "below_level")
    assert ("mammo_mlo", band, iaea) not in groups  # the IAEA level is per CC projection
    (outside,) = [r for k, r in groups.items() if k[:2] == ("mammo_cc", OUTSIDE_THICKNESS_BAND)]
    assert outside["status"] == "no_level"
    # the CC band above a level is flagged, as any group
    flagged = result.flags
    assert any(f.kind == "group_above_level" and f.exam_type == "mammo_cc" for f in flagged)


@pytest.mark.parametrize(
    ("acquisition", "intent", "study", "expected"),
    [
        # what ingest read decides before any description
        ("2d", "screening", "Diagnostic mammogram", ("mammo_cc", "screening")),
        ("2d", "diagnostic", "Screening mammography", ("mammo_cc", "diagnostic")),
        ("tomosynthesis", "diagnostic", None, ("mammo_tomo_cc", "diagnostic")),
        ("tomosynthesis", "screening", "Symptomatic clinic", ("mammo_tomo_cc", "screening")),
        # acquisition not recorded (a dose report's event without its type)
        (None, "screening", "DBT screening", ("mammo_tomo_cc", "screening")),
        (None, "diagnostic", "Mammography", ("mammo_cc", "diagnostic")),
        # nothing recorded: the descriptions, as before
        ("2d", None, "Screening mammography", ("mammo_cc", "screening")),
        ("2d", None, None, ("mammo_cc", None)),
    ],
)
def test_shipped_rules_take_the_intent_ingest_read_before_descriptions(
    acquisition: str | None, intent: str | None, study: str | None, expected: tuple
) -> None:
    frame = pd.DataFrame(
        [{"modality": "MG", "room": None, "body_part": "BREAST", "view_position": "CC",
          "study_description": study, "series_description": None, "protocol_name": None,
          "mammography_acquisition": acquisition, "mammography_intent": intent}],
        dtype=object,
    )  # fmt: skip
    mapped = map_events_with_indication(frame, load_default_rules())
    assert (mapped["exam_type"][0], mapped["clinical_indication"][0]) == expected
