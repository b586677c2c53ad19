"""A stored review result (its JSON) as CSV and XLSX, for committees' own spreadsheets.

Every text cell is spreadsheet-safe (:func:`beamaudit.api.review.spreadsheet.safe_cell`): a room
or level set named ``=HYPERLINK(...)`` is written as the text ``'=HYPERLINK(...)``, never as a
formula; numbers stay numbers.
"""

from __future__ import annotations

import csv
import io
from pathlib import Path
from typing import Any

from beamaudit import CAUTION
from beamaudit.api.review.spreadsheet import safe_cell

__all__ = [
    "GROUP_EXPORT_COLUMNS",
    "WORD_COLUMNS",
    "groups_csv_text",
    "write_csv",
    "write_xlsx",
    "xlsx_bytes",
]

GROUP_EXPORT_COLUMNS = (
    "site", "room", "device", "exam_type", "quantity", "unit", "n", "n_standard", "basis",
    "median", "q1", "q3", "mean", "ci_low", "ci_high", "ci_coverage", "reference_level",
    "level_set", "level_kind", "level_version", "level_source", "ratio_to_level", "status",
    "status_words", "level_kind_words",
)  # fmt: skip
FLAG_EXPORT_COLUMNS = ("kind", "severity", "reason", "room", "exam_type", "event_id", "study_uid",
                       "kind_words", "severity_words")  # fmt: skip
#: the columns written in words (:data:`beamaudit.dashboards.VOCABULARY`, as the pages and the
#: command line say them) beside the codes a program reads: column -> (code column, vocabulary)
WORD_COLUMNS = {
    "status_words": ("status", "review status"),
    "level_kind_words": ("level_kind", "level kind"),
    "kind_words": ("kind", "finding kind"),
    "severity_words": ("severity", "severity"),
}


def _with_words(row: dict[str, Any]) -> dict[str, Any]:
    """``row`` with its states also in words."""
    from beamaudit.dashboards import VOCABULARY

    out = dict(row)
    for column, (code, what) in WORD_COLUMNS.items():
        value = row.get(code)
        if value is not None:
            out[column] = VOCABULARY[what].get(str(value), str(value))
    return out


def groups_csv_text(result: dict[str, Any]) -> str:
    """The groups of a result as CSV text (one row per group and level)."""
    out = io.StringIO()
    writer = csv.writer(out, lineterminator="\n")
    writer.writerow(GROUP_EXPORT_COLUMNS)
    for g in map(_with_words, result.get("groups", [])):
        writer.writerow(
            ["" if g.get(c) is None else safe_cell(g.get(c)) for c in GROUP_EXPORT_COLUMNS]
        )
    return out.getvalue()


def write_csv(result: dict[str, Any], path: Path) -> None:
    path.write_text(groups_csv_text(result), encoding="utf-8")


def xlsx_bytes(result: dict[str, Any]) -> bytes:
    """A workbook: groups, flags, and a sheet stating the period, method and caution."""
    from openpyxl import Workbook

    wb = Workbook()
    about = wb.active
    about.title = "about"
    period = result.get("period", {})
    _append(about, ["period", period.get("label")])
    _append(about, ["software version", result.get("software_version")])
    _append(about, ["events", result.get("n_events")])
    _append(about, ["method", "ICRP Publication 135: median of standard-size patients vs levels"])
    for s in result.get("level_sets", []):
        _append(about, ["level set", f"{s.get('name')} {s.get('version')} ({s.get('kind')})"])
    _append(about, ["caution", CAUTION])
    groups = wb.create_sheet("groups")
    _append(groups, list(GROUP_EXPORT_COLUMNS))
    for g in map(_with_words, result.get("groups", [])):
        _append(groups, [g.get(c) for c in GROUP_EXPORT_COLUMNS])
    flags = wb.create_sheet("flags")
    _append(flags, list(FLAG_EXPORT_COLUMNS))
    for f in map(_with_words, result.get("flags", [])):
        _append(
            flags,
            [
                f.get(c) if not isinstance(f.get(c), dict | list) else str(f.get(c))
                for c in FLAG_EXPORT_COLUMNS
            ],
        )
    buf = io.BytesIO()
    wb.save(buf)
    return buf.getvalue()


def _append(sheet: Any, values: list[Any]) -> None:
    """One row of a sheet; every text stored as a string cell (never a formula) and made safe."""
    sheet.append([safe_cell(v) for v in values])
    for cell in sheet[sheet.max_row]:
        if isinstance(cell.value, str):
            cell.data_type = "s"  # openpyxl would otherwise store a text starting "=" as formula


def write_xlsx(result: dict[str, Any], path: Path) -> None:
    path.write_bytes(xlsx_bytes(result))
