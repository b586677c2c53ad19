"""The ingest stage's one exception: :class:`IngestError`.

Every input that ingest cannot turn into valid events (a file that is not
DICOM, a truncated one, a value outside its physical range, a dose report that
does not follow its template...) becomes one ``IngestError`` that names the
source (path or SOP Instance UID), a short machine ``code`` and a human
``reason``. A batch records it and goes on with the next object.
"""

from __future__ import annotations

from typing import Literal, get_args

from beamaudit.errors import BeamauditError

__all__ = ["ERROR_CODES", "ErrorCode", "IngestError"]

ErrorCode = Literal[
    "not_dicom",  # the bytes are not a DICOM object (no "DICM" marker, no parsable first element)
    "unreadable",  # the file could not be opened or read (missing, permissions, I/O error)
    "truncated",  # the object ends inside an element
    "missing_attribute",  # a Type 1 attribute we need is absent or empty
    "out_of_range",  # outside its physical range (kVp outside 20-150, negative mAs, SID 0...)
    "bad_value",  # a value that cannot be decoded for its VR, or a unit we cannot convert
    "unsupported_sop_class",  # a SOP class (or SR root concept) that carries no x-ray exposure
    "broken_template",  # a dose report whose content tree does not follow its PS3.16 template
    "bad_key",  # the pseudonymisation key file is unusable
]

ERROR_CODES: frozenset[str] = frozenset(get_args(ErrorCode))


class IngestError(BeamauditError):
    """An input ingest cannot use, with its source and the reason.

    Parameters
    ----------
    code
        Short machine code, one of :data:`ERROR_CODES`.
    reason
        What was wrong, in words a physicist can act on.
    source
        Where the input came from: a path, ``"c-store:<AE title>"``, a SOP
        Instance UID..., or ``None`` when not known yet.

    Examples
    --------
    >>> err = IngestError("out_of_range", "(0018,0060) KVP 180 kV is outside 20-150 kV", "a.dcm")
    >>> str(err)
    'a.dcm: (0018,0060) KVP 180 kV is outside 20-150 kV [out_of_range]'
    """

    def __init__(self, code: ErrorCode, reason: str, source: str | None = None) -> None:
        if code not in ERROR_CODES:
            raise ValueError(f"unknown ingest error code {code!r}")
        super().__init__(code, reason, source)
        self.code: ErrorCode = code
        self.reason = reason
        self.source = source

    def with_source(self, source: str) -> IngestError:
        """The same error attributed to ``source`` (kept if already set)."""
        if self.source is not None:
            return self
        return IngestError(self.code, self.reason, source)

    def __str__(self) -> str:
        where = f"{self.source}: " if self.source else ""
        return f"{where}{self.reason} [{self.code}]"

    def __reduce__(self) -> tuple[type[IngestError], tuple[str, str, str | None]]:
        return (type(self), (self.code, self.reason, self.source))
