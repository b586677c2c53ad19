"""Cells that a spreadsheet reads as text, never as a formula.

A committee member opens an exported CSV or XLSX in a spreadsheet program, which treats a cell
starting with ``=``, ``+``, ``-`` or ``@`` (and, in some programs, a tab or carriage return) as a
formula: a Station Name ``=HYPERLINK("http://...","click")`` sent by any modality would become a
live link, or worse, in the committee's workbook (CSV injection, OWASP). Every text cell of every
export goes through :func:`safe_text`, which prefixes such a text with ``'`` (the usual rule: the
apostrophe tells the program "this is text"). Numbers stay numbers: an ``int`` or ``float`` is
never touched, and neither is a text that is a plain number (``-0.5``).

:func:`unquote_text` undoes the prefix when beamaudit reads back a CSV it wrote (a level set named
``=A`` exported and imported again keeps its name).
"""

from __future__ import annotations

import re
from typing import Any

__all__ = ["FORMULA_STARTS", "safe_cell", "safe_text", "unquote_text"]

#: first characters a spreadsheet may take as the start of a formula (OWASP, CSV injection)
FORMULA_STARTS = ("=", "+", "-", "@", "\t", "\r")

_PLAIN_NUMBER = re.compile(r"[+-]?(\d+\.?\d*|\.\d+)([eE][+-]?\d+)?")


def safe_text(text: str) -> str:
    """``text``, prefixed with ``'`` when a spreadsheet would read it as a formula."""
    if text.startswith(FORMULA_STARTS) and not _PLAIN_NUMBER.fullmatch(text):
        return "'" + text
    return text


def safe_cell(value: Any) -> Any:
    """A cell value for an export: texts through :func:`safe_text`, anything else as it is."""
    return safe_text(value) if isinstance(value, str) else value


def unquote_text(text: str) -> str:
    """Undo :func:`safe_text` on a cell read back (``'=A`` becomes ``=A``; ``'A`` stays)."""
    if text.startswith("'") and text[1:].startswith(FORMULA_STARTS):
        return text[1:]
    return text
