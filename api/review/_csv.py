"""Reading and writing the small CSV tables of the review core, with line numbers in every error.

A table file is UTF-8 (a byte-order mark is accepted), comma-separated, with one header row. Lines
before the header that are blank or start with ``#`` are comments: they are kept (a file can say
where its values come from) and written back on export. After the header, blank lines are skipped.
Column names are matched exactly after stripping spaces; an unknown or missing column is an error,
so that a typo in a header never silently empties a column. Cell values are stripped.

Text cells are written spreadsheet-safe (:mod:`beamaudit.api.review.spreadsheet`: a text starting
with ``=``, ``+``, ``-``, ``@``, tab or CR gets a leading ``'``) and read back without that mark.
"""

from __future__ import annotations

import csv
import io
import os
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import IO, Any

from beamaudit.api.review.errors import CsvFormatError
from beamaudit.api.review.spreadsheet import safe_text, unquote_text

__all__ = ["CsvSource", "CsvTable", "read_table", "write_table"]

#: What the read functions accept: a path, or an open file (text or binary).
CsvSource = str | os.PathLike[str] | IO[str] | IO[bytes]


@dataclass(frozen=True, slots=True)
class CsvTable:
    """The rows of a CSV table file, each with the physical line it starts on."""

    source: str
    comments: tuple[str, ...]
    rows: tuple[tuple[int, dict[str, str]], ...]


def _read_text(source: CsvSource) -> tuple[str, str]:
    if isinstance(source, str | os.PathLike):
        path = Path(source)
        try:
            data = path.read_bytes()
        except OSError as exc:
            raise CsvFormatError(
                str(path), [(None, f"cannot read the file: {exc.strerror}")]
            ) from exc
        name = str(path)
    else:
        raw: Any = source.read()
        data = raw if isinstance(raw, bytes) else raw.encode("utf-8")
        name = str(getattr(source, "name", "<stream>"))
    try:
        text = data.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        raise CsvFormatError(
            name, [(None, f"not UTF-8 text (byte {exc.start}); save the file as CSV UTF-8")]
        ) from exc
    return name, text


def read_table(
    source: CsvSource, *, required: Sequence[str], optional: Sequence[str] = ()
) -> CsvTable:
    """Read a CSV table file and check its header.

    Parameters
    ----------
    source : path or open file
        The file to read.
    required : sequence of str
        Columns that must be present.
    optional : sequence of str
        Columns that may be present; a missing optional column reads as empty cells.

    Returns
    -------
    CsvTable
        Every data row as a dict holding every required and optional column.

    Raises
    ------
    CsvFormatError
        Unreadable file, no header, unknown, missing or repeated columns, rows with the wrong
        number of cells (each problem with its line number).
    """
    name, text = _read_text(source)
    if "\x00" in text:
        line = text.count("\n", 0, text.index("\x00")) + 1
        raise CsvFormatError(name, [(line, "holds a NUL byte: save the table as CSV text")])
    lines = text.splitlines(keepends=True)
    offset = 0
    comments: list[str] = []
    while offset < len(lines) and (
        not lines[offset].strip() or lines[offset].lstrip().startswith("#")
    ):
        if lines[offset].strip():
            comments.append(lines[offset].strip().lstrip("#").strip())
        offset += 1
    if offset == len(lines):
        raise CsvFormatError(name, [(None, "no header row (the file is empty or only comments)")])
    reader = csv.reader(lines[offset:], strict=True)
    try:
        header = [h.strip() for h in next(reader)]
    except csv.Error as exc:
        raise CsvFormatError(name, [(offset + 1, f"unreadable header: {exc}")]) from exc
    header_line = offset + 1
    problems: list[tuple[int | None, str]] = []
    known = list(required) + [c for c in optional if c not in required]
    seen: set[str] = set()
    for column in header:
        if column in seen:
            problems.append((header_line, f"column {column!r} appears twice"))
        seen.add(column)
        if column not in known:
            problems.append(
                (header_line, f"unknown column {column!r}; the columns are: {', '.join(known)}")
            )
    missing = [c for c in required if c not in seen]
    if missing:
        problems.append((header_line, f"missing column(s): {', '.join(missing)}"))
    if problems:
        raise CsvFormatError(name, _first(problems))

    rows: list[tuple[int, dict[str, str]]] = []
    previous = reader.line_num
    while True:
        start = offset + previous + 1
        try:
            cells = next(reader)
        except StopIteration:
            break
        except csv.Error as exc:
            problems.append((start, f"unreadable row: {exc}"))
            break
        previous = reader.line_num
        if not any(c.strip() for c in cells):
            continue
        if len(cells) != len(header):
            problems.append((start, f"{len(cells)} cells where the header has {len(header)}"))
            continue
        row = {c: "" for c in known}
        row.update({h: unquote_text(c.strip()) for h, c in zip(header, cells, strict=True)})
        rows.append((start, row))
    if problems:
        raise CsvFormatError(name, _first(problems))
    return CsvTable(source=name, comments=tuple(comments), rows=tuple(rows))


#: problems reported at most per file (a file of a million wrong columns says so in a page)
MAX_PROBLEMS = 50


def _first(problems: list[tuple[int | None, str]]) -> list[tuple[int | None, str]]:
    if len(problems) <= MAX_PROBLEMS:
        return problems
    more = len(problems) - MAX_PROBLEMS
    return [*problems[:MAX_PROBLEMS], (None, f"... and {more} more problems")]


def write_table(
    destination: str | os.PathLike[str] | IO[str] | None,
    *,
    columns: Sequence[str],
    rows: Iterable[Mapping[str, object]],
    comments: Sequence[str] = (),
) -> str | None:
    """Write a CSV table file (comments first, then the header, then the rows).

    Returns the text when ``destination`` is ``None``, otherwise writes it and returns ``None``.
    ``None`` cells are written empty; floats with ``repr`` so that a round trip is exact.
    """
    buffer = io.StringIO()
    for comment in comments:
        for part in comment.splitlines() or [""]:
            buffer.write(f"# {part}\n" if part else "#\n")
    writer = csv.writer(buffer, lineterminator="\n")
    writer.writerow(columns)
    for row in rows:
        writer.writerow([_cell(row.get(c)) for c in columns])
    text = buffer.getvalue()
    if destination is None:
        return text
    if isinstance(destination, str | os.PathLike):
        Path(destination).write_text(text, encoding="utf-8")
    else:
        destination.write(text)
    return None


def _cell(value: object) -> str:
    if value is None:
        return ""
    if isinstance(value, float):
        if value.is_integer() and abs(value) < 1e15:
            return str(int(value))
        return repr(value)
    if isinstance(value, int):
        return str(value)
    return safe_text(str(value))  # a text a spreadsheet would run as a formula gets a '
