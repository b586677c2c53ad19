"""Screening or diagnostic decided for the whole study: a workup study is diagnostic as a whole.

Ingest reads ``mammography_intent`` per image or dose-report event, first clue wins
(``ingest/headers.py::_read_intent``): a CID 4015 workup-view modifier, then the procedure codes,
then a report's Screening Intent. A recall for assessment takes the plain CC and MLO views with
the spot compression and magnification views, and the whole examination is diagnostic (common
practice: a screening examination that needs a workup view becomes a diagnostic one; the
magnification and spot views of CID 4015 are the "additional views" of an assessment, from
memory). So, over all the mammography events of a study (stored and arriving, header and report
events alike), in the storing transaction (:class:`~beamaudit.api.intake.postprocess.Completion`,
used by scan, listener, pull and upload):

* when one event's own clue says **diagnostic** and no **explicit study-level screening code**
  says otherwise, every event of the study that is not diagnostic by its own clue becomes
  diagnostic; its provenance names the deciding clue and the object it came from
  (:data:`STUDY_CLUE`), and its own reading is kept under ``mammography_intent_image``;
* an explicit study-level screening code is a screening meaning of Procedure Code Sequence
  (0008,1032) (General Study module: the procedure performed), of Performed Procedure Code
  Sequence (0040,A372) (an SR document's), or a report's Has Intent = Screening Intent
  (TID 10001 row 3): each states what was done in the study. A *requested* procedure code saying
  screening is what was asked for, not what was done, and does not keep the views screening;
* otherwise (no diagnostic clue, or an explicit screening code) every event keeps its own
  reading: an event the study had made diagnostic gets its own back when such a code arrives
  later.

The deciding event is chosen independently of arrival order: a view-modifier clue before a
procedure-code one, then by SOP Instance UID and event index. Stored events whose reading
changes are updated and mapped again to their exam type and clinical indication; the exam type
itself does not depend on the intent, so their dose figures stand.
"""

from __future__ import annotations

from collections.abc import Iterable
from dataclasses import dataclass
from typing import Any

from sqlalchemy import select, update
from sqlalchemy.orm import Session

from beamaudit.api.store import models as m
from beamaudit.ingest.mapping import intent_clue_row

__all__ = [
    "IMAGE_READING_KEY",
    "STUDY_CLUE",
    "IntentReading",
    "settle_study_intents",
    "study_intents",
]

#: the provenance of an intent the study decided: the deciding clue and its object
STUDY_CLUE = "the study: {clue}, of object {sop_instance_uid}"
#: the provenance key of an event's own reading while the study's decision stands
IMAGE_READING_KEY = "mammography_intent_image"
_NONE = "none"
#: the rows whose screening meaning is an explicit study-level statement (keyword or concept)
_EXPLICIT_SCREENING = frozenset(
    {"ProcedureCodeSequence", "PerformedProcedureCodeSequence", "363703001"}
)
#: the rows of a workup-view modifier (an image's, a report event's): they decide first
_VIEW_MODIFIERS = frozenset({"ViewModifierCodeSequence", "111032"})


@dataclass(frozen=True, slots=True)
class IntentReading:
    """One mammography event as the study decision sees it."""

    key: Any  #: the caller's handle (a stored id, a batch row's index)
    sop_instance_uid: str
    event_index: int
    intent: str | None  #: as stored now
    provenance: dict[str, str]

    def own(self) -> tuple[str | None, str | None]:
        """``(intent, clue)`` of the event's own reading (before any study decision)."""
        kept = self.provenance.get(IMAGE_READING_KEY)
        if kept is None:
            return self.intent, self.provenance.get("mammography_intent")
        if kept == _NONE:
            return None, None
        intent, _, clue = kept.partition(", from ")
        return intent, clue


def _row_name(clue: str | None) -> str | None:
    row = intent_clue_row(clue) if clue else None
    if row is None:
        return None
    return row.keyword if row.keyword is not None else (row.code[0] if row.code else None)


def study_intents(
    readings: Iterable[IntentReading],
) -> dict[Any, tuple[str | None, dict[str, str]]]:
    """The ``(intent, provenance)`` of every event of one study whose reading changes, by key."""
    events = list(readings)
    own = {e.key: e.own() for e in events}
    diagnostic = [e for e in events if own[e.key][0] == "diagnostic"]
    explicit_screening = any(
        own[e.key][0] == "screening" and _row_name(own[e.key][1]) in _EXPLICIT_SCREENING
        for e in events
    )
    decider = None
    if diagnostic and not explicit_screening:
        decider = min(
            diagnostic,
            key=lambda e: (
                _row_name(own[e.key][1]) not in _VIEW_MODIFIERS,
                e.sop_instance_uid,
                e.event_index,
            ),
        )
    out: dict[Any, tuple[str | None, dict[str, str]]] = {}
    for e in events:
        intent, clue = own[e.key]
        provenance = {k: v for k, v in e.provenance.items() if k != IMAGE_READING_KEY}
        provenance.pop("mammography_intent", None)
        if decider is not None and intent != "diagnostic":
            provenance["mammography_intent"] = STUDY_CLUE.format(
                clue=own[decider.key][1], sop_instance_uid=decider.sop_instance_uid
            )
            provenance[IMAGE_READING_KEY] = f"{intent}, from {clue}" if intent else _NONE
            intent = "diagnostic"
        elif clue is not None:
            provenance["mammography_intent"] = clue
        if (intent, provenance) != (e.intent, e.provenance):
            out[e.key] = (intent, provenance)
    return out


def settle_study_intents(session: Session, rows: list[dict[str, Any]]) -> list[int]:
    """Decide the studies of the mammography ``rows`` about to be inserted (insert-ready dicts
    whose source objects are stored; changed in place) with their stored events (updated);
    returns the ids of the stored events whose reading changed, for the caller to map again."""
    ev, so = m.ExposureEventRow, m.SourceObjectRow
    mammography = [
        (k, row)
        for k, row in enumerate(rows)
        if row.get("modality") == "MG" and row.get("study_id") is not None
    ]
    if not mammography:
        return []
    objects = sorted({row["source_object_id"] for _, row in mammography})
    sops = dict(session.execute(select(so.id, so.sop_instance_uid).where(so.id.in_(objects))).all())
    batch: dict[int, list[IntentReading]] = {}
    for k, row in mammography:
        reading = IntentReading(
            ("row", k),
            sops[row["source_object_id"]],
            int(row["event_index"]),
            row.get("mammography_intent"),
            dict(row.get("provenance") or {}),
        )
        batch.setdefault(row["study_id"], []).append(reading)
    stored = session.execute(
        select(
            ev.id, ev.study_id, so.sop_instance_uid, ev.event_index,
            ev.mammography_intent, ev.provenance,
        )
        .join(so, so.id == ev.source_object_id)
        .where(ev.study_id.in_(sorted(batch)), ev.modality == "MG")
    ).all()  # fmt: skip
    for row_id, study_id, sop, index, intent, provenance in stored:
        assert study_id is not None  # one of the batch's studies (the query's filter)
        reading = IntentReading(("id", row_id), sop, index, intent, dict(provenance or {}))
        batch[study_id].append(reading)
    changed: list[int] = []
    for readings in batch.values():
        for (kind, key), (intent, provenance) in study_intents(readings).items():
            if kind == "row":
                rows[key]["mammography_intent"], rows[key]["provenance"] = intent, provenance
            else:
                session.execute(
                    update(ev)
                    .where(ev.id == key)
                    .values(mammography_intent=intent, provenance=provenance)
                )
                changed.append(key)
    return sorted(changed)
