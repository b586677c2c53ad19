"""Patient pseudonymisation and age, applied before anything is stored.

Patient identifiers become a keyed hash (HMAC-SHA256, RFC 2104 with FIPS 180-4
SHA-256) so that the same patient links across studies without the identifier
being kept; without the key the pseudonym cannot be recomputed from a guessed
identifier. The key lives in a file outside the database, created on first use
with owner-only permissions.

Patient names and birth dates are never kept: the age at the study is computed
(from Patient's Age (0010,1010), or from Patient's Birth Date and the study
date) and the birth date is discarded by the caller.
"""

from __future__ import annotations

import contextlib
import hashlib
import hmac
import os
import re
import secrets
import tempfile
from datetime import date
from pathlib import Path

from .errors import IngestError

__all__ = [
    "KEY_BYTES",
    "PSEUDONYM_HEX_CHARS",
    "Pseudonymiser",
    "age_from_age_string",
    "age_from_dates",
    "load_or_create_key",
]

KEY_BYTES = 32  # 256-bit key, the SHA-256 block-size guidance of RFC 2104 section 3
PSEUDONYM_HEX_CHARS = 32  # 128 bits of the HMAC: collisions negligible for any registry
_MIN_KEY_BYTES = 16

_AGE = re.compile(r"^(\d{1,3})([DWMY])$")
_DAYS_PER_YEAR = 365.2425  # mean Gregorian year, for ages given in days or weeks


class Pseudonymiser:
    """Keyed-hash pseudonyms for patient identifiers.

    Parameters
    ----------
    key
        Secret key, at least 16 bytes (use :func:`load_or_create_key`).

    Examples
    --------
    >>> p = Pseudonymiser(b"k" * 32)
    >>> p.pseudonymise("12345") == p.pseudonymise(" 12345 ")
    True
    >>> len(p.pseudonymise("12345"))
    32
    """

    __slots__ = ("_key",)

    def __init__(self, key: bytes) -> None:
        if not isinstance(key, bytes | bytearray) or len(key) < _MIN_KEY_BYTES:
            raise IngestError(
                "bad_key", f"the pseudonymisation key must be at least {_MIN_KEY_BYTES} bytes"
            )
        self._key = bytes(key)

    def __repr__(self) -> str:  # never show the key
        return "Pseudonymiser(<key>)"

    def pseudonymise(self, patient_id: str, issuer: str | None = None) -> str:
        """The pseudonym of ``patient_id`` within ``issuer`` (Issuer of Patient ID).

        Surrounding blanks (DICOM padding) are ignored; the same identifier from
        different issuers gives different pseudonyms.
        """
        pid = patient_id.strip()
        if not pid:
            raise IngestError("bad_value", "an empty Patient ID cannot be pseudonymised")
        message = f"{(issuer or '').strip()}\x1f{pid}".encode()
        return hmac.new(self._key, message, hashlib.sha256).hexdigest()[:PSEUDONYM_HEX_CHARS]


def load_or_create_key(path: Path) -> bytes:
    """The key in ``path``, creating a random one (owner read/write only) on first use.

    The key is written whole to a private temporary file beside ``path`` and then hard-linked
    into place, which fails if ``path`` exists: processes that start together on a fresh install
    (two listeners, a listener and a scan) each see no key file or the whole key, never a file
    still being written, and the first key linked is the one every process uses. On a file
    system without hard links the key file is created exclusively and written in place.

    Raises
    ------
    IngestError
        Code ``bad_key`` if the file exists but is too short, or cannot be read
        or written.
    """
    path = Path(path)
    if not path.exists():
        _create_key(path)
    try:
        key = path.read_bytes()
    except OSError as exc:
        raise IngestError("bad_key", f"cannot read key file: {exc.strerror}", str(path)) from exc
    if len(key) < _MIN_KEY_BYTES:
        raise IngestError(
            "bad_key",
            f"key file holds {len(key)} bytes, at least {_MIN_KEY_BYTES} needed",
            str(path),
        )
    return key


def _create_key(path: Path) -> None:
    """A new random key at ``path``, unless a key is there already (:func:`load_or_create_key`)."""
    key = secrets.token_bytes(KEY_BYTES)
    try:
        fd, temporary = tempfile.mkstemp(dir=path.parent, prefix=f".{path.name}.", suffix=".new")
    except OSError as exc:  # mkstemp creates the file for its owner only (0600)
        raise IngestError("bad_key", f"cannot create key file: {exc.strerror}", str(path)) from exc
    try:
        _write_whole(fd, key)
        if _linked(temporary, path):
            return
    except OSError as exc:
        raise IngestError("bad_key", f"cannot write key file: {exc.strerror}", str(path)) from exc
    finally:
        with contextlib.suppress(OSError):
            os.unlink(temporary)
    # no hard links on this file system: the key file is created exclusively and written
    try:
        fd = os.open(path, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o600)
    except FileExistsError:
        return
    except OSError as exc:
        raise IngestError("bad_key", f"cannot create key file: {exc.strerror}", str(path)) from exc
    _write_whole(fd, key)


def _linked(temporary: str, path: Path) -> bool:
    """Link ``temporary`` at ``path``; True when ``path`` holds a key now (this one, or another
    process's linked first), False when the file system refuses hard links."""
    try:
        os.link(temporary, path)
    except FileExistsError:
        return True
    except OSError:
        return False
    return True


def _write_whole(fd: int, key: bytes) -> None:
    """Write ``key`` to the open file ``fd`` and to the disk, then close it."""
    with os.fdopen(fd, "wb") as fh:
        fh.write(key)
        fh.flush()
        os.fsync(fh.fileno())


def age_from_age_string(value: str) -> float | None:
    """Age in years from an Age String (AS, PS3.5 Table 6.2-1: ``nnnD/W/M/Y``).

    ``"000Y"`` and other zero ages are taken as "not recorded" (returns ``None``):
    PS3.5 expresses ages under one year in days, weeks or months, and
    anonymisers write ``000Y`` in place of the age (pydicom's CT_small.dcm).

    Raises
    ------
    IngestError
        Code ``bad_value`` if ``value`` is not a valid Age String.

    Examples
    --------
    >>> age_from_age_string("047Y")
    47.0
    >>> age_from_age_string("006M")
    0.5
    """
    text = value.strip().upper()
    match = _AGE.match(text)
    if match is None:
        raise IngestError("bad_value", f"(0010,1010) PatientAge {value!r} is not nnnD/W/M/Y")
    number = int(match.group(1))
    if number == 0:
        return None
    unit = match.group(2)
    if unit == "Y":
        return float(number)
    if unit == "M":
        return number / 12.0
    if unit == "W":
        return number * 7.0 / _DAYS_PER_YEAR
    return number / _DAYS_PER_YEAR


def _birthday_in(year: int, birth: date) -> date:
    try:
        return birth.replace(year=year)
    except ValueError:  # born on 29 February: the birthday falls on 1 March in common years
        return date(year, 3, 1)


def age_from_dates(birth: date, at: date) -> float:
    """Age in years at ``at`` for someone born on ``birth``: completed years plus
    the elapsed fraction of the current year of life.

    Raises
    ------
    IngestError
        Code ``bad_value`` if ``at`` is before ``birth``.

    Examples
    --------
    >>> age_from_dates(date(1980, 6, 1), date(2020, 6, 1))
    40.0
    """
    if at < birth:
        raise IngestError("bad_value", f"birth date {birth} is after the study date {at}")
    years = at.year - birth.year
    last = _birthday_in(at.year, birth)
    if last > at:
        years -= 1
        last = _birthday_in(at.year - 1, birth)
    following = _birthday_in(last.year + 1, birth)
    return years + (at - last).days / (following - last).days
