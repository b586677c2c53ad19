"""The demo generator's one exception."""

from __future__ import annotations

__all__ = ["DemoError"]


class DemoError(ValueError):
    """A demo that cannot be generated as asked (bad months, seed or output folder)."""
