"""The api stage's error root: :class:`ApiError`.

Every error the api stage raises on bad input or an impossible request derives from it (settings,
store, tokens and sessions, the review core and review runs, findings and their triage, the demo),
so the command line and the web application can catch one class and answer with one clear line.
"""

from __future__ import annotations

from beamaudit.errors import BeamauditError

__all__ = ["ApiError"]


class ApiError(BeamauditError):
    """Base of every error raised by :mod:`beamaudit.api` on bad input."""
