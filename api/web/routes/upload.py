"""Upload of DICOM files: one raw ``application/dicom`` body, or several files as multipart.

The body is counted while it streams in and refused with 413 as soon as it passes
``settings.api.max_upload_bytes`` (and before reading anything when ``Content-Length`` already
says so); files are spooled to disk past 1 MiB, never held whole in memory. Parsing, storing and
reconstruction run in the thread pool, one file after the other, so the event loop stays free.
Each file gets its own result: stored, duplicate, conflict (same SOP Instance UID, other content)
or error with the reason; errors and conflicts are also recorded as ingest errors.
"""

from __future__ import annotations

import tempfile
import threading
from collections.abc import Awaitable, Callable
from typing import IO, Any

from fastapi import HTTPException, Request, status
from fastapi.concurrency import run_in_threadpool
from starlette.datastructures import UploadFile
from starlette.types import Message

from beamaudit.api.web.deps import Physicist
from beamaudit.api.web.routes._common import AUTH_RESPONSES, invalid
from beamaudit.api.web.routing import Router
from beamaudit.api.web.schemas.base import ErrorBody
from beamaudit.api.web.schemas.ingest import UploadFileResult, UploadResult

__all__ = ["MAX_FILES", "router"]

router = Router(tags=["ingest"], responses=AUTH_RESPONSES)

#: files in one multipart upload
MAX_FILES = 1000
#: bytes of an upload kept in memory before it is spooled to a temporary file
SPOOL_BYTES = 1024 * 1024
DICOM_MEDIA_TYPE = "application/dicom"
_COMPLETION_LOCK = threading.Lock()

_REQUEST_BODY: dict[str, Any] = {
    "required": True,
    "content": {
        DICOM_MEDIA_TYPE: {"schema": {"type": "string", "format": "binary"}},
        "multipart/form-data": {
            "schema": {
                "type": "object",
                "properties": {
                    "files": {
                        "type": "array",
                        "items": {"type": "string", "format": "binary"},
                        "description": "DICOM files (Part 10), any number up to 1000",
                    }
                },
                "required": ["files"],
            }
        },
    },
}


class _TooLarge(Exception):
    """The body passed the upload limit while streaming in."""


def _counting(
    receive: Callable[[], Awaitable[Message]], limit: int
) -> Callable[[], Awaitable[Message]]:
    seen = 0

    async def wrapped() -> Message:
        nonlocal seen
        message = await receive()
        if message["type"] == "http.request":
            seen += len(message.get("body", b""))
            if seen > limit:
                raise _TooLarge
        return message

    return wrapped


def _too_large(limit: int) -> HTTPException:
    return HTTPException(
        status.HTTP_413_CONTENT_TOO_LARGE, detail=f"the upload is larger than {limit} bytes"
    )


def _display_name(name: str | None, fallback: str) -> str:
    """A file name fit to store and show (no NUL, no lone surrogates, at most 255 characters)."""
    if not name:
        return fallback
    text = name.encode("utf-8", "replace").decode("utf-8").replace("\x00", "")
    return text[:255] or fallback


def _pseudonymiser(request: Request) -> Any:
    """The app's pseudonymiser, made on first use from the key file (503 if it is unusable)."""
    from beamaudit.ingest.errors import IngestError
    from beamaudit.ingest.pseudonym import Pseudonymiser, load_or_create_key

    state = request.app.state
    if getattr(state, "pseudonymiser", None) is None:
        try:
            state.pseudonymiser = Pseudonymiser(load_or_create_key(state.settings.secret_key_path))
        except IngestError as exc:
            raise HTTPException(
                status.HTTP_503_SERVICE_UNAVAILABLE,
                detail=f"uploads are off: the pseudonymisation key is unusable ({exc.reason})",
            ) from None
    return state.pseudonymiser


def _ingest_one(request: Request, fh: IO[bytes], name: str, who: str) -> UploadFileResult:
    """Parse and store one file (runs in the thread pool), completed by the app's one
    :class:`~beamaudit.api.intake.postprocess.Completion` (it reads the rules and rooms afresh
    for each file, and keeps what it computed from them: a beam is computed once a process)."""
    from beamaudit.api.intake.pipeline import Pipeline
    from beamaudit.api.intake.postprocess import Completion
    from beamaudit.ingest.errors import IngestError
    from beamaudit.ingest.reader import read_open_file

    state = request.app.state
    with _COMPLETION_LOCK:  # one per app: the beams and exam types it computed are kept
        if getattr(state, "completion", None) is None:
            state.completion = Completion()
    pipeline = Pipeline(state.session_factory, completion=state.completion)
    source = f"upload:{name}"
    try:
        parsed = read_open_file(fh, pseudonymiser=request.app.state.pseudonymiser, source=source)
    except IngestError as exc:
        pipeline.record_error(exc, received_via="upload", source=source)
        return UploadFileResult(name=name, status="error", code=exc.code, reason=exc.reason)
    except OSError as exc:
        error = IngestError("unreadable", f"cannot read the upload: {exc.strerror or exc}", source)
        pipeline.record_error(error, received_via="upload", source=source)
        return UploadFileResult(name=name, status="error", code=error.code, reason=error.reason)
    outcome = pipeline.store(parsed, received_via="upload", received_from=f"{source} ({who})")
    if outcome.status == "conflict":
        reason = outcome.reason or "conflicts with a stored object"
        pipeline.record_error(
            IngestError("bad_value", reason, source),
            received_via="upload",
            source=source,
            sop_instance_uid=outcome.sop_instance_uid,
        )
    return UploadFileResult(
        name=name,
        status=outcome.status,
        sop_instance_uid=outcome.sop_instance_uid,
        events=outcome.events,
        event_ids=outcome.event_ids,
        reason=outcome.reason,
    )


async def _spool_body(request: Request) -> IO[bytes]:
    """The body in a spool: in memory up to :data:`SPOOL_BYTES` (written here: no disk), then
    in a temporary file (written in a worker thread)."""
    spool: IO[bytes] = tempfile.SpooledTemporaryFile(max_size=SPOOL_BYTES)  # noqa: SIM115
    size = 0
    try:
        async for chunk in request.stream():
            if not chunk:
                continue
            size += len(chunk)
            if size <= SPOOL_BYTES:  # the spool stays in memory (it rolls over past max_size)
                spool.write(chunk)
            else:
                await run_in_threadpool(spool.write, chunk)
    except BaseException:
        spool.close()
        raise
    spool.seek(0)
    return spool


@router.post(
    "/upload",
    operation_id="upload_dicom",
    response_model=UploadResult,
    openapi_extra={"requestBody": _REQUEST_BODY},
    responses={
        400: {"model": ErrorBody, "description": "Malformed multipart body."},
        413: {"model": ErrorBody, "description": "The upload is larger than the limit."},
        415: {"model": ErrorBody, "description": "Neither application/dicom nor multipart."},
        503: {"model": ErrorBody, "description": "The pseudonymisation key is unusable."},
    },
)
async def upload_dicom(request: Request, who: Physicist) -> UploadResult:
    """Store uploaded DICOM files (image headers and dose reports); one result per file.

    Send one file as the raw body (``Content-Type: application/dicom``), or several as
    ``multipart/form-data`` fields named ``files``. Pixel data is never read; patients are
    pseudonymised before anything is stored.
    """
    limit: int = request.app.state.settings.api.max_upload_bytes
    declared = request.headers.get("content-length", "")
    if declared.isdigit() and int(declared) > limit:
        raise _too_large(limit)
    media_type = request.headers.get("content-type", "").split(";")[0].strip().lower()
    if media_type not in (DICOM_MEDIA_TYPE, "multipart/form-data"):
        raise HTTPException(
            status.HTTP_415_UNSUPPORTED_MEDIA_TYPE,
            detail="send application/dicom (one file) or multipart/form-data (fields 'files')",
        )
    if getattr(request.app.state, "pseudonymiser", None) is None:  # the key is read once
        await run_in_threadpool(_pseudonymiser, request)
    limited = Request(request.scope, _counting(request.receive, limit))
    files: list[tuple[str, IO[bytes]]] = []
    form = None
    try:
        if media_type == DICOM_MEDIA_TYPE:
            files.append(("body", await _spool_body(limited)))
        else:
            form = await limited.form(max_files=MAX_FILES, max_fields=100)
            uploads = [v for k, v in form.multi_items() if isinstance(v, UploadFile)]
            if not uploads:
                invalid(("body", "files"), "no files: send them as multipart fields named 'files'")
            files = [
                (_display_name(u.filename, f"file {i + 1}"), u.file) for i, u in enumerate(uploads)
            ]
    except _TooLarge:
        for _, fh in files:
            fh.close()
        raise _too_large(limit) from None
    try:
        results = [
            await run_in_threadpool(_ingest_one, request, fh, name, who.actor) for name, fh in files
        ]
    finally:
        for _, fh in files:
            fh.close()
        if form is not None:
            await form.close()
    return UploadResult(
        files=results,
        stored=sum(r.status == "stored" for r in results),
        duplicates=sum(r.status == "duplicate" for r in results),
        conflicts=sum(r.status == "conflict" for r in results),
        errors=sum(r.status == "error" for r in results),
    )
