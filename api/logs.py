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
"""

from __future__ import annotations

import logging
import warnings
from typing import Any, TextIO

from beamaudit.ingest.scrub import escape_controls, remove_values

__all__ = ["OneLineFilter", "configure_logging", "log_warning"]

FORMAT = "%(asctime)s %(levelname)s %(name)s: %(message)s"
_WARNINGS = logging.getLogger("beamaudit.warnings")


#: libraries that read DICOM and may quote a value of it in a log record of their own
DATA_LIBRARIES = frozenset({"pydicom", "pynetdicom", "dicomweb_client", "highdicom"})


class OneLineFilter(logging.Filter):
    """Makes a record's message one line (control characters written as their escapes) and
    takes the values out of the records of the DICOM libraries (:data:`DATA_LIBRARIES`)."""

    def filter(self, record: logging.LogRecord) -> bool:
        message = record.getMessage()
        safe = escape_controls(message)
        if record.name.split(".", 1)[0] in DATA_LIBRARIES:
            safe = remove_values(safe)
        if safe != message or record.args:
            record.msg, record.args = safe, None
        return True


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


def _filtered(handler: logging.Handler) -> None:
    if not any(isinstance(f, OneLineFilter) for f in handler.filters):
        handler.addFilter(OneLineFilter())


def configure_logging(level: int = logging.WARNING) -> None:
    """Set up the root logger (idempotent; ``level`` lowers it, never raises it) and route
    warnings through it (see the module docstring)."""
    root = logging.getLogger()
    if not any(getattr(h, "_beamaudit", False) for h in root.handlers):
        ours = _StderrHandler()
        ours.setFormatter(logging.Formatter(FORMAT))
        root.addHandler(ours)
    if root.level > level:
        root.setLevel(level)
    for name in ("", "uvicorn", "uvicorn.error", "uvicorn.access"):
        for handler in logging.getLogger(name).handlers:
            _filtered(handler)
    warnings.showwarning = log_warning
