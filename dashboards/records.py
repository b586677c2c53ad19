"""The drill-down record of one examination: contract and validation.

An examination's drill-down is nested, so it comes as a plain mapping rather
than a table. :func:`parse_exam` checks it and returns frozen dataclasses, or
raises :class:`~beamaudit.dashboards.errors.TableError` with the key path at
fault (``exam.exposures[1].dose['esak_mgy'].value``).

The contract (keys of the mapping; ``?`` marks an optional key)::

    study_uid            str     Study Instance UID
    room                 str     room name
    exam_type            str     examination type
    study_datetime?      str/datetime (UTC)
    patient_weight_kg?   float   kg
    standard_patient?    bool    a standard-size patient
    info?                mapping label -> text/number, more lines for the header
    flags?               FLAGS table (rows as mappings, or a DataFrame)
    exposures            list of mappings, one per irradiation event:
        event_id             str
        event_datetime?      str/datetime (UTC)
        technique?           mapping field name (unit suffix) -> value,
                             e.g. {"kvp_kv": 81, "exposure_mas": 12.5, "sid_mm": 1800}
        dose?                mapping figure name -> {
                                 value        float   the estimate
                                 unit?        str     defaults to the name's unit suffix
                                 uncertainty? float   standard uncertainty (k = 1),
                                                      same unit as value
                                 reported?    float   the modality's own figure, same unit
                                 ratio?       float   reported / value (1)
                                 source?      str     where the estimate comes from
                             }
        why?                 list of steps, in the order they were computed: {
                                 quantity     str     field name of the result
                                 value        float
                                 unit         str
                                 equation?    str     the equation used, plain text
                                 source?      str     paper, standard or DICOM tag
                                 inputs?      mapping name -> value, or list of str
                                 assumed?     bool, or list of str naming the defaults used
                             }
        spectrum?            {
                                 energies_kev            list of float, increasing
                                 fluence_per_mas_1m      list of float, same length, >= 0
                                 fluence_unit?           str, default FLUENCE_UNIT
                                 hvl1_mm_al?             float   mm Al
                                 output_ugy_per_mas_1m?  float   µGy/mAs at 1 m
                             }
"""

from __future__ import annotations

import itertools
import math
import numbers
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd

from beamaudit.dashboards.errors import TableError
from beamaudit.dashboards.tables import FLAGS
from beamaudit.dashboards.wording import quantity_unit

__all__ = [
    "FLUENCE_UNIT",
    "DoseFigure",
    "ExamDetail",
    "Exposure",
    "Spectrum",
    "WhyStep",
    "parse_exam",
    "parse_spectrum",
]

#: Default unit of ``fluence_per_mas_1m``: photons per mm² per mAs per keV, at 1 m from the focus.
FLUENCE_UNIT = "mm⁻²·mAs⁻¹·keV⁻¹ at 1 m"

Scalar = str | int | float | bool | None


@dataclass(frozen=True)
class DoseFigure:
    """One dose figure of an exposure: estimate, uncertainty, the modality's own."""

    name: str
    value: float | None
    unit: str
    uncertainty: float | None = None
    reported: float | None = None
    ratio: float | None = None
    source: str = ""


@dataclass(frozen=True)
class WhyStep:
    """One step of the why trail: what was computed, how, from what."""

    quantity: str
    value: float | None
    unit: str
    equation: str = ""
    source: str = ""
    inputs: tuple[tuple[str, str], ...] = ()
    assumed: bool = False
    assumptions: tuple[str, ...] = ()


@dataclass(frozen=True)
class Spectrum:
    """A reconstructed photon spectrum and its beam-quality figures."""

    energies_kev: tuple[float, ...]
    fluence_per_mas_1m: tuple[float, ...]
    fluence_unit: str = FLUENCE_UNIT
    hvl1_mm_al: float | None = None
    output_ugy_per_mas_1m: float | None = None


@dataclass(frozen=True)
class Exposure:
    """One irradiation event of the examination."""

    event_id: str
    event_datetime: pd.Timestamp | None
    technique: tuple[tuple[str, Scalar], ...]
    dose: tuple[DoseFigure, ...]
    why: tuple[WhyStep, ...]
    spectrum: Spectrum | None


@dataclass(frozen=True)
class ExamDetail:
    """A checked drill-down record (see the module docstring for the contract)."""

    study_uid: str
    room: str
    exam_type: str
    study_datetime: pd.Timestamp | None
    patient_weight_kg: float | None
    standard_patient: bool | None
    info: tuple[tuple[str, str], ...]
    exposures: tuple[Exposure, ...]
    flags: pd.DataFrame


def _fail(path: str, what: str) -> TableError:
    return TableError(f"{path}: {what}")


def _mapping(value: Any, path: str) -> Mapping[str, Any]:
    if not isinstance(value, Mapping):
        raise _fail(path, f"expected a mapping, got {type(value).__name__}")
    return value


def _list(value: Any, path: str) -> Sequence[Any]:
    if isinstance(value, (str, bytes)) or not isinstance(value, Sequence):
        raise _fail(path, f"expected a list, got {type(value).__name__}")
    return value


def _text(value: Any, path: str, *, optional: bool = False) -> str:
    if value is None and optional:
        return ""
    if not isinstance(value, str) or (not optional and not value.strip()):
        raise _fail(path, f"expected non-empty text, got {value!r}")
    return value


def _number(value: Any, path: str, *, optional: bool = True, minimum: float | None = None) -> Any:
    if value is None and optional:
        return None
    if isinstance(value, bool) or not isinstance(value, numbers.Real):
        raise _fail(path, f"expected a number, got {value!r}")
    number = float(value)
    if math.isnan(number) and optional:
        return None
    if not math.isfinite(number):
        raise _fail(path, f"expected a finite number, got {value!r}")
    if minimum is not None and number < minimum:
        raise _fail(path, f"expected a number >= {minimum:g}, got {value!r}")
    return number


def _time(value: Any, path: str) -> pd.Timestamp | None:
    if value is None:
        return None
    try:
        stamp = pd.Timestamp(value)
    except (ValueError, TypeError) as exc:
        raise _fail(path, f"expected a date and time, got {value!r}") from exc
    if stamp is pd.NaT:
        return None
    return stamp.tz_localize("UTC") if stamp.tzinfo is None else stamp.tz_convert("UTC")


def _scalar(value: Any, path: str) -> Scalar:
    if value is None or isinstance(value, (str, bool)):
        return value
    if isinstance(value, numbers.Integral):
        return int(value)
    if isinstance(value, numbers.Real):
        return float(value)
    raise _fail(path, f"expected text, a number or true/false, got {type(value).__name__}")


def _non_negative_numbers(values: Any, path: str) -> tuple[float, ...]:
    """Finite numbers >= 0, checked at once (a spectrum has thousands); the first bad value,
    if any, is named by the one-by-one check."""
    items = _list(list(values), path)
    if not any(isinstance(v, bool) or not isinstance(v, numbers.Real) for v in items):
        array = np.asarray(items, dtype=float)
        if array.size == 0 or (np.isfinite(array).all() and (array >= 0).all()):
            return tuple(array.tolist())
    return tuple(_number(v, f"{path}[{i}]", optional=False, minimum=0) for i, v in enumerate(items))


def parse_spectrum(raw: Mapping[str, Any], path: str = "spectrum") -> Spectrum:
    """Check a spectrum mapping and return a :class:`Spectrum`.

    Raises
    ------
    TableError
        Missing arrays, unequal lengths, energies not increasing, negative or
        non-finite fluence, or a negative HVL or output.
    """
    raw = _mapping(raw, path)
    for key in ("energies_kev", "fluence_per_mas_1m"):
        if key not in raw:
            raise _fail(path, f"missing '{key}'")
    energies = _non_negative_numbers(raw["energies_kev"], f"{path}.energies_kev")
    fluence = _non_negative_numbers(raw["fluence_per_mas_1m"], f"{path}.fluence_per_mas_1m")
    if len(energies) != len(fluence):
        raise _fail(
            path,
            f"energies_kev has {len(energies)} values but fluence_per_mas_1m has {len(fluence)}",
        )
    if len(energies) < 2:
        raise _fail(path, "a spectrum needs at least two energies")
    if any(b <= a for a, b in itertools.pairwise(energies)):
        raise _fail(f"{path}.energies_kev", "energies must increase strictly")
    return Spectrum(
        energies_kev=energies,
        fluence_per_mas_1m=fluence,
        fluence_unit=_text(raw.get("fluence_unit", FLUENCE_UNIT), f"{path}.fluence_unit"),
        hvl1_mm_al=_number(raw.get("hvl1_mm_al"), f"{path}.hvl1_mm_al", minimum=0),
        output_ugy_per_mas_1m=_number(
            raw.get("output_ugy_per_mas_1m"), f"{path}.output_ugy_per_mas_1m", minimum=0
        ),
    )


def _dose(name: str, raw: Any, path: str) -> DoseFigure:
    raw = _mapping(raw, path)
    unit = raw.get("unit") or quantity_unit(name)
    if not unit:
        raise _fail(path, f"no 'unit' given and '{name}' carries no unit suffix")
    return DoseFigure(
        name=name,
        value=_number(raw.get("value"), f"{path}.value"),
        unit=_text(unit, f"{path}.unit"),
        uncertainty=_number(raw.get("uncertainty"), f"{path}.uncertainty", minimum=0),
        reported=_number(raw.get("reported"), f"{path}.reported"),
        ratio=_number(raw.get("ratio"), f"{path}.ratio", minimum=0),
        source=_text(raw.get("source") or "", f"{path}.source", optional=True),
    )


def _why(raw: Any, path: str) -> WhyStep:
    raw = _mapping(raw, path)
    inputs_raw = raw.get("inputs") or {}
    if isinstance(inputs_raw, Mapping):
        inputs = tuple(
            (str(k), "" if v is None else str(_scalar(v, f"{path}.inputs['{k}']")))
            for k, v in inputs_raw.items()
        )
    else:
        inputs = tuple(
            (_text(v, f"{path}.inputs[{i}]"), "")
            for i, v in enumerate(_list(inputs_raw, f"{path}.inputs"))
        )
    assumed_raw = raw.get("assumed", False)
    assumptions: tuple[str, ...]
    if isinstance(assumed_raw, bool):
        assumed, assumptions = assumed_raw, ()
    elif isinstance(assumed_raw, str):
        assumed, assumptions = True, (assumed_raw,)
    else:
        items = _list(assumed_raw, f"{path}.assumed")
        assumptions = tuple(_text(v, f"{path}.assumed[{i}]") for i, v in enumerate(items))
        assumed = bool(assumptions)
    return WhyStep(
        quantity=_text(raw.get("quantity"), f"{path}.quantity"),
        value=_number(raw.get("value"), f"{path}.value"),
        unit=_text(raw.get("unit"), f"{path}.unit", optional=True),
        equation=_text(raw.get("equation"), f"{path}.equation", optional=True),
        source=_text(raw.get("source"), f"{path}.source", optional=True),
        inputs=inputs,
        assumed=assumed,
        assumptions=assumptions,
    )


def _exposure(raw: Any, path: str) -> Exposure:
    raw = _mapping(raw, path)
    technique = _mapping(raw.get("technique") or {}, f"{path}.technique")
    dose = _mapping(raw.get("dose") or {}, f"{path}.dose")
    spectrum = raw.get("spectrum")
    return Exposure(
        event_id=_text(raw.get("event_id"), f"{path}.event_id"),
        event_datetime=_time(raw.get("event_datetime"), f"{path}.event_datetime"),
        technique=tuple(
            (str(k), _scalar(v, f"{path}.technique['{k}']")) for k, v in technique.items()
        ),
        dose=tuple(_dose(str(k), v, f"{path}.dose['{k}']") for k, v in dose.items()),
        why=tuple(
            _why(step, f"{path}.why[{i}]")
            for i, step in enumerate(_list(raw.get("why") or [], f"{path}.why"))
        ),
        spectrum=None if spectrum is None else parse_spectrum(spectrum, f"{path}.spectrum"),
    )


def parse_exam(raw: Mapping[str, Any]) -> ExamDetail:
    """Check an examination's drill-down mapping and return an :class:`ExamDetail`.

    Parameters
    ----------
    raw : mapping
        The drill-down record; see the module docstring for its keys.

    Raises
    ------
    TableError
        A key is missing or a value is of the wrong kind; the message gives its path.
    """
    raw = _mapping(raw, "exam")
    info = _mapping(raw.get("info") or {}, "exam.info")
    weight = _number(raw.get("patient_weight_kg"), "exam.patient_weight_kg", minimum=0)
    standard = raw.get("standard_patient")
    if standard is not None and not isinstance(standard, bool):
        raise _fail("exam.standard_patient", f"expected true/false, got {standard!r}")
    flags = raw.get("flags")
    return ExamDetail(
        study_uid=_text(raw.get("study_uid"), "exam.study_uid"),
        room=_text(raw.get("room"), "exam.room"),
        exam_type=_text(raw.get("exam_type"), "exam.exam_type"),
        study_datetime=_time(raw.get("study_datetime"), "exam.study_datetime"),
        patient_weight_kg=weight,
        standard_patient=standard,
        info=tuple(
            (str(k), "" if v is None else str(_scalar(v, f"exam.info['{k}']")))
            for k, v in info.items()
        ),
        exposures=tuple(
            _exposure(e, f"exam.exposures[{i}]")
            for i, e in enumerate(_list(raw.get("exposures") or [], "exam.exposures"))
        ),
        flags=FLAGS.validate([] if flags is None else flags),
    )
