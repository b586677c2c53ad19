"""What happens to new events: exam-type mapping (and the rule's clinical indication), then
reconstruction and the effective-dose estimate (:mod:`beamaudit.api.intake.effective_doses`).

Two ways to the same columns:

* :class:`Completion` fills them in the rows of a batch *before* they are inserted, in the
  transaction that stores them (the folder scan, the C-STORE listener and the DICOMweb pull
  store this way): no second read of the events, no second write.
* :func:`process_new_events` maps and reconstructs events already stored (an upload, events
  stored before their room was configured, a re-run after the rules changed).

Both use the same mapping
(:func:`beamaudit.api.store.review_rows.exam_types_and_indications_of`) and the same model run
(:func:`beamaudit.api.intake.reconstruct.figures`), and give the same values.
"""

from __future__ import annotations

import logging
import threading
from collections.abc import Sequence
from types import SimpleNamespace
from typing import Any

from sqlalchemy import select
from sqlalchemy.orm import Session, sessionmaker

from beamaudit.api.intake.reconstruct import (
    FIGURES_CLEARED,
    ReconSummary,
    RoomBeams,
    figures,
    reconstruct_events,
)
from beamaudit.api.store import models as m

__all__ = ["Completion", "process_new_events"]

log = logging.getLogger(__name__)

CHUNK = 2000

#: the raw fields a mapping rule reads (besides the room's name)
_RULE_INPUTS = (
    "modality",
    "body_part",
    "view_position",
    "study_description",
    "series_description",
    "protocol_name",
    "mammography_acquisition",
    "mammography_intent",
)


def process_new_events(sessions: sessionmaker[Session], event_ids: Sequence[int]) -> ReconSummary:
    """Map the events to exam types (stored rules), reconstruct their dose figures, estimate
    their effective doses, and compute the skin-dose maps of their fluoroscopy studies with
    geometry."""
    from beamaudit.api.intake.effective_doses import fill_effective_doses
    from beamaudit.api.intake.skin import update_stored_skin_doses
    from beamaudit.api.store.review_rows import map_stored_events

    ids = list(event_ids)
    for start in range(0, len(ids), CHUNK):
        with sessions.begin() as session:
            map_stored_events(session, ids[start : start + CHUNK])
    summary = reconstruct_events(sessions, ids)
    fill_effective_doses(sessions, ids)
    with sessions.begin() as session:
        update_stored_skin_doses(session, ids)
    return summary


class Completion:
    """Exam type and reconstructed figures for event rows about to be inserted.

    One instance serves one storing process (a scan, a listener, a pull). Every batch reads the
    stored mapping rules and the configuration of the batch's rooms afresh, so an edit made
    while a listener runs applies from the next batch on; what is computed from them is kept
    (the exam type of each combination of raw values under the same rules, the beam of each
    distinct beam), so a long scan computes each once.
    """

    def __init__(self) -> None:
        self._rules_key: tuple[Any, ...] | None = None
        self._rules: Any = None
        #: (exam type, clinical indication) of each combination of raw values
        self._exam_types: dict[tuple[str | None, ...], tuple[str | None, str | None]] = {}
        self._beams = RoomBeams().cache
        self._lock = threading.Lock()  # a listener stores from several threads
        self.summary = ReconSummary()

    @staticmethod
    def load_modules() -> None:
        """Import now what completing rows imports on first use (the model, the mapping)."""
        import beamaudit.api.store.review_rows
        import beamaudit.model  # noqa: F401

    def complete(self, session: Session, rows: list[dict[str, Any]]) -> None:
        """Set ``exam_type`` and the ``recon_*`` columns of ``rows`` (insert-ready dicts).

        The rows must carry ``room_id`` and the event columns the model reads. A failure of
        the model for one event is that event's ``failed`` status with the reason in its
        notes (:func:`beamaudit.api.intake.reconstruct.figures`); the others are unaffected.
        """
        if not rows:
            return
        with self._lock:
            self._complete(session, rows)

    def _complete(self, session: Session, rows: list[dict[str, Any]]) -> None:
        from beamaudit.api.intake.study_intent import settle_study_intents

        # screening or diagnostic for the whole study (a workup study is diagnostic as a whole);
        # stored events of the study whose reading changed take their indication again
        changed = settle_study_intents(session, rows)
        if changed:
            from beamaudit.api.store.review_rows import map_stored_events

            map_stored_events(session, changed)
        room_ids = {r["room_id"] for r in rows if r["room_id"] is not None}
        self._map(session, rows, room_ids)
        rooms = RoomBeams()
        rooms.cache = self._beams
        rooms.load(session, room_ids)
        events = [SimpleNamespace(**row) for row in rows]
        for row, values in zip(rows, figures(events, rooms), strict=True):
            row.update(FIGURES_CLEARED)  # every row the same columns (one executemany)
            row.update(values)
            self.summary.add(values["recon_status"])
        from beamaudit.api.intake.effective_doses import effective_dose_values

        for row, values in zip(rows, effective_dose_values(rows), strict=True):
            row.update(values)

    def _map(self, session: Session, rows: list[dict[str, Any]], room_ids: set[int]) -> None:
        rules = self._current_rules(session)
        names = dict(
            session.execute(select(m.Room.id, m.Room.name).where(m.Room.id.in_(room_ids))).all()
        ) if room_ids else {}  # fmt: skip
        keys = [(*(row[f] for f in _RULE_INPUTS), names.get(row["room_id"])) for row in rows]
        unknown = sorted({k for k in keys if k not in self._exam_types}, key=repr)
        if unknown:
            import pandas as pd

            from beamaudit.api.store.review_rows import exam_types_and_indications_of

            frame = pd.DataFrame(unknown, columns=[*_RULE_INPUTS, "room"], dtype=object)
            mapped = exam_types_and_indications_of(frame, rules)
            for key, pair in zip(unknown, mapped, strict=True):
                self._exam_types[key] = pair
        for row, key in zip(rows, keys, strict=True):
            row["exam_type"], row["clinical_indication"] = self._exam_types[key]

    def _current_rules(self, session: Session) -> Any:
        """The stored rules (the shipped ones seeded into an empty store), read per batch."""
        # the rules as stored, patterns as their JSON text: compared, not decoded
        stored = tuple(
            tuple(r)
            for r in session.connection().exec_driver_sql(
                "SELECT priority, exam_type, CAST(patterns AS TEXT), note, clinical_indication "
                "FROM mapping_rules "
                "ORDER BY priority"
            )
        )
        if not stored:
            from beamaudit.api.store.review_rows import ensure_catalogue

            _, rules = ensure_catalogue(session)
            self._rules_key, self._rules = None, rules
            self._exam_types.clear()
            return rules
        if stored != self._rules_key:
            from beamaudit.api.store.review_rows import rules_from_store

            self._rules_key, self._rules = stored, rules_from_store(session)
            self._exam_types.clear()
        return self._rules
