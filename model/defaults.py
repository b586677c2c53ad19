"""Documented defaults for geometry and dose: exam-type patient sizes and named constants.

Two self-describing package data files (each with a ``#`` header giving source, units,
confidence and validity) hold every default the dose reconstruction may fall back on:

- ``data/exam_defaults.csv``: per exam type, the patient thickness along the beam (with its
  spread for a standard-size adult), the SID, the field at the image receptor and the kind of
  receptor (table bucky, wall stand, detector directly behind the patient);
- ``data/dose_defaults.csv``: named constants such as the tabletop-to-detector gap of a table
  bucky or the relative uncertainty assumed for a recorded distance.

All are assumptions unless the row names a publication, and every use of one is marked
``assumed`` in the why trail. The files are read on first use and cached.
"""

from __future__ import annotations

import csv
import functools
import io
from dataclasses import dataclass
from importlib import resources

from beamaudit.model.errors import ModelError

__all__ = [
    "DefaultValue",
    "ExamDefault",
    "dose_default",
    "exam_default",
    "find_exam",
    "load_dose_defaults",
    "load_exam_defaults",
    "parse_described_csv",
]

_DATA_PACKAGE = "beamaudit.model.data"
#: Receptor kinds an exam default may name; ``gap_<kind>_mm`` in dose_defaults.csv for each.
RECEPTOR_KINDS = ("table_bucky", "wall_bucky", "direct", "unknown")
#: Exam used when no exam type is known.
GENERIC_EXAM = "generic_adult"


@dataclass(frozen=True, slots=True)
class ExamDefault:
    """One row of ``exam_defaults.csv`` (see that file's header for the meaning of each field)."""

    exam: str
    body_part: str
    views: tuple[str, ...]
    thickness_mm: float
    thickness_standard_uncertainty_mm: float
    sid_mm: float
    field_width_cm: float
    field_height_cm: float
    receptor: str
    thickness_source: str


@dataclass(frozen=True, slots=True)
class DefaultValue:
    """One named constant of ``dose_defaults.csv``."""

    key: str
    value: float
    unit: str
    standard_uncertainty: float | None
    source: str


def _read_table(name: str) -> tuple[dict[str, str], list[dict[str, str]]]:
    text = resources.files(_DATA_PACKAGE).joinpath(name).read_text(encoding="utf-8")
    return parse_described_csv(text)


def parse_described_csv(text: str) -> tuple[dict[str, str], list[dict[str, str]]]:
    """A self-describing data file: its ``# key: value`` header and its CSV rows as dicts."""
    header: dict[str, str] = {}
    body: list[str] = []
    for line in text.splitlines():
        if line.startswith("#"):
            key, _, value = line[1:].partition(":")
            header[key.strip()] = value.strip()
        elif line.strip():
            body.append(line)
    return header, list(csv.DictReader(io.StringIO("\n".join(body))))


@functools.cache
def load_exam_defaults() -> dict[str, ExamDefault]:
    """All exam defaults by exam name (read once, then cached; treat as read-only)."""
    _, rows = _read_table("exam_defaults.csv")
    out: dict[str, ExamDefault] = {}
    try:
        for row in rows:
            receptor = row["receptor"]
            if receptor not in RECEPTOR_KINDS:
                raise ModelError(f"exam_defaults.csv: unknown receptor {receptor!r}")
            out[row["exam"]] = ExamDefault(
                exam=row["exam"],
                body_part=row["body_part"].upper(),
                views=tuple(v for v in row["views"].upper().split("|") if v),
                thickness_mm=float(row["thickness_mm"]),
                thickness_standard_uncertainty_mm=float(row["thickness_standard_uncertainty_mm"]),
                sid_mm=float(row["sid_mm"]),
                field_width_cm=float(row["field_width_cm"]),
                field_height_cm=float(row["field_height_cm"]),
                receptor=receptor,
                thickness_source=row["thickness_source"],
            )
    except (KeyError, ValueError) as exc:
        raise ModelError(f"exam_defaults.csv does not parse: {exc}") from exc
    return out


@functools.cache
def load_dose_defaults() -> dict[str, DefaultValue]:
    """All named constants by key (read once, then cached; treat as read-only)."""
    _, rows = _read_table("dose_defaults.csv")
    try:
        return {
            row["key"]: DefaultValue(
                key=row["key"],
                value=float(row["value"]),
                unit=row["unit"],
                standard_uncertainty=(
                    float(row["standard_uncertainty"]) if row["standard_uncertainty"] else None
                ),
                source=row["source"],
            )
            for row in rows
        }
    except (KeyError, ValueError) as exc:
        raise ModelError(f"dose_defaults.csv does not parse: {exc}") from exc


def exam_default(exam: str) -> ExamDefault:
    """The defaults of one exam type.

    Raises
    ------
    ModelError
        For an exam name not in the table (the message lists the known ones).
    """
    table = load_exam_defaults()
    try:
        return table[exam]
    except KeyError:
        raise ModelError(
            f"unknown exam type {exam!r} (known: {', '.join(sorted(table))})"
        ) from None


def dose_default(key: str) -> DefaultValue:
    """One named constant of ``dose_defaults.csv``.

    Raises
    ------
    ModelError
        For a key not in the table.
    """
    table = load_dose_defaults()
    try:
        return table[key]
    except KeyError:
        raise ModelError(f"no dose default named {key!r}") from None


def find_exam(*, body_part: str | None, view_position: str | None) -> str | None:
    """The exam type for a DICOM Body Part Examined and View Position, or None if none fits.

    Matching is on the defined terms, case-insensitively; a body part with one row matches
    without a view.
    """
    if not body_part:
        return None
    part = body_part.strip().upper()
    view = (view_position or "").strip().upper()
    candidates = [row for row in load_exam_defaults().values() if row.body_part == part]
    if view:
        for row in candidates:
            if view in row.views:
                return row.exam
        return None
    return candidates[0].exam if len(candidates) == 1 else None
