"""Helpers for store tests (import as ``from store_support import ...``)."""

from __future__ import annotations

import os
from dataclasses import dataclass

import pytest

POSTGRES_ENV = "BEAMAUDIT_TEST_POSTGRES_URL"


def in_ci() -> bool:
    return os.environ.get("CI") == "true"


@dataclass
class StoreHandle:
    """What a store test needs: the URL, an engine and a session factory, migrated to head."""

    backend: str
    url: str
    engine: object
    session_factory: object
    connect_args: dict[str, object]


def _postgres_url() -> str | None:
    url = os.environ.get(POSTGRES_ENV)
    if not url:
        reason = f"{POSTGRES_ENV} is not set (PostgreSQL store tests need it)"
        if in_ci():
            pytest.fail(f"CI=true but {reason}")
        pytest.skip(reason)
    return url
