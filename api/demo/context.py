"""What every part of the demo simulation shares: the calendar, UIDs, invented patients, levels.

Reproducibility: all randomness comes from :class:`numpy.random.Generator` streams seeded from
the demo seed and a fixed stream name (:meth:`SimulationContext.rng`), and all UIDs from
:func:`pydicom.uid.generate_uid` with pydicom's root and entropy sources made of the seed and
the object's identity, so the same seed and months give the same files, byte for byte.
"""

from __future__ import annotations

import calendar
import hashlib
from collections.abc import Iterator
from dataclasses import dataclass, field
from datetime import date, datetime, timedelta
from functools import cached_property

import numpy as np
from pydicom.uid import PYDICOM_ROOT_UID, generate_uid

from beamaudit.api.demo.records import Patient
from beamaudit.api.review.levels import (
    ReferenceLevelSet,
    applicable_levels,
    load_demo_local_levels,
    load_national_levels,
)

__all__ = [
    "Calendar",
    "PatientFactory",
    "SimulationContext",
    "UidFactory",
    "at",
    "parse_month",
]

# Obviously invented names for obviously invented patients.
_SURNAMES = (
    "FENWHISTLE",
    "MARROWGATE",
    "THISTLECOMBE",
    "PIMBLETON",
    "QUORRELBY",
    "DUNNIMOOR",
    "GORSEWICK",
    "HOBBLEFORD",
    "INKERBY",
    "JASPERTON",
    "KETTLEWISP",
    "LARKSPURNE",
    "MOSSWALLOW",
    "NETTLEBRIGHT",
    "OAKENSHAW",
    "PUDDLEFOOT",
    "QUILLSBY",
    "RUSHWORTHY",
    "SPINDLEBECK",
    "TANSYMORE",
    "UMBERLEIGH",
    "VELLUMWOOD",
    "WHIMBRELL",
    "YARROWDALE",
    "ZEPHYRINE",
    "BRAMBLEWICK",
    "CINDERFORD",
    "DEWBERRYTON",
    "EMBERLEY",
    "FOXGLOVERS",
)
_GIVEN_F = (
    "MIRABEL",
    "ODALINE",
    "PERRIWINK",
    "ROSALEEN",
    "SAFFRONA",
    "TAMSINE",
    "VERBENA",
    "WILLOWEN",
    "ARDELLA",
    "BRIONY",
    "CALLISTE",
    "DAPHNELLE",
    "ELSPETHA",
    "FENELLA",
    "GWENDELYN",
)
_GIVEN_M = (
    "ALDOUSIN",
    "BARNABUS",
    "CORMACK",
    "DORIANUS",
    "EVANDER",
    "FALCONER",
    "GILLIBRAND",
    "HORATIUS",
    "IGNATZ",
    "JOSKIN",
    "LEOPOLDO",
    "MERRIWEN",
    "NORBERTO",
    "OSWALDEN",
    "PEREGRIN",
)


def parse_month(text: str) -> tuple[int, int]:
    """``"2026-09"`` -> ``(2026, 9)``.

    Raises
    ------
    ValueError
        Not a ``YYYY-MM`` month.
    """
    try:
        year_text, month_text = text.split("-")
        year, month = int(year_text), int(month_text)
    except ValueError:
        raise ValueError(f"month {text!r} is not of the form YYYY-MM") from None
    if len(year_text) != 4 or not 1 <= month <= 12:
        raise ValueError(f"month {text!r} is not of the form YYYY-MM")
    return year, month


@dataclass(frozen=True)
class Calendar:
    """The generated months, oldest first."""

    months: tuple[tuple[int, int], ...]

    @classmethod
    def ending(cls, end_month: str, n_months: int) -> Calendar:
        """``n_months`` calendar months ending with ``end_month`` (``YYYY-MM``)."""
        year, month = parse_month(end_month)
        out = []
        for _ in range(n_months):
            out.append((year, month))
            year, month = (year, month - 1) if month > 1 else (year - 1, 12)
        return cls(tuple(reversed(out)))

    def labels(self) -> list[str]:
        """``YYYY-MM`` of every month."""
        return [f"{y:04d}-{m:02d}" for y, m in self.months]

    def label(self, index: int) -> str:
        """``YYYY-MM`` of month ``index`` (negative counts from the end)."""
        return self.labels()[index]

    def first_day(self, index: int) -> date:
        """The first day of month ``index`` (negative counts from the end)."""
        year, month = self.months[index]
        return date(year, month, 1)

    @property
    def start(self) -> date:
        """The first generated day."""
        return self.first_day(0)

    @property
    def end(self) -> date:
        """The last generated day."""
        year, month = self.months[-1]
        return date(year, month, calendar.monthrange(year, month)[1])

    def days(self) -> Iterator[date]:
        """Every generated day, in order."""
        day = self.start
        while day <= self.end:
            yield day
            day += timedelta(days=1)

    def weekday_on_or_after(self, index: int, day: int) -> date:
        """Day ``day`` of month ``index`` (clipped to the month), moved to the next weekday
        within the generated period."""
        year, month = self.months[index]
        when = date(year, month, min(day, calendar.monthrange(year, month)[1]))
        while when.weekday() >= 5:
            when += timedelta(days=1)
        if when > self.end:  # the last days of the period were a weekend
            while when.weekday() >= 5 or when > self.end:
                when -= timedelta(days=1)
        return when


class UidFactory:
    """Deterministic UIDs under pydicom's root, from the seed and the object's identity."""

    def __init__(self, seed: int) -> None:
        self._seed = str(seed)

    def uid(self, *parts: object) -> str:
        """A UID for the object named by ``parts`` (the same parts give the same UID)."""
        return str(
            generate_uid(
                prefix=PYDICOM_ROOT_UID,
                entropy_srcs=["beamaudit-demo", self._seed, *(str(p) for p in parts)],
            )
        )

    @staticmethod
    def device_uid(room_key: str) -> str:
        """The Device Observer UID of a room's device (the same for every seed: same devices)."""
        return str(
            generate_uid(prefix=PYDICOM_ROOT_UID, entropy_srcs=["beamaudit-demo-device", room_key])
        )


class PatientFactory:
    """Invented adult patients; about one study in ten is a patient seen before."""

    def __init__(self, rng: np.random.Generator) -> None:
        self._rng = rng
        self._patients: list[Patient] = []

    def patient(self, on: date, *, age_mean_y: float, age_sd_y: float) -> Patient:
        """A patient for a study on ``on``: new, or one seen before (weight a little changed)."""
        rng = self._rng
        if self._patients and rng.random() < 0.10:
            seen = self._patients[int(rng.integers(len(self._patients)))]
            if seen.birth_date < on - timedelta(days=18 * 366):
                weight = float(np.clip(seen.weight_kg + rng.normal(0.0, 1.5), 40.0, 160.0))
                return Patient(
                    seen.patient_id, seen.name, seen.sex, seen.birth_date, seen.height_m, weight
                )
        female = rng.random() < 0.5
        age_y = float(np.clip(rng.normal(age_mean_y, age_sd_y), 18.0, 97.0))
        birth = on - timedelta(days=int(age_y * 365.25 + rng.integers(0, 365)))
        # adult height and weight, common practice figures: women 1.63 +/- 0.065 m and
        # 68 +/- 13 kg, men 1.76 +/- 0.07 m and 82 +/- 14 kg (about 75 +/- 15 kg overall)
        if female:
            height = rng.normal(1.63, 0.065)
            weight = rng.normal(68.0, 13.0)
            given = _GIVEN_F[int(rng.integers(len(_GIVEN_F)))]
        else:
            height = rng.normal(1.76, 0.07)
            weight = rng.normal(82.0, 14.0)
            given = _GIVEN_M[int(rng.integers(len(_GIVEN_M)))]
        surname = _SURNAMES[int(rng.integers(len(_SURNAMES)))]
        number = 1_000_001 + len(self._patients)
        patient = Patient(
            patient_id=f"HB{number:07d}",
            name=f"{surname}^{given}",
            sex="F" if female else "M",
            birth_date=birth,
            height_m=float(np.clip(height, 1.40, 2.05)),
            weight_kg=float(np.clip(weight, 40.0, 160.0)),
        )
        self._patients.append(patient)
        return patient


@dataclass
class SimulationContext:
    """The shared state of one generation run."""

    seed: int
    calendar: Calendar
    uids: UidFactory = field(init=False)
    patients: PatientFactory = field(init=False)

    def __post_init__(self) -> None:
        self.uids = UidFactory(self.seed)
        self.patients = PatientFactory(self.rng("patients"))

    def rng(self, stream: str) -> np.random.Generator:
        """An independent random stream named ``stream`` (same seed, same stream, same draws)."""
        digest = hashlib.sha256(stream.encode("utf-8")).digest()
        return np.random.default_rng([self.seed, int.from_bytes(digest[:8], "little")])

    @cached_property
    def _level_sets(self) -> list[ReferenceLevelSet]:
        return [*load_demo_local_levels(), *load_national_levels()]

    def reference_level(self, exam_type: str, quantity: str, on: date) -> tuple[float, str] | None:
        """The level the demo measures its plants against: the shipped invented local level if
        it has one for the exam type and quantity on ``on``, else the national one; with the
        set's name. ``None`` if neither has one."""
        found = applicable_levels(self._level_sets, exam_type, quantity, on)
        return (found[0].value, found[0].set_name) if found else None

    def levels(self, exam_type: str, quantity: str, on: date) -> dict[str, float]:
        """Every shipped level (local and national) for the exam type and quantity on ``on``."""
        return {
            a.set_name: a.value
            for a in applicable_levels(self._level_sets, exam_type, quantity, on)
        }


def at(day: date, hour: float) -> datetime:
    """``day`` at ``hour`` (fractional hours), to the second."""
    return datetime(day.year, day.month, day.day) + timedelta(seconds=round(hour * 3600))
