"""The why trail: ordered steps, assumptions, JSON round trip."""

from __future__ import annotations

import json
import math

import numpy as np
import pytest

from beamaudit.model.errors import ModelError
from beamaudit.model.trail import TrailStep, WhyTrail


def _trail() -> WhyTrail:
    trail = WhyTrail()
    trail.add("sid_mm", 1000.0, "mm", equation="recorded", source="(0018,1110)")
    trail.add(
        "body_part_thickness_mm",
        230,
        "mm",
        equation="exam-type default",
        source="data/exam_defaults.csv",
        assumed=True,
        note="thickness not recorded; 230 mm assumed",
    )
    trail.add(
        "fsd_mm",
        np.float64(710.0),
        "mm",
        equation="FSD = SID - gap - t",
        source="geometry",
        inputs={"sid_mm": 1000.0, "gap_mm": np.float32(60.0), "edges": (1, 2, 3, 4)},
    )
    return trail


def test_steps_keep_their_order() -> None:
    trail = _trail()
    assert [s.quantity for s in trail] == ["sid_mm", "body_part_thickness_mm", "fsd_mm"]
    assert len(trail) == 3


def test_assumptions_are_the_notes_of_assumed_steps() -> None:
    assert _trail().assumptions == ["thickness not recorded; 230 mm assumed"]


def test_numpy_values_become_plain_json_types() -> None:
    step = _trail().steps[2]
    assert type(step.value) is float
    assert step.inputs == {"sid_mm": 1000.0, "gap_mm": 60.0, "edges": [1, 2, 3, 4]}


def test_json_round_trip() -> None:
    trail = _trail()
    text = trail.to_json()
    data = json.loads(text)
    assert data[1] == {
        "quantity": "body_part_thickness_mm",
        "value": 230,
        "unit": "mm",
        "equation": "exam-type default",
        "source": "data/exam_defaults.csv",
        "inputs": {},
        "assumed": True,
        "note": "thickness not recorded; 230 mm assumed",
    }
    assert WhyTrail.from_json(text) == trail


def test_copy_is_independent() -> None:
    trail = _trail()
    copy = trail.copy()
    copy.add("x", 1.0, "1", equation="e", source="s")
    assert len(trail) == 3 and len(copy) == 4


def test_nan_is_refused() -> None:
    with pytest.raises(ModelError, match="fsd_mm is nan"):
        WhyTrail().add("fsd_mm", math.nan, "mm", equation="e", source="s")
    with pytest.raises(ModelError, match="inf"):
        WhyTrail().add("q", 1.0, "1", equation="e", source="s", inputs={"a": math.inf})


def test_assumed_step_needs_a_note() -> None:
    with pytest.raises(ModelError, match="needs a note"):
        TrailStep(quantity="q", value=1.0, unit="1", equation="e", source="s", assumed=True)


def test_unserialisable_input_is_refused() -> None:
    with pytest.raises(ModelError, match="not JSON-ready"):
        WhyTrail().add("q", 1.0, "1", equation="e", source="s", inputs={"a": object()})


def test_from_json_rejects_bad_text() -> None:
    with pytest.raises(ModelError, match="not valid JSON"):
        WhyTrail.from_json("{")
    with pytest.raises(ModelError, match="array of steps"):
        WhyTrail.from_json("{}")
    with pytest.raises(ModelError, match="missing the key 'unit'"):
        WhyTrail.from_json('[{"quantity": "q", "value": 1}]')
