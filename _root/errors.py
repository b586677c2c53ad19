"""The project's one error root: :class:`BeamauditError`.

Each stage raises, on bad input or an impossible request, errors that derive from its own root, and
every stage root derives from :class:`BeamauditError`:

======================  ==============================================================
stage                   root
======================  ==============================================================
``beamaudit.ingest``    :class:`beamaudit.ingest.errors.IngestError`
``beamaudit.model``     :class:`beamaudit.model.errors.ModelError`
``beamaudit.api``       :class:`beamaudit.api.errors.ApiError`
``beamaudit.dashboards``  :class:`beamaudit.dashboards.errors.DashboardError`
======================  ==============================================================

A caller that turns errors into one line for a user (the command line, a page) can catch
``BeamauditError`` once; a stage's own code catches its stage root. The message of every such error
is meant for a user: one line that names the offending value and what was expected.
"""

from __future__ import annotations

__all__ = ["BeamauditError"]


class BeamauditError(Exception):
    """Bad input to beamaudit, or a request it cannot carry out; the message is for a user."""
