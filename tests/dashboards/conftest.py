"""Fixtures of the dashboards' tests: the invented Kestrel Bay data of ``dashboards_demo``."""

from __future__ import annotations

from typing import Any

import pytest
from dashboards_demo import make_events, make_exam, make_flags, make_groups, make_history


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
