"""The words a reader sees: one word per state, labels with their unit once, numbers rounded."""

from __future__ import annotations

import pytest

from beamaudit.dashboards import VOCABULARY
from beamaudit.dashboards.rounding import (
    format_estimate,
    format_level,
    format_number,
    format_quantity,
)
from beamaudit.dashboards.wording import (
    FLAG_KIND_WORDS,
    LEVEL_KIND_WORDS,
    STATUS_LOOK,
    quantity_label,
    quantity_short,
    user_text,
    words_for,
)


def test_every_state_has_one_word_or_phrase_and_no_two_share_one() -> None:
    for what, words in VOCABULARY.items():
        shown = list(words.values())
        assert len(set(shown)) == len(shown), what
        for text in shown:
            assert "," not in text, (what, text)  # "Seen, in hand" read as two states


def test_the_review_status_words_are_the_ones_the_pages_use() -> None:
    assert VOCABULARY["review status"] == {
        "above_level": "Above the level",
        "possibly_above": "Possibly above",
        "below_level": "Below the level",
        "insufficient_sample": "Too few patients",
        "no_level": "No level",
    }
    assert VOCABULARY["finding status"] == {
        "open": "Open",
        "acknowledged": "Acknowledged",
        "closed": "Closed",
    }
    assert {look.symbol for look in STATUS_LOOK.values()} == {"▲", "◆", "●", "○", "–"}


def test_international_guidance_is_a_kind_of_level_of_its_own() -> None:
    assert LEVEL_KIND_WORDS["international"] == "International guidance"
    assert "National" not in LEVEL_KIND_WORDS["international"]


def test_every_flag_kind_of_the_review_has_words() -> None:
    # the kinds of beamaudit.api.review.flags.FLAG_KINDS, written here as data (no import)
    review_kinds = {
        "group_above_level", "exam_above_investigation_level", "srdl_exceeded",
        "dap_ratio_out_of_tolerance", "mgd_ratio_off_baseline", "changepoint",
        "deviation_index_out_of_range", "no_dose_data", "unknown_exam_type", "unmapped_events",
        "low_dose_review",
    }  # fmt: skip
    assert review_kinds <= set(FLAG_KIND_WORDS)
    assert words_for(FLAG_KIND_WORDS, "some_new_kind") == "Some new kind"
    assert words_for({}, "not_dicom") == "Not DICOM"


@pytest.mark.parametrize(
    ("name", "label"),
    [
        ("recon_dap_gy_cm2", "Reconstructed DAP (Gy·cm²)"),
        ("dap_gy_cm2", "DAP (Gy·cm²)"),
        ("fsd_mm", "FSD (mm)"),
    ],
)
def test_short_labels_write_the_unit_once(name: str, label: str) -> None:
    assert quantity_short(name) == label


def test_long_labels_never_stack_two_parentheses() -> None:
    assert quantity_label("dap_gy_cm2") == "Air kerma-area product (DAP), Gy·cm²"
    assert quantity_label("fsd_mm", with_unit=False) == "Focus-to-skin distance (FSD)"
    assert quantity_label("kvp_kv") == "Tube voltage (kV)"
    assert quantity_label("aec_chamber_sid", with_unit=False) == "AEC chamber SID"


def test_developer_provenance_notes_are_put_in_a_readers_words() -> None:
    text = "the water table; cells written from memory, to be confirmed against the original"
    assert (
        user_text(text)
        == "the water table; table values not yet checked against the published original"
    )
    assert "memory" not in user_text("AAPM Report 293 fit (coefficients from memory, medium)")


@pytest.mark.parametrize(
    ("value", "unit", "text"),
    [
        (3.4437997188749323, "mm Al", "3.44"),  # HVL: two decimals
        (411.8, "mAs", "412"),
        (1150.0, "mm", "1150"),
        (0.0821734, "Gy·cm²", "0.0822"),
        (78.0, "kV", "78"),
        (1.0324233957472893, "1", "1.03"),  # a ratio: two decimals
        (833.4, "", "833"),
        (None, "mGy", "–"),
        (float("nan"), "mGy", "–"),
    ],
)
def test_numbers_are_rounded_to_what_they_mean(value: float, unit: str, text: str) -> None:
    assert format_number(value, unit) == text


def test_quantities_carry_their_unit_but_never_the_unit_1() -> None:
    assert format_quantity(411.8, "exposure_mas") == "412 mAs"
    assert format_quantity(2.907, "hvl1_mm_al") == "2.91 mm Al"
    assert format_quantity(1.387, "1") == "1.39"
    assert format_quantity(1.387, "backscatter_factor") == "1.39"
    assert format_level(0.1, "dap_gy_cm2") == "0.1 Gy·cm²"
    assert format_level(950.0, "dlp_mgy_cm") == "950 mGy·cm"


def test_an_estimate_is_rounded_at_its_uncertainty() -> None:
    # GUM (JCGM 100:2008) 7.2.6: the uncertainty to at most two significant digits, the value to
    # the same decimal place
    assert format_estimate(19.17817833415946, 1.179600412539442) == "19.2 ± 1.2"
    assert format_estimate(27.033985194108975, 0.9683917761254757) == "27.03 ± 0.97"
    assert format_estimate(2.907353971200927, 0.0, "mm Al") == "2.91"  # no uncertainty: none shown
