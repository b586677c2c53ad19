"""The demo generator's one exception."""

from __future__ import annotations

from beamaudit.api.errors import ApiError

__all__ = ["DemoError"]


class DemoError(ApiError, ValueError):
    """A demo that cannot be generated as asked (bad months, seed or output folder)."""
