"""What happens to newly stored events: exam-type mapping, then reconstruction."""

from __future__ import annotations

from collections.abc import Sequence

from sqlalchemy.orm import Session, sessionmaker

from beamaudit.api.reconstruct import ReconSummary, reconstruct_events

__all__ = ["process_new_events"]

CHUNK = 2000


def process_new_events(sessions: sessionmaker[Session], event_ids: Sequence[int]) -> ReconSummary:
    """Map the events to exam types (stored rules) and reconstruct their dose figures."""
    from beamaudit.api.reviews import map_stored_events

    ids = list(event_ids)
    for start in range(0, len(ids), CHUNK):
        with sessions.begin() as session:
            map_stored_events(session, ids[start : start + CHUNK])
    return reconstruct_events(sessions, ids)
