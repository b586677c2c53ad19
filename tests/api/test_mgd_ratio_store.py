"""A mammography room's ratio of the unit's AGD to the reconstructed D_G, through the store.

Two invented mammography rooms on a hand-made store: one whose unit reads a steady 1.10 times
beamaudit's Dance-method D_G and then, from January 2026, 1.50 times (a changed dosimetry setting:
a finding), and one that reads a steady 0.85 times it (a vendor's method of its own: no finding;
the reference is the room's usual ratio, not 1). Monthly reviews are run and stored as a site
runs them; the flags, the change-point and the room page's figure are checked. Every value is
invented.
"""

from __future__ import annotations

import json
import re
from datetime import UTC, date, datetime, timedelta
from typing import Any

import numpy as np
import pytest
from fastapi.testclient import TestClient
from sqlalchemy import insert, select

from beamaudit.api.review import Period, ReviewParameters
from beamaudit.api.runs.reviews import execute_review, run_review
from beamaudit.api.settings import load
from beamaudit.api.store import models as m
from beamaudit.api.store.auth import create_token
from beamaudit.api.web.app import create_app

#: the months stored, and the month the drifting unit's ratio jumps
MONTHS = [date(2025, 7, 1) + timedelta(days=31 * i) for i in range(9)]  # Jul 2025 .. Mar 2026
JUMP = "2026-01"
VIEWS_PER_MONTH = 24  # above the default 20 views a month needs to be judged


def _month(d: date) -> str:
    return f"{d:%Y-%m}"


def _fill(sessions: Any) -> None:
    """The two rooms' CC views, month by month, with the unit's AGD and our D_G."""
    rng = np.random.default_rng(22)
    rows, objects = [], []
    k = 0
    for first in MONTHS:
        month = _month(first)
        for room_id, usual, after in ((3, 1.10, 1.50), (5, 0.85, 0.85)):
            ratio = after if month >= JUMP else usual
            for i in range(VIEWS_PER_MONTH):
                k += 1
                recon = float(rng.lognormal(np.log(1.6), 0.2))
                when = datetime(first.year, first.month, 2 + i, 9, tzinfo=UTC)
                objects.append(
                    {"id": k, "sop_instance_uid": f"2.25.71{k}", "sop_class_uid": "1.2.3",
                     "kind": "image_header", "received_via": "test"}
                )  # fmt: skip
                rows.append(
                    {"id": k, "event_key": f"k{k}", "source_object_id": k, "event_index": 0,
                     "source_kind": "image_header", "superseded": False, "room_id": room_id,
                     "modality": "MG", "exam_type": "mammo_cc", "event_datetime": when,
                     "body_part_thickness_mm": 55.0, "patient_age_years": 58.0,
                     # a few percent of scatter per view, as a unit's own rounding gives
                     "organ_dose_mgy": recon * ratio * float(rng.normal(1.0, 0.03)),
                     "recon_mgd_mgy": recon, "provenance": {}, "notes": []}
                )  # fmt: skip
    with sessions.begin() as s:
        s.execute(insert(m.Site), {"id": 1, "name": "Breast unit (invented)"})
        s.execute(
            insert(m.Room),
            [{"id": 3, "site_id": 1, "name": "MAMMO DRIFT"},
             {"id": 5, "site_id": 1, "name": "MAMMO STEADY"}],
        )  # fmt: skip
        s.execute(insert(m.SourceObjectRow), objects)
        s.execute(insert(m.ExposureEventRow), rows)


def _params(first: date) -> ReviewParameters:
    return ReviewParameters(period=Period.month(first.year, first.month))


def test_a_jump_in_a_rooms_agd_ratio_is_a_finding_and_a_steady_ratio_is_not(store) -> None:
    _fill(store.session_factory)
    with store.session_factory.begin() as session:
        result, _ = execute_review(session, _params(date(2026, 1, 1)))
    off = [f for f in result.flags if f.kind == "mgd_ratio_off_baseline"]
    assert [(f.room, f.date, f.quantity) for f in off] == [("MAMMO DRIFT", JUMP, "mgd_ratio")]
    (flag,) = off
    # the room's usual ratio: the median of its six months before (constructed at 1.10)
    assert flag.numbers["baseline_ratio"] == pytest.approx(1.10, rel=0.03)
    assert flag.numbers["baseline_months"] == 6
    assert flag.numbers["median_ratio"] == pytest.approx(1.50, rel=0.03)
    assert "usual 1.1" in flag.reason
    # the change-point on the monthly series (CUSUM on the six months before as its target)
    changes = [f for f in result.flags if f.kind == "changepoint" and f.quantity == "mgd_ratio"]
    assert [(f.room, f.date) for f in changes] == [("MAMMO DRIFT", JUMP)]
    # the monthly table carries both rooms' series beside the DAP ratio's
    ratios = result.monthly_df[result.monthly_df["quantity"] == "mgd_ratio"]
    assert sorted(ratios["room"]) == ["MAMMO DRIFT", "MAMMO STEADY"]
    steady = ratios.loc[ratios["room"] == "MAMMO STEADY", "median"].item()
    assert steady == pytest.approx(0.85, rel=0.03)


def test_the_month_after_a_lasting_jump_is_still_off_the_usual_ratio(store) -> None:
    _fill(store.session_factory)
    with store.session_factory.begin() as session:
        result, _ = execute_review(session, _params(date(2026, 3, 1)))
    off = [(f.room, f.date) for f in result.flags if f.kind == "mgd_ratio_off_baseline"]
    # six months before March: four at 1.10, two at 1.50, median 1.10
    assert off == [("MAMMO DRIFT", "2026-03")]


def test_a_room_with_too_little_history_is_not_judged(store) -> None:
    _fill(store.session_factory)
    with store.session_factory.begin() as session:
        result, _ = execute_review(session, _params(date(2025, 9, 1)))  # two months before
    assert not [f for f in result.flags if f.kind == "mgd_ratio_off_baseline"]


def test_the_room_page_draws_the_agd_ratio_with_the_rooms_usual_band(store) -> None:
    _fill(store.session_factory)
    for first in MONTHS:
        run_review(store.session_factory, _params(first))
    with store.session_factory.begin() as s:
        _, viewer = create_token(s, role="viewer", name="committee")
        kinds = set(s.scalars(select(m.Finding.kind)))
    assert "mgd_ratio_off_baseline" in kinds
    app = create_app(load(database_url=store.url), engine=store.engine)
    with TestClient(app) as client:
        headers = {"Authorization": f"Bearer {viewer}"}
        drift = client.get("/rooms/MAMMO%20DRIFT", headers=headers)
        steady = client.get("/rooms/MAMMO%20STEADY", headers=headers)
    assert drift.status_code == steady.status_code == 200
    assert "estimate" in drift.text.lower()
    figure = _figure(drift.text, "mgd-ratio")
    names = [t.get("name") for t in figure["data"]]
    assert names[:2] == ["Room's usual ratio ± tolerance (lower edge)",
                         "Room's usual ratio ± tolerance"]  # fmt: skip
    crossed = next(t for t in figure["data"] if t.get("name") == "Outside the band")
    assert [x[:7] for x in crossed["x"]] == ["2026-01", "2026-02", "2026-03"]
    assert "Outside the band" not in json.dumps(_figure(steady.text, "mgd-ratio")["data"])


def _figure(html: str, fig_id: str) -> dict[str, Any]:
    """The plotly figure ``fig_id`` of a page (its JSON is in a script element)."""
    found = re.search(
        rf'<script type="application/json" data-figure="{re.escape(fig_id)}"[^>]*>(.*?)</script>',
        html,
        re.DOTALL,
    )
    assert found, f"no figure {fig_id} on the page"
    return json.loads(found.group(1))
