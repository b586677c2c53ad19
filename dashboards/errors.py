"""The dashboards stage's exceptions.

Every error this stage raises on bad input derives from :class:`DashboardError`,
so the API can turn it into one clear message for the user.
"""

from beamaudit.errors import BeamauditError

__all__ = ["DashboardError", "TableError"]


class DashboardError(BeamauditError, ValueError):
    """Base of every error raised by :mod:`beamaudit.dashboards`."""


class TableError(DashboardError):
    """An input table or record does not meet its documented contract.

    The message names the table, the column (or key path) and the offending
    row, so the caller can find the bad value.
    """
