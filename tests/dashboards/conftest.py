"""Fixtures of the dashboards' tests: the invented Kestrel Bay data of ``dashboards_demo``."""

from __future__ import annotations

from typing import Any

import pytest
from dashboards_demo import (
    EXAM_TYPES,
    make_events,
    make_exam,
    make_flags,
    make_groups,
    make_history,
    make_ingest_errors,
    make_unmapped,
)


@pytest.fixture(scope="session")
def demo_events() -> list[dict[str, Any]]:
    return make_events()


@pytest.fixture(scope="session")
def demo_groups(demo_events: list[dict[str, Any]]) -> list[dict[str, Any]]:
    return make_groups(demo_events)


@pytest.fixture
def demo_flags() -> list[dict[str, Any]]:
    return make_flags()


@pytest.fixture
def demo_history() -> list[dict[str, Any]]:
    return make_history()


@pytest.fixture
def demo_exam() -> dict[str, Any]:
    return make_exam()


@pytest.fixture
def demo_exam_types() -> list[dict[str, Any]]:
    return [dict(e) for e in EXAM_TYPES]


@pytest.fixture
def demo_ingest_errors() -> list[dict[str, Any]]:
    return make_ingest_errors()


@pytest.fixture
def demo_unmapped() -> list[dict[str, Any]]:
    return make_unmapped()
