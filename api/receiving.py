"""The C-STORE listener's handler: parse what arrives, store it, then answer.

The listener (``beamaudit.ingest.listener``) answers success only when this
handler returns :meth:`StoreOutcome.stored`, which it does only after the
object's events are committed. An unusable object is recorded as an ingest
error and answered "cannot understand" with the reason; a store that fails
(database unreachable) is answered "out of resources" so the sender keeps the
object and retries.
"""

from __future__ import annotations

import logging
from collections.abc import Callable

from sqlalchemy.exc import SQLAlchemyError

from beamaudit.api.pipeline import Pipeline
from beamaudit.ingest.errors import IngestError
from beamaudit.ingest.listener import ReceivedObject, StoreOutcome

__all__ = ["make_store_handler"]

log = logging.getLogger(__name__)


def make_store_handler(
    pipeline: Pipeline,
    pseudonymiser: object,
    *,
    after_store: Callable[[list[int]], object] | None = None,
    received_via: str = "listen",
) -> Callable[[ReceivedObject], StoreOutcome]:
    """A thread-safe handler bound to ``pipeline`` (dependencies bound here, no globals).

    ``after_store`` gets the ids of newly stored events (reconstruction); its
    failure does not undo the stored object, which is already durable.
    """
    from beamaudit.ingest.reader import read_dataset

    def handle(received: ReceivedObject) -> StoreOutcome:
        source = f"c-store:{received.calling_ae_title}@{received.peer_address[0]}"
        try:
            result = read_dataset(received.dataset, pseudonymiser=pseudonymiser, source=source)
        except IngestError as exc:
            try:
                pipeline.record_error(
                    exc,
                    received_via=received_via,
                    source=source,
                    sop_instance_uid=received.sop_instance_uid,
                )
            except SQLAlchemyError:
                return StoreOutcome.refused("the store is unavailable")
            return StoreOutcome.cannot_understand(f"{exc.code}: {exc.reason}")
        try:
            outcome = pipeline.store(result, received_via=received_via, received_from=source)
        except SQLAlchemyError as exc:
            log.error("storing %s failed: %s", received.sop_instance_uid, type(exc).__name__)
            return StoreOutcome.refused("the store is unavailable; retry later")
        if outcome.status == "conflict":
            pipeline.record_error(
                IngestError("bad_value", outcome.reason or "conflict", source),
                received_via=received_via,
                source=source,
                sop_instance_uid=received.sop_instance_uid,
            )
            return StoreOutcome.cannot_understand(
                outcome.reason or "conflicts with a stored object"
            )
        if after_store is not None and outcome.event_ids:
            try:
                after_store(outcome.event_ids)
            except Exception:  # reconstruction can be redone; the object is stored
                log.exception("reconstruction after storing %s failed", received.sop_instance_uid)
        return StoreOutcome.stored()

    return handle
