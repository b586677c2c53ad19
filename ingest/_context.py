"""Collecting one event's fields with provenance and range checks (private).

Shared by :mod:`.headers` and :mod:`.rdsr`: :class:`FieldSink` applies
:data:`~beamaudit.ingest.mapping.FIELD_LIMITS` to every quantity it receives,
and :func:`read_context` reads what every event of one object shares
(identification, equipment, pseudonymised patient).
"""

from __future__ import annotations

from datetime import date, datetime
from typing import Any

from ._values import ValueReader, parse_da, parse_tm
from .errors import IngestError
from .mapping import FIELD_LIMITS, FieldMapping, header_rows_by_field
from .pseudonym import Pseudonymiser, age_from_age_string, age_from_dates
from .units import UnitError, convert

__all__ = ["FieldSink", "read_context"]

_SEXES = frozenset({"M", "F", "O"})


class FieldSink:
    """Values of one event (or accumulation) with their provenance and notes."""

    __slots__ = ("notes", "provenance", "values", "warnings")

    def __init__(self, warnings: list[str]) -> None:
        self.values: dict[str, Any] = {}
        self.provenance: dict[str, str] = {}
        self.notes: list[str] = []
        self.warnings = warnings

    def put(self, field: str, value: Any, label: str) -> None:
        """Store a value that needs no range check."""
        if value is None:
            return
        self.values[field] = value
        self.provenance[field] = label

    def quantity(
        self, field: str, value: float, label: str, *, from_unit: str, to_unit: str
    ) -> None:
        """Convert ``value`` and store it after the field's physical-range check.

        Raises
        ------
        IngestError
            ``out_of_range`` for technique, geometry and dose outside their
            range; ``bad_value`` for a unit that does not convert.
        """
        if from_unit and to_unit and from_unit != to_unit:
            try:
                value = convert(value, from_unit, to_unit)
            except UnitError as exc:
                raise IngestError("bad_value", f"{label}: {exc}") from None
        limit = FIELD_LIMITS.get(field)
        if limit is not None:
            if value == 0 and limit.zero_means_absent:
                self.notes.append(f"{label} recorded as 0: taken as not recorded")
                return
            low_bad = limit.low is not None and (
                value <= limit.low if limit.low_open else value < limit.low
            )
            high_bad = limit.high is not None and value > limit.high
            if low_bad or high_bad:
                unit = f" {to_unit}" if to_unit and to_unit != "1" else ""
                message = f"{label} {value:g}{unit} is outside {limit.describe()}{unit}"
                if limit.why:
                    message += f" ({limit.why})"
                if limit.action == "drop":
                    self.warnings.append(message + "; value not kept")
                    return
                raise IngestError("out_of_range", message)
        self.values[field] = value
        self.provenance[field] = label


def _study_datetime(
    reader: ValueReader, sink: FieldSink, rows: tuple[FieldMapping, ...]
) -> date | None:
    day_row, time_row = rows[0], rows[1]
    day_text = reader.string(day_row)
    if day_text is None:
        return None
    try:
        day = parse_da(day_text)
    except ValueError:
        sink.warnings.append(f"{day_row.label} {day_text!r} is not a date; study date not kept")
        return None
    moment = datetime(day.year, day.month, day.day)
    time_text = reader.string(time_row)
    label = day_row.label
    if time_text is not None:
        try:
            moment = datetime.combine(day, parse_tm(time_text))
            label = f"{day_row.label} + {time_row.label}"
        except ValueError:
            sink.warnings.append(f"{time_row.label} {time_text!r} is not a time; date kept alone")
    sink.put("study_datetime", moment, label)
    return day


_CONTEXT_TEXT = (
    "accession_number",
    "institution_name",
    "station_name",
    "manufacturer",
    "model_name",
    "device_serial_number",
    "study_description",
    "series_description",
)


def read_context(reader: ValueReader, sink: FieldSink, *, pseudonymiser: Pseudonymiser) -> None:
    """Read what all events of one object share into ``sink``.

    Identification (UIDs are read by the caller), equipment, descriptions and
    the patient: the Patient ID is pseudonymised here, the age is taken from
    Patient's Age or computed from the birth date, which is then dropped.
    Names are never read.
    """
    rows = header_rows_by_field()
    present = reader.present
    for field in _CONTEXT_TEXT:
        for row in rows[field]:
            if row.tag not in present:
                continue
            text = reader.string(row)
            if text is not None:
                sink.put(field, text, row.label)
                break
    study_day = _study_datetime(reader, sink, rows["study_datetime"])

    pid_row, issuer_row = rows["patient_pseudo_id"]
    patient_id = reader.string(pid_row)
    if patient_id is not None:
        issuer = reader.string(issuer_row)
        label = pid_row.label + (f" + {issuer_row.label}" if issuer else "")
        sink.put("patient_pseudo_id", pseudonymiser.pseudonymise(patient_id, issuer), label)

    age_row, birth_row = rows["patient_age_years"]
    age_text = reader.string(age_row)
    age: float | None = None
    label = age_row.label
    if age_text is not None:
        try:
            age = age_from_age_string(age_text)
        except IngestError as exc:
            sink.warnings.append(exc.reason + "; age not kept")
        else:
            if age is None:
                sink.notes.append(f"{age_row.label} {age_text!r}: taken as not recorded")
    if age is None and study_day is not None:
        birth_text = reader.string(birth_row)  # read only to compute the age, never kept
        if birth_text is not None:
            try:
                age = age_from_dates(parse_da(birth_text), study_day)
                label = f"{birth_row.label} and (0008,0020) StudyDate, birth date discarded"
            except (ValueError, IngestError):
                sink.warnings.append(f"{birth_row.label} is not a usable date; age not kept")
    if age is not None:
        sink.quantity("patient_age_years", age, label, from_unit="", to_unit="")

    (sex_row,) = rows["patient_sex"]
    sex = reader.string(sex_row)
    if sex is not None:
        if sex.upper() in _SEXES:
            sink.put("patient_sex", sex.upper(), sex_row.label)
        else:
            sink.warnings.append(f"{sex_row.label} {sex!r} is not M, F or O; not kept")
    for field in ("patient_weight_kg", "patient_height_m"):
        (row,) = rows[field]
        value = reader.number(row)
        if value is not None:
            sink.quantity(field, value, row.label, from_unit=row.unit, to_unit=row.our_unit)
