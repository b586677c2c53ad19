"""Texts that reach a figure show as text: a room named ``<a href=...>`` is no link in a chart.

plotly.js reads a little HTML in every text of a figure (tick labels, hover text, titles,
annotations): ``<a href>`` becomes a link, ``<span style>`` restyles. A Station Name becomes a
room name, so any sender chooses it. Before, the committee report's charts carried such a room
as a live link; now every tag but plotly's plain formatting is written ``&lt;`` (plotly shows
``<``). Invented data (the dashboards' demo hospital).
"""

from __future__ import annotations

import copy
import json
import re
from datetime import UTC, datetime
from typing import Any

from dashboards_demo import FACILITY, METHOD, PERIOD

from beamaudit.dashboards import render_committee_report

HOSTILE = '<a href="http://attacker.invalid/">West DR 1</a><span style="font-size:99px">x</span>'


def _figure_strings(html: str) -> list[str]:
    found: list[str] = []

    def walk(value: Any) -> None:
        if isinstance(value, str):
            found.append(value)
        elif isinstance(value, dict):
            for v in value.values():
                walk(v)
        elif isinstance(value, list):
            for v in value:
                walk(v)

    pattern = r'<script type="application/json" data-figure="[^"]*"[^>]*>(\{.*?)</script>'
    blocks = re.findall(pattern, html, re.S)
    assert blocks, "the report has figures"
    for block in blocks:
        walk(json.loads(block))
    return found


def test_a_room_named_like_markup_is_text_in_the_report_charts(
    demo_groups: list[dict[str, Any]], demo_events: list[dict[str, Any]],
    demo_flags: list[dict[str, Any]],
) -> None:  # fmt: skip
    rename = {g["room"]: HOSTILE for g in demo_groups[:1]}
    groups = [dict(g, room=rename.get(g["room"], g["room"])) for g in copy.deepcopy(demo_groups)]
    events = [dict(e, room=rename.get(e["room"], e["room"])) for e in copy.deepcopy(demo_events)]
    flags = [dict(f, room=rename.get(f.get("room"), f.get("room"))) for f in demo_flags]
    html = render_committee_report(
        groups, period=PERIOD, method=METHOD, software_version="9.9.9", events=events,
        flags=flags, facility=FACILITY, generated_at=datetime(2026, 4, 2, 9, 30, tzinfo=UTC),
    )  # fmt: skip
    texts = _figure_strings(html)
    assert any("attacker.invalid" in t for t in texts), "the hostile room reached a figure"
    for text in texts:
        assert "<a " not in text and "<span" not in text, text
    assert any("&lt;a href" in t for t in texts)  # shown as text
    assert any("<br>" in t for t in texts)  # plotly's own formatting is kept
    assert '<a href="http://attacker.invalid/">' not in html  # nor in the page's HTML
