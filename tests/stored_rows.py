"""Stored rows made by hand for store tests: one exposure event with its source object (and its
study when asked), every required column filled, the rest as the test gives them (invented)."""

from __future__ import annotations

from typing import Any

from sqlalchemy import insert

from beamaudit.api.store import models as m


def add_event(session: Any, n: int, *, study_uid: str | None = None, **values: Any) -> None:
    """Insert event ``n`` (its source object id ``n``; with ``study_uid`` a study of id ``n``)."""
    kind = values.pop("source_kind", "rdsr")
    if study_uid is not None:
        session.execute(insert(m.Study), {"id": n, "study_instance_uid": study_uid})
        values.setdefault("study_id", n)
    session.execute(
        insert(m.SourceObjectRow),
        {"id": n, "sop_instance_uid": f"2.25.6{n}", "sop_class_uid": "1.2.3", "kind": kind,
         "received_via": "test"},
    )  # fmt: skip
    session.execute(
        insert(m.ExposureEventRow),
        {"id": n, "event_key": f"k{n}", "source_object_id": n, "event_index": 0,
         "source_kind": kind, "superseded": False, "provenance": {}, "notes": [], **values},
    )  # fmt: skip
