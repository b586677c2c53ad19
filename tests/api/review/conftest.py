"""Fixtures of the review-core tests: a factory of events tables that follow the contract of
:mod:`beamaudit.api.review.events` (every column present; NaN/None where a test says nothing)."""

from __future__ import annotations

from collections.abc import Callable, Mapping, Sequence
from typing import Any

import numpy as np
import pandas as pd
import pytest

from beamaudit.api.review.events import EVENT_COLUMNS, FLOAT_COLUMNS, OPTIONAL_COLUMNS

EventsFactory = Callable[..., pd.DataFrame]

_TEXT_DEFAULTS: Mapping[str, Any] = {
    "site": "S1",
    "room": "R1",
    "device": "D1",
    "modality": "DX",
    "exam_type": None,
    "study_description": None,
    "series_description": None,
    "protocol_name": None,
    "body_part": None,
    "view_position": None,
}


def build_events(rows: Sequence[Mapping[str, Any]], **defaults: Any) -> pd.DataFrame:
    """An events table from ``rows`` (dicts of the columns a test cares about).

    ``event_id`` defaults to the row number + 1, ``study_uid`` to one study per event,
    ``event_datetime`` to 2025-03-10 UTC; ``defaults`` apply to every row that lacks the column.
    The optional columns (``patient_age_years``, ``clinical_indication``) are kept when a row or
    the defaults name them.
    """
    records = []
    for i, row in enumerate(rows):
        record: dict[str, Any] = {c: np.nan for c in FLOAT_COLUMNS}
        record.update(_TEXT_DEFAULTS)
        record["event_id"] = i + 1
        record["study_uid"] = f"1.2.826.0.1.{i + 1}"
        record["event_datetime"] = pd.Timestamp("2025-03-10 10:00")
        record.update(defaults)
        record.update(row)
        records.append(record)
    optional = [c for c in OPTIONAL_COLUMNS if any(c in r for r in records)]
    frame = pd.DataFrame(records, columns=[*EVENT_COLUMNS, *optional])
    if "patient_age_years" in optional:
        frame["patient_age_years"] = frame["patient_age_years"].astype(np.float64)
    for c in FLOAT_COLUMNS:
        frame[c] = frame[c].astype(np.float64)
    frame["event_datetime"] = pd.to_datetime(frame["event_datetime"])
    return frame


@pytest.fixture
def make_events() -> EventsFactory:
    """The :func:`build_events` factory."""
    return build_events
