"""``beamaudit demo --no-serve``: every planted finding is found, nothing unplanted is flagged.

The scenario is invented (a fictional hospital); its manifest lists the planted
findings and the margins of everything else (see ``beamaudit.api.demo``).
"""

from __future__ import annotations

import json

import pytest

from beamaudit.api.cli import main


@pytest.mark.slow
def test_demo_finds_what_was_planted_and_nothing_else(tmp_path, capsys) -> None:
    code = main(
        ["demo", "--output", str(tmp_path / "demo"), "--no-serve", "--months", "4",
         "--end-month", "2026-10", "--seed", "0", "--json"]
    )  # fmt: skip
    report = json.loads(capsys.readouterr().out)
    missed = [p["plant"] for p in report["planted"] if not p["found"] and p["required"]]
    assert missed == []
    assert [f["reason"] for f in report["unplanted"]] == []
    assert code == 0
    assert report["cstore"].get("failure", 0) == 0
    # the nightly notification step: the digest of the new findings, in the outbox file
    [delivery] = report["notifications"]
    assert (delivery["channel"], delivery["status"]) == ("outbox", "sent")
    [line] = (tmp_path / "demo" / "outbox.jsonl").read_text().splitlines()
    digest = json.loads(line)
    assert digest["trigger"] == "nightly" and digest["new_findings"] == delivery["findings"] > 0
    assert digest["outbox_reason"] == "no recipient configured"
