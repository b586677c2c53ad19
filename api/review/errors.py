"""The review core's exception tree.

Every error raised on bad input anywhere in :mod:`beamaudit.api.review` derives from
:class:`ReviewError`, so the CLI and the REST routes can catch one narrow class and show its message
(one clear paragraph, never a traceback).
"""

from __future__ import annotations

from collections.abc import Sequence

from beamaudit.api.errors import ApiError

__all__ = ["CsvFormatError", "ReviewError", "ReviewInputError"]


class ReviewError(ApiError, ValueError):
    """Bad input to, or an impossible request of, the review core."""


class ReviewInputError(ReviewError):
    """The events table (or another table handed to a review) breaks its documented contract."""


class CsvFormatError(ReviewError):
    """A CSV file (exam types, mapping rules, reference levels) that cannot be used as it is.

    Every problem found is collected, with the physical line number of the file it was found on
    (line 1 is the first line of the file, comment lines included), so that a user can fix a
    spreadsheet in one pass.

    Attributes
    ----------
    source : str
        Name of the file (or ``"<stream>"``).
    problems : tuple of (int or None, str)
        ``(line, message)`` pairs; ``line`` is ``None`` for a problem of the whole file.
    """

    #: At most this many problems are spelled out in the message; the rest are counted.
    MAX_LISTED = 20

    def __init__(self, source: str, problems: Sequence[tuple[int | None, str]]) -> None:
        self.source = source
        self.problems = tuple(problems)
        lines = []
        for line, message in self.problems[: self.MAX_LISTED]:
            where = f"{source}, line {line}" if line is not None else source
            lines.append(f"{where}: {message}")
        more = len(self.problems) - self.MAX_LISTED
        if more > 0:
            lines.append(f"... and {more} more problem(s) in {source}")
        super().__init__("\n".join(lines))
