"""Texts for logs with the values of the data taken out.

Libraries that read DICOM quote the values they stumble on: pydicom warns
``Invalid value for VR DA: '1943-11-07'``, which for a Patient's Birth Date is
patient data, and ingest's own warnings may quote a header value. Before such a
text reaches a log line, a warning or an error message, :func:`remove_values`
replaces every quoted value (``'...'``, ``"..."``, ``b'...'``) and every
date-like run of digits with ``<value>``; what is left says what kind of
problem it was. :func:`escape_controls` makes one log record one line: a
control character (a newline sent in a header or a query parameter) is written
as its escape (``\\n``), so that no input can forge a log line.
"""

from __future__ import annotations

import re

__all__ = ["REMOVED", "escape_controls", "remove_values"]

REMOVED = "<value>"

_QUOTED = re.compile(r"""b?'(?:[^'\\\n]|\\.){0,4096}'|b?"(?:[^"\\\n]|\\.){0,4096}\"""")
# DA (YYYYMMDD), DT and ISO dates: a birth date written any way a library may print it
_DATE_LIKE = re.compile(r"(?<![\d.])\d{4}[-/.]?\d{2}[-/.]?\d{2}(?:\d{2,})?(?![\d.])")
_CONTROL = re.compile(r"[\x00-\x1f\x7f\u0085\u2028\u2029]")


def remove_values(text: str) -> str:
    """``text`` with every quoted value and date-like number replaced by ``<value>``.

    Examples
    --------
    >>> remove_values("Invalid value for VR DA: '1943-11-07'")
    'Invalid value for VR DA: <value>'
    >>> remove_values("value 19431107 of PatientBirthDate")
    'value <value> of PatientBirthDate'
    >>> remove_values("1.2.840.10008.5.1.4.1.1.1.1 is kept")
    '1.2.840.10008.5.1.4.1.1.1.1 is kept'
    """
    return _DATE_LIKE.sub(REMOVED, _QUOTED.sub(REMOVED, text))


def escape_controls(text: str) -> str:
    r"""``text`` on one line: control characters as escapes (``\n``, ``\r``, ``\x1b``...).

    Examples
    --------
    >>> escape_controls("a\nINFO forged line")
    'a\\nINFO forged line'
    """
    return _CONTROL.sub(lambda m: m.group().encode("unicode_escape").decode("ascii"), text)
