"""``beamaudit demo --no-serve``: every planted finding is found, nothing unplanted is flagged.

The scenario is invented (a fictional hospital); its manifest lists the planted
findings and the margins of everything else (see ``beamaudit.api.demo``). The demo is the
session's one build (``demo_build`` in ``tests/conftest.py``: ``beamaudit demo --no-serve
--months 4 --end-month 2026-10 --seed 0 --json``), which the browser tests serve too.
"""

from __future__ import annotations

import json

import pytest


@pytest.mark.slow
def test_demo_finds_what_was_planted_and_nothing_else(demo_build) -> None:
    code, report = demo_build.code, demo_build.report
    missed = [p["plant"] for p in report["planted"] if not p["found"] and p["required"]]
    assert missed == []
    # the interventional room's two procedures at an NCRP 168 level (api/demo/interventional.py):
    # one found by its peak skin dose alone, one by its K_a,r with the skin dose spread out
    by_plant = {p["plant"]: p for p in report["planted"]}
    overlapping, spread = by_plant["skin_dose_overlapping"], by_plant["skin_dose_spread"]
    assert overlapping["found"] and spread["found"]
    assert any("peak skin dose" in reason for reason in overlapping["by"])
    assert not any("peak skin dose" in reason for reason in spread["by"])
    assert [f["reason"] for f in report["unplanted"]] == []
    assert code == 0
    assert report["cstore"].get("failure", 0) == 0
    # the nightly notification step: the digest of the new findings, in the outbox file
    [delivery] = report["notifications"]
    assert (delivery["channel"], delivery["status"]) == ("outbox", "sent")
    [line] = (demo_build.folder / "outbox.jsonl").read_text().splitlines()
    digest = json.loads(line)
    assert digest["trigger"] == "nightly" and digest["new_findings"] == delivery["findings"] > 0
    assert digest["outbox_reason"] == "no recipient configured"
