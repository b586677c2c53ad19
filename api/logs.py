"""The service's logging: one line per record, library warnings without data values.

Every command and the web application call :func:`configure_logging` once. It

* writes records to standard error as ``time level logger: message``, each message on one line
  (:class:`OneLineFilter`: a newline in a query parameter or a header value is written ``\\n``,
  so no input can forge a log line);
* takes the values out of the DICOM libraries' own log records (pydicom logs what it warns);
* routes Python warnings (pydicom's ``Invalid value for VR DA: '1943-11-07'``, which quotes a
  birth date) to the logger ``beamaudit.warnings`` with every value removed
  (:func:`beamaudit.ingest.scrub.remove_values`), instead of printing them to stderr as they are.

The filter is also put on the handlers already present (uvicorn's, when ``serve`` runs).

``configure_logging(log_format="json")`` (``beamaudit --log-format json``) writes each record as
one JSON object per line instead (:class:`JsonFormatter`: ``time``, ``level``, ``logger``,
``message``, and ``exception`` with its values removed), after the same filter, so the same
guarantee holds: no patient identifier or birth date in any line.
"""

from __future__ import annotations

import json
import logging
import warnings
from datetime import UTC, datetime
from typing import Any, Literal, TextIO

from beamaudit.ingest.scrub import escape_controls, remove_values

__all__ = ["LOG_FORMATS", "JsonFormatter", "OneLineFilter", "configure_logging", "log_warning"]

FORMAT = "%(asctime)s %(levelname)s %(name)s: %(message)s"
#: the formats ``--log-format`` takes
LOG_FORMATS = ("text", "json")
LogFormat = Literal["text", "json"]
_WARNINGS = logging.getLogger("beamaudit.warnings")


#: libraries that read DICOM and may quote a value of it in a log record of their own
DATA_LIBRARIES = frozenset({"pydicom", "pynetdicom", "dicomweb_client", "highdicom"})


class OneLineFilter(logging.Filter):
    """Makes a record's message one line (control characters written as their escapes) and
    takes the values out of the records of the DICOM libraries (:data:`DATA_LIBRARIES`)."""

    def filter(self, record: logging.LogRecord) -> bool:
        if record.name.split(".", 1)[0] in DATA_LIBRARIES:
            # the libraries' own records: the whole message, values out, on one line
            record.msg, record.args = escape_controls(remove_values(record.getMessage())), None
            return True
        # ours, uvicorn's...: each text escaped where it is, so that a formatter reading the
        # arguments (uvicorn's access log does) still finds them
        if isinstance(record.msg, str):
            record.msg = escape_controls(record.msg)
        if isinstance(record.args, tuple):
            record.args = tuple(_escaped(a) for a in record.args)
        elif isinstance(record.args, dict):
            record.args = {k: _escaped(v) for k, v in record.args.items()}
        return True


def _escaped(value: Any) -> Any:
    """A log argument as text on one line; numbers and values without control characters kept
    as they are (a ``%d`` or ``%r`` still finds what it expects)."""
    if value is None or isinstance(value, int | float):
        return value
    text = value if isinstance(value, str) else str(value)
    safe = escape_controls(text)
    return safe if isinstance(value, str) or safe != text else value


def log_warning(
    message: Warning | str,
    category: type[Warning],
    filename: str,
    lineno: int,
    file: TextIO | None = None,
    line: str | None = None,
) -> None:
    """``warnings.showwarning`` for the service: a log record naming the category and module,
    its text with the values removed."""
    module = filename.rsplit("/", 1)[-1]
    _WARNINGS.warning("%s (%s): %s", category.__name__, module, remove_values(str(message)))


class _StderrHandler(logging.StreamHandler):
    """Writes to the ``sys.stderr`` of the moment (a test's capture, a redirected stream)."""

    _beamaudit = True

    @property
    def stream(self) -> Any:
        import sys

        return sys.stderr

    @stream.setter
    def stream(self, value: Any) -> None:
        pass


class JsonFormatter(logging.Formatter):
    """One JSON object per record, on one line: ``time`` (UTC, ISO 8601), ``level``, ``logger``,
    ``message`` (after :class:`OneLineFilter`) and, for a record with an exception, ``exception``
    (the traceback with every quoted value and date-like number removed: an error's text may
    quote a data value)."""

    def format(self, record: logging.LogRecord) -> str:
        body: dict[str, Any] = {
            "time": datetime.fromtimestamp(record.created, UTC).isoformat(timespec="milliseconds"),
            "level": record.levelname,
            "logger": record.name,
            "message": record.getMessage(),
        }
        if record.exc_info:
            body["exception"] = remove_values(self.formatException(record.exc_info))
        return json.dumps(body, ensure_ascii=False)


def _formatter(log_format: str) -> logging.Formatter:
    return JsonFormatter() if log_format == "json" else logging.Formatter(FORMAT)


def _filtered(handler: logging.Handler) -> None:
    if not any(isinstance(f, OneLineFilter) for f in handler.filters):
        handler.addFilter(OneLineFilter())


def configure_logging(level: int = logging.WARNING, *, log_format: LogFormat | None = None) -> None:
    """Set up the root logger (idempotent; ``level`` lowers it, never raises it) and route
    warnings through it (see the module docstring).

    ``log_format`` ``"json"`` or ``"text"`` chooses the lines' format; ``None`` keeps the one
    chosen before (text at first). The choice applies to uvicorn's handlers too.
    """
    root = logging.getLogger()
    ours = next((h for h in root.handlers if getattr(h, "_beamaudit", False)), None)
    if ours is None:
        ours = _StderrHandler()
        ours.setFormatter(logging.Formatter(FORMAT))
        root.addHandler(ours)
    if log_format is not None:
        ours.setFormatter(_formatter(log_format))
    chosen = "json" if isinstance(ours.formatter, JsonFormatter) else "text"
    if root.level > level:
        root.setLevel(level)
    for name in ("", "uvicorn", "uvicorn.error", "uvicorn.access"):
        for handler in logging.getLogger(name).handlers:
            _filtered(handler)
            if chosen == "json" and handler is not ours:
                handler.setFormatter(JsonFormatter())
    warnings.showwarning = log_warning
