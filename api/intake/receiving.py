"""The C-STORE listener's handler: parse what arrives, store it, then answer.

The listener (``beamaudit.ingest.listener``) answers success only when this
handler returns :meth:`StoreOutcome.stored`, which it does only after the
object's events are committed. An unusable object is recorded as an ingest
error and answered "cannot understand" with the reason; a store that fails
(database unreachable) is answered "out of resources" so the sender keeps the
object and retries.

Requests the listener refuses before any parsing (a data set that cannot be decoded, of another
class than requested) are recorded as ingest errors too, through the handler's ``on_rejected``.
"""

from __future__ import annotations

import logging
from collections.abc import Callable

from sqlalchemy.exc import SQLAlchemyError

from beamaudit.api.intake.ct_sizing import CT_IMAGE_CLASSES, ArrivalSizer
from beamaudit.api.intake.pipeline import Pipeline
from beamaudit.ingest.errors import ErrorCode, IngestError
from beamaudit.ingest.listener import ReceivedObject, RejectedObject, StoreOutcome
from beamaudit.ingest.pseudonym import Pseudonymiser

__all__ = ["StoreHandler", "make_store_handler", "record_rejected"]

log = logging.getLogger(__name__)


class StoreHandler:
    """The listener's handler: ``handler(received)`` stores, ``handler.on_rejected(rejected)``
    records a request the listener refused before parsing."""

    def __init__(
        self,
        handle: Callable[[ReceivedObject], StoreOutcome],
        on_rejected: Callable[[RejectedObject], None],
    ) -> None:
        self._handle = handle
        self.on_rejected = on_rejected

    def __call__(self, received: ReceivedObject) -> StoreOutcome:
        return self._handle(received)


def make_store_handler(
    pipeline: Pipeline,
    pseudonymiser: Pseudonymiser,
    *,
    after_store: Callable[[list[int]], object] | None = None,
    received_via: str = "listen",
    sizer: ArrivalSizer | None = None,
) -> StoreHandler:
    """A thread-safe handler bound to ``pipeline`` (dependencies bound here, no globals).

    ``after_store`` gets the ids of newly stored events (reconstruction); its
    failure does not undo the stored object, which is already durable. ``sizer`` measures
    CT patients' size from the stored CT images (:class:`~beamaudit.api.intake.ct_sizing.
    ArrivalSizer`: a few images' pixels, decoded while the handler runs and dropped at once).
    """
    from beamaudit.ingest.reader import read_bytes

    def handle(received: ReceivedObject) -> StoreOutcome:
        source = f"c-store:{received.calling_ae_title}@{received.peer_address[0]}"
        try:
            # the received Part 10 bytes read as a file would be, so that a data set cut inside
            # its last element is refused here as in a folder scan (a decoded data set hides it)
            result = read_bytes(received.encoded, pseudonymiser=pseudonymiser, source=source)
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
        if sizer is not None and outcome.status == "stored":
            try:
                if result.source.sop_class_uid in CT_IMAGE_CLASSES:
                    sizer.received(
                        received.dataset,
                        encoded=received.received_path or received.encoded,
                        source=source,
                    )
                else:
                    sizer.report_stored(result)
            except Exception:  # the object is stored; its size can be measured again
                log.exception("measuring %s failed", received.sop_instance_uid)
        if after_store is not None and outcome.event_ids:
            try:
                after_store(outcome.event_ids)
            except Exception:  # reconstruction can be redone; the object is stored
                log.exception("reconstruction after storing %s failed", received.sop_instance_uid)
        return StoreOutcome.stored()

    def on_rejected(rejected: RejectedObject) -> None:
        record_rejected(pipeline, rejected, received_via)

    return StoreHandler(handle, on_rejected)


def record_rejected(pipeline: Pipeline, rejected: RejectedObject, received_via: str) -> None:
    """Record a request the listener refused before any handler saw it as an ingest error."""
    # undecodable, or of another class or instance than the request says; or no UID at all
    code: ErrorCode = "missing_attribute" if "no SOP Instance UID" in rejected.reason else (
        "bad_value")  # fmt: skip
    source = f"c-store:{rejected.calling_ae_title}@{rejected.peer_address[0]}"
    pipeline.record_error(
        IngestError(code, f"refused by the listener: {rejected.reason}", source),
        received_via=received_via,
        source=source,
        sop_instance_uid=rejected.sop_instance_uid or None,
    )
