"""Which distribution to show, and one value per examination where a level applies to one."""

from __future__ import annotations

from typing import Any

import pandas as pd
import pytest
from dashboards_demo import ENEMA_DAP_GY_CM2, ENEMA_STUDY, EXAM_TYPES

from beamaudit.dashboards import EVENTS, ExamTypes, TableError, pick_distribution, study_values

Rows = list[dict[str, Any]]


def test_a_study_sums_its_exposures(demo_events: Rows) -> None:
    events = EVENTS.validate(demo_events)
    enema = events[events["exam_type"] == "fluoro_barium_enema"]
    studies = study_values(enema, "dap_gy_cm2", "sum")
    assert len(studies) == enema["study_uid"].nunique()
    big = studies.set_index("study_uid").loc[ENEMA_STUDY]
    assert big["dap_gy_cm2"] == pytest.approx(ENEMA_DAP_GY_CM2, rel=1e-3)
    assert big["n_events"] == (enema["study_uid"] == ENEMA_STUDY).sum()
    assert studies["dap_gy_cm2"].sum() == pytest.approx(enema["dap_gy_cm2"].sum())


def test_a_study_takes_its_largest_index_when_told(demo_events: Rows) -> None:
    events = EVENTS.validate(demo_events)
    enema = events[events["exam_type"] == "fluoro_barium_enema"]
    largest = study_values(enema, "dap_gy_cm2", "max").set_index("study_uid")
    assert (
        largest.loc[ENEMA_STUDY, "dap_gy_cm2"]
        == enema.loc[enema["study_uid"] == ENEMA_STUDY, "dap_gy_cm2"].max()
    )


def test_the_catalogue_says_which_types_are_judged_per_study() -> None:
    catalogue = ExamTypes(EXAM_TYPES)
    assert catalogue.study_rule("fluoro_barium_enema", "dap_gy_cm2") == "sum"
    assert catalogue.study_rule("ct_head", "ctdivol_mgy") == "max"
    assert catalogue.study_rule("chest_pa", "dap_gy_cm2") is None  # per exposure
    assert catalogue.name("chest_pa") == "Chest PA" and catalogue.name("xyz") == "xyz"
    rules = [dict(e) for e in EXAM_TYPES if e["exam_type"] == "ct_head"]
    rules[0]["aggregation"] = None
    assert ExamTypes(rules).study_rule("ct_head", "dlp_mgy_cm") == "sum"  # the default rule


def test_a_bad_aggregation_rule_is_refused() -> None:
    bad = [{"exam_type": "x", "name": "X", "level_applies_per": "examination",
            "aggregation": "dap_gy_cm2=median"}]  # fmt: skip
    with pytest.raises(TableError, match="'quantity=rule' pairs"):
        ExamTypes(bad)


def test_the_page_opens_on_the_most_urgent_group(demo_groups: Rows) -> None:
    assert pick_distribution(demo_groups) == ("pelvis_ap", "dap_gy_cm2")
    below = [dict(g, status="below_level") for g in demo_groups if g["status"] != "no_level"]
    exam, quantity = pick_distribution(below) or ("", "")
    top = max(below, key=lambda g: g["ratio_to_level"] or 0)
    assert (exam, quantity) == (top["exam_type"], top["quantity"])


def test_the_readers_choice_wins_where_it_exists(demo_groups: Rows) -> None:
    assert pick_distribution(demo_groups, exam_type="ct_head") == ("ct_head", "ctdivol_mgy")
    assert pick_distribution(
        demo_groups, exam_type="chest_pa", quantity="recon_dap_gy_cm2",
        available={"chest_pa": ["dap_gy_cm2", "recon_dap_gy_cm2"]},
    ) == ("chest_pa", "recon_dap_gy_cm2")  # fmt: skip
    # a quantity the examination does not have gives way to its first one
    assert pick_distribution(demo_groups, exam_type="ct_head", quantity="esak_mgy") == (
        "ct_head",
        "ctdivol_mgy",
    )


def test_nothing_to_pick() -> None:
    assert pick_distribution(None) is None
    assert pick_distribution(pd.DataFrame(), available={"a": ["dap_gy_cm2"]}) == (
        "a",
        "dap_gy_cm2",
    )
