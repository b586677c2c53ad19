"""Sending C-STORE requests with pynetdicom without losing their responses.

pynetdicom's requestor runs a reactor thread beside the caller. Before a ``send_c_store`` (and
every other ``send_*``) waits for its response, it asks that reactor to pause: it clears the
reactor's checkpoint and waits until the reactor says it is paused. The reactor says so *before*
it waits at the checkpoint, so a reactor that had already passed the checkpoint still counts as
paused; if the response arrives in that window, the reactor takes it off the queue, finds it is
no request, logs "Received unexpected C-STORE service message" and drops it. The sender then
waits out its DIMSE timeout and aborts the association. On an idle machine the window is a few
microseconds; on a loaded one a thread can sit in it for milliseconds, and objects were lost.

``keep_responses`` closes the race on one association: a response the reactor takes while a
request of this association is waiting for it (its checkpoint cleared) goes back on the queue
for the waiting caller. Anything else the reactor is handed is handled as before.
"""

from __future__ import annotations

import socket
from typing import TYPE_CHECKING, Any

if TYPE_CHECKING:
    from pynetdicom import AE
    from pynetdicom.association import Association

__all__ = ["keep_responses", "open_association"]


def keep_responses(assoc: Association) -> Association:
    """Have ``assoc``'s reactor give back the responses a waiting ``send_*`` call is owed."""
    serve = assoc._serve_request  # pynetdicom's own hand-off from the reactor (private)
    queue = assoc.dimse.msg_queue

    def serve_or_give_back(msg: Any, context_id: int) -> None:
        if not msg.is_valid_request and not assoc._reactor_checkpoint.is_set():
            # a send_* call is waiting (it cleared the checkpoint): the answer is its own
            queue.put((context_id, msg))
            return
        serve(msg, context_id)

    setattr(assoc, "_serve_request", serve_or_give_back)  # noqa: B010
    return assoc


def open_association(
    ae: AE, host: str, port: int, *, ae_title: str, no_delay: bool = True
) -> Association:
    """``ae.associate(host, port, ae_title=...)`` with its responses kept (``keep_responses``).

    With ``no_delay`` the socket sends each write at once (``TCP_NODELAY``): a request goes out
    as several writes (command, then data set), and without it Nagle's algorithm holds the data
    set until the peer's delayed ACK, about 40 ms per object. Check ``is_established`` on the
    result as after ``ae.associate``.
    """
    assoc = ae.associate(host, port, ae_title=ae_title)
    if not assoc.is_established:
        return assoc
    keep_responses(assoc)
    sock = getattr(getattr(assoc.dul, "socket", None), "socket", None)
    if no_delay and sock is not None:
        sock.setsockopt(socket.IPPROTO_TCP, socket.TCP_NODELAY, 1)
    return assoc
