"""The model stage's exception tree.

Every error raised on bad input anywhere in :mod:`beamaudit.model` derives from
:class:`ModelError`, so callers (the API and the CLI) can catch one narrow class and turn it into a
clear message for the user.
"""

from __future__ import annotations

from beamaudit.errors import BeamauditError

__all__ = ["ModelError"]


class ModelError(BeamauditError, ValueError):
    """Bad input to, or an impossible request of, a physics model of the model stage.

    Subclasses :class:`ValueError` because nearly every cause is an argument out of its physical or
    validated range (a tube voltage of 0 kV, an unknown filter material, a negative thickness).
    The message is meant for a user: one line, naming the offending value and the accepted range.
    """
