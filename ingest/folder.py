"""The folder source: walk paths, recognise DICOM by content, parse each file.

PACS exports often have no file extension, so a file is recognised by what it
holds: "DICM" at byte 128 (PS3.10 section 7.1), or, for files written without
the preamble, a first element of group 0002 or 0008. A DICOMDIR (Media Storage
SOP Class 1.2.840.10008.1.3.10) is an index of the other files, not an event:
it is counted and skipped, never an error. Every other file that cannot be
used becomes an :class:`~beamaudit.ingest.errors.IngestError` in its
:class:`ScanOutcome`, and the walk goes on; so does a folder that cannot be
listed (its outcome names the folder and the reason).

Each file is opened once: its first bytes classify it, then the same handle is
rewound and read by ``dcmread(..., stop_before_pixels=True)``.
"""

from __future__ import annotations

import os
import stat
from collections import Counter
from collections.abc import Callable, Iterable, Iterator
from dataclasses import dataclass, field
from pathlib import Path
from typing import Literal

from .errors import IngestError
from .events import ParseResult
from .pseudonym import Pseudonymiser
from .reader import HEAD_BYTES, classify_head, read_open_file

__all__ = [
    "Classification",
    "ScanOutcome",
    "ScanSummary",
    "classify",
    "iter_candidate_files",
    "scan",
    "scan_file",
]

Classification = Literal["dicom", "dicomdir", "not_dicom"]


def iter_candidate_files(
    paths: Iterable[str | os.PathLike[str]],
    on_unreadable: Callable[[IngestError], object] | None = None,
    *,
    skip: Iterable[str | os.PathLike[str]] = (),
    on_skipped: Callable[[Path], object] | None = None,
) -> Iterator[Path]:
    """Every regular file under ``paths``, depth first, names sorted within each folder.

    Files named in ``skip`` (the caller's own database and its journal files, say: a process
    that holds SQLite locks on a file must not open and close it again, since closing any
    descriptor of a file drops the process's POSIX locks on it) are never yielded, nor opened:
    they are recognised by device and inode, and told to ``on_skipped``.

    Symbolic links are followed, but each folder and each file is visited once
    (by device and inode), so link loops end and a linked file is not counted
    twice. A path that does not exist is yielded as given, for the caller to
    report. A folder that cannot be listed (no permission, an I/O error) is
    told to ``on_unreadable`` as an ``unreadable`` error naming the folder and
    the reason, since its files are not scanned; the walk goes on.
    """
    seen = _Seen(
        skip={key for key in map(_file_key, skip) if key is not None}, on_skipped=on_skipped
    )
    for raw in paths:
        path = Path(raw)
        try:
            info = path.stat()
        except OSError:
            yield path
            continue
        if stat.S_ISDIR(info.st_mode):
            yield from _walk(path, info, seen, on_unreadable)
        elif stat.S_ISREG(info.st_mode) and seen.new_file((info.st_dev, info.st_ino), path):
            yield path


def _file_key(path: str | os.PathLike[str]) -> tuple[int, int] | None:
    try:
        info = os.stat(path)
    except OSError:
        return None
    return (info.st_dev, info.st_ino)


class _Seen:
    """What a walk has visited, by device and inode, and the files it must not yield."""

    def __init__(
        self, *, skip: set[tuple[int, int]], on_skipped: Callable[[Path], object] | None
    ) -> None:
        self.dirs: set[tuple[int, int]] = set()
        self.files: set[tuple[int, int]] = set()
        self._skip = skip
        self._on_skipped = on_skipped

    def new_file(self, key: tuple[int, int], path: Path) -> bool:
        """True the first time a file to yield is met; a file to skip is told once, never
        yielded."""
        if key in self.files:
            return False
        self.files.add(key)
        if key in self._skip:
            if self._on_skipped is not None:
                self._on_skipped(path)
            return False
        return True


def _walk(
    root: Path,
    info: os.stat_result,
    seen: _Seen,
    on_unreadable: Callable[[IngestError], object] | None,
) -> Iterator[Path]:
    key = (info.st_dev, info.st_ino)
    if key in seen.dirs:
        return
    seen.dirs.add(key)
    try:
        with os.scandir(root) as entries:
            names = sorted(entries, key=lambda e: e.name)
    except OSError as exc:
        if on_unreadable is not None:  # its files cannot be read either: say so, go on
            on_unreadable(
                IngestError(
                    "unreadable",
                    f"folder cannot be read ({exc.strerror or type(exc).__name__}); "
                    "its files were not scanned",
                    str(root),
                )
            )
        return
    for entry in names:
        child = root / entry.name
        try:
            if not entry.is_symlink() and entry.is_file(follow_symlinks=False):
                # a plain file lives on its folder's device; inode() needs no system call
                if seen.new_file((info.st_dev, entry.inode()), child):
                    yield child
                continue
            entry_info = entry.stat(follow_symlinks=True)
        except OSError:
            continue  # dangling link, or the entry vanished
        if stat.S_ISDIR(entry_info.st_mode):
            yield from _walk(child, entry_info, seen, on_unreadable)
        elif stat.S_ISREG(entry_info.st_mode) and seen.new_file(
            (entry_info.st_dev, entry_info.st_ino), child
        ):
            yield child


def classify(path: str | os.PathLike[str]) -> Classification:
    """``"dicom"``, ``"dicomdir"`` or ``"not_dicom"`` by the file's content.

    Raises
    ------
    IngestError
        ``unreadable`` if the file cannot be read.
    """
    try:
        with open(path, "rb") as fh:
            head = fh.read(HEAD_BYTES)
    except OSError as exc:
        raise IngestError("unreadable", f"cannot read: {exc.strerror}", str(path)) from None
    return classify_head(head)  # type: ignore[return-value]


@dataclass(slots=True)
class ScanOutcome:
    """What one file gave: a result, a recorded error, or a skip (DICOMDIR)."""

    path: Path
    classification: Classification | None
    result: ParseResult | None = None
    error: IngestError | None = None

    @property
    def skipped(self) -> bool:
        """True for a DICOMDIR (an index, counted but not an error)."""
        return self.classification == "dicomdir"


@dataclass(slots=True)
class ScanSummary:
    """Counts of a scan, kept up to date by :func:`scan` if one is passed in."""

    files: int = 0
    parsed: int = 0
    events: int = 0
    dicomdirs: int = 0
    errors: int = 0
    error_codes: Counter[str] = field(default_factory=Counter)

    def add(self, outcome: ScanOutcome) -> None:
        """Count one outcome."""
        self.files += 1
        if outcome.skipped:
            self.dicomdirs += 1
        elif outcome.error is not None:
            self.errors += 1
            self.error_codes[outcome.error.code] += 1
        elif outcome.result is not None:
            self.parsed += 1
            self.events += len(outcome.result.events)


def scan(
    paths: Iterable[str | os.PathLike[str]],
    *,
    pseudonymiser: Pseudonymiser,
    summary: ScanSummary | None = None,
) -> Iterator[ScanOutcome]:
    """Parse every file under ``paths``, one :class:`ScanOutcome` per file.

    One bad file never stops the scan: its error is in its outcome. Files are
    visited in the deterministic order of :func:`iter_candidate_files`.
    """
    unreadable: list[IngestError] = []

    def folders() -> Iterator[ScanOutcome]:
        while unreadable:
            error = unreadable.pop(0)
            yield ScanOutcome(Path(error.source or "."), None, error=error)

    for path in iter_candidate_files(paths, unreadable.append):
        for outcome in (*folders(), scan_file(path, pseudonymiser)):
            if summary is not None:
                summary.add(outcome)
            yield outcome
    for outcome in folders():
        if summary is not None:
            summary.add(outcome)
        yield outcome


def scan_file(path: Path, pseudonymiser: Pseudonymiser) -> ScanOutcome:
    """One file's :class:`ScanOutcome` (a file the walk of :func:`scan` found, or any path)."""
    source = str(path)
    try:
        fh = open(path, "rb")  # noqa: SIM115 - closed below
    except FileNotFoundError:
        return ScanOutcome(path, None, error=IngestError("unreadable", "no such file", source))
    except OSError as exc:
        return ScanOutcome(
            path, None, error=IngestError("unreadable", f"cannot open: {exc.strerror}", source)
        )
    with fh:
        try:
            head = fh.read(HEAD_BYTES)
        except OSError as exc:
            error = IngestError("unreadable", f"read failed: {exc.strerror}", source)
            return ScanOutcome(path, None, error=error)
        kind: Classification = classify_head(head)  # type: ignore[assignment]
        if kind == "dicomdir":
            return ScanOutcome(path, kind)
        if kind == "not_dicom":
            error = IngestError(
                "not_dicom",
                "no 'DICM' marker at byte 128 and no DICOM element at the start",
                source,
            )
            return ScanOutcome(path, kind, error=error)
        try:
            result = read_open_file(
                fh, pseudonymiser=pseudonymiser, source=source, head=head, classification=kind
            )
        except IngestError as exc:
            return ScanOutcome(path, kind, error=exc.with_source(source))
        except OSError as exc:
            error = IngestError("unreadable", f"read failed: {exc.strerror}", source)
            return ScanOutcome(path, kind, error=error)
        return ScanOutcome(path, kind, result=result)
