"""Paediatric patient groups: the weight and age bands reference levels for children are set in.

ICRP Publication 135 (2017) and the European guidelines on diagnostic reference levels for
paediatric imaging (European Commission, Radiation Protection No. 185, 2018) set paediatric levels
per **weight band** for body examinations (< 5, 5-< 15, 15-< 30, 30-< 50, 50-< 80 kg) and per
**age band** for head examinations (0-< 3 months, 3 months-< 1 year, 1-< 6 years, >= 6 years)
(PUBLISHED-VALUES n, high). The bands are data (:class:`PatientGroups`, shipped as
``beamaudit/api/data/patient_groups.csv``): a level set names a band in its ``patient_group``
column, and a review groups children by the bands of their exam type's ``paediatric_bands``
(``weight`` or ``age``, a column of the exam-type catalogue).

Who is banded
-------------
A patient is paediatric when the recorded age is below ``paediatric_age_limit_years`` (default
18, the age of majority: **common practice**, neither publication fixes it for every band). For
an exam type banded by weight, a child goes to the band that holds the recorded weight; for one
banded by age, to the band that holds the age. Nothing is guessed:

* a child whose weight is not recorded goes to :data:`WEIGHT_NOT_RECORDED`, a group of its own
  that is counted and shown but is in no band and has no level;
* a child whose weight (or age) lies outside every band (a 90 kg 16-year-old) goes to
  :data:`OUTSIDE_BANDS`, likewise;
* a patient whose age is not recorded is not known to be a child and stays in the exam type's
  main group (``patient_group`` missing), where the ICRP 135 standard-size window applies as
  before; the group table counts such patients (``n_no_age``).

Adults and exam types without ``paediatric_bands`` are never banded.

CSV layout (``patient_groups.csv``)
-----------------------------------
==============  ========  ==================================================================
column          required  content
==============  ========  ==================================================================
patient_group   yes       identifier, lower-case ``[a-z0-9_]``, unique (``weight_15_30kg``)
banding         yes       ``weight`` or ``age``
low             yes       lower bound, included, >= 0
high            no        upper bound, excluded; empty for an open band (``>= 6 years``)
unit            yes       ``kg`` for weight bands; ``month`` or ``year`` for age bands
label           yes       the band for people (``15-<30 kg``)
source          no        where the band is defined
==============  ========  ==================================================================

Bands of one banding must not overlap.
"""

from __future__ import annotations

import hashlib
import itertools
import math
import re
from collections.abc import Iterator
from dataclasses import dataclass, field
from importlib import resources
from types import MappingProxyType
from typing import Literal, cast

import numpy as np

from beamaudit.api.review._csv import CsvSource, read_table, write_table
from beamaudit.api.review.errors import CsvFormatError, ReviewError
from beamaudit.api.review.mammography import band_label, is_thickness_group

__all__ = [
    "BANDINGS",
    "OUTSIDE_BANDS",
    "PATIENT_GROUP_COLUMNS",
    "SPECIAL_GROUPS",
    "WEIGHT_NOT_RECORDED",
    "PatientGroup",
    "PatientGroups",
    "assign_patient_groups",
    "load_default_patient_groups",
    "read_patient_groups_csv",
    "write_patient_groups_csv",
]

Banding = Literal["weight", "age"]
BANDINGS: tuple[Banding, ...] = ("weight", "age")

#: A child of a weight-banded exam type whose weight is not recorded: counted, never banded.
WEIGHT_NOT_RECORDED = "paediatric_weight_not_recorded"
#: A child whose weight (or age) lies in no band of the exam type's banding.
OUTSIDE_BANDS = "paediatric_outside_bands"
#: The paediatric groups that are not bands (no level applies to them).
SPECIAL_GROUPS = (WEIGHT_NOT_RECORDED, OUTSIDE_BANDS)

PATIENT_GROUP_COLUMNS = ("patient_group", "banding", "low", "high", "unit", "label", "source")
_REQUIRED = ("patient_group", "banding", "low", "unit", "label")
_IDENTIFIER = re.compile(r"^[a-z0-9][a-z0-9_]*$")
#: Factor from the file's unit to kg (weight) or years (age). 3 months = 0.25 year exactly,
#: the value an Age String ``003M`` gives (PS3.5 AS: nnnD, nnnW, nnnM or nnnY).
_UNIT_FACTOR = MappingProxyType(
    {"kg": ("weight", 1.0), "month": ("age", 1 / 12), "year": ("age", 1)}
)


@dataclass(frozen=True, slots=True)
class PatientGroup:
    """One band: ``low <= x < high`` in ``unit`` (``high`` infinite for an open band)."""

    patient_group: str
    banding: Banding
    low: float
    high: float
    unit: str
    label: str
    source: str = ""

    def __post_init__(self) -> None:
        if not _IDENTIFIER.match(self.patient_group) or self.patient_group in SPECIAL_GROUPS:
            raise ReviewError(
                f"patient group {self.patient_group!r} must be lower-case [a-z0-9_] and not one "
                f"of {', '.join(SPECIAL_GROUPS)}"
            )
        if self.banding not in BANDINGS:
            raise ReviewError(
                f"patient group {self.patient_group!r}: banding must be weight or age"
            )
        kind = _UNIT_FACTOR.get(self.unit, ("", 0.0))[0]
        if kind != self.banding:
            allowed = "kg" if self.banding == "weight" else "month or year"
            raise ReviewError(
                f"patient group {self.patient_group!r}: unit {self.unit!r} is not a unit of "
                f"{self.banding} (use {allowed})"
            )
        if not (math.isfinite(self.low) and self.low >= 0 and self.high > self.low):
            raise ReviewError(
                f"patient group {self.patient_group!r}: bounds must satisfy 0 <= low < high"
            )

    @property
    def bounds(self) -> tuple[float, float]:
        """``(low, high)`` in kg for a weight band, in years for an age band."""
        factor = _UNIT_FACTOR[self.unit][1]
        return self.low * factor, self.high * factor


@dataclass(frozen=True, slots=True)
class PatientGroups:
    """A set of bands, in file order, with the file's comments and name.

    Raises
    ------
    ReviewError
        A group named twice, or two bands of one banding that overlap.
    """

    groups: tuple[PatientGroup, ...]
    comments: tuple[str, ...] = ()
    source: str = "<patient groups>"
    _index: MappingProxyType[str, PatientGroup] = field(init=False, repr=False, compare=False)

    def __post_init__(self) -> None:
        index = {g.patient_group: g for g in self.groups}
        if len(index) != len(self.groups):
            raise ReviewError(f"{self.source}: a patient group is defined twice")
        for banding in BANDINGS:
            bands = sorted((g.bounds, g.patient_group) for g in self.groups if g.banding == banding)
            for (first, a), (second, b) in itertools.pairwise(bands):
                if second[0] < first[1]:
                    raise ReviewError(f"{self.source}: patient groups {a!r} and {b!r} overlap")
        object.__setattr__(self, "_index", MappingProxyType(index))

    def __contains__(self, name: object) -> bool:
        return name in self._index

    def __iter__(self) -> Iterator[PatientGroup]:
        return iter(self.groups)

    def __len__(self) -> int:
        return len(self.groups)

    def get(self, name: str) -> PatientGroup | None:
        """The band named ``name``, or ``None``."""
        return self._index.get(name)

    def label(self, name: str | None) -> str:
        """A label for people of any ``patient_group`` value of a review."""
        if name is None:
            return "adults and patients of unrecorded age"
        if name == WEIGHT_NOT_RECORDED:
            return "children whose weight is not recorded"
        if name == OUTSIDE_BANDS:
            return "children outside every band"
        band = self.get(name)
        if band is None and is_thickness_group(name):
            return band_label(name)
        if band is None and name.startswith("ct_dw_"):
            from beamaudit.api.review.ct_size import size_band_label

            return size_band_label(name)
        return f"children {band.label}" if band is not None else name

    def fingerprint(self) -> str:
        """SHA-256 of the CSV form (without comments): identifies the bands in a stored run."""
        text = write_patient_groups_csv(PatientGroups(self.groups))
        return hashlib.sha256(cast(str, text).encode("utf-8")).hexdigest()

    def describe(self) -> dict[str, str]:
        """Identity for a stored run."""
        return {"source": self.source, "fingerprint": self.fingerprint()}


def assign_patient_groups(
    groups: PatientGroups,
    *,
    banding: np.ndarray,
    age_years: np.ndarray,
    weight_kg: np.ndarray,
    paediatric_age_limit_years: float,
) -> np.ndarray:
    """The patient group of each examination (see the module docstring).

    Parameters
    ----------
    groups : PatientGroups
        The bands.
    banding : array of str or None
        Per examination, its exam type's ``paediatric_bands`` (``"weight"``, ``"age"``, else not
        banded).
    age_years, weight_kg : arrays of float
        NaN where not recorded.
    paediatric_age_limit_years : float
        Patients younger than this are children.

    Returns
    -------
    array of object
        A band name, :data:`WEIGHT_NOT_RECORDED`, :data:`OUTSIDE_BANDS`, or ``None`` (not banded:
        adults, patients of unrecorded age, exam types without bands).
    """
    banding = np.asarray(banding, dtype=object)
    age = np.asarray(age_years, dtype=np.float64)
    weight = np.asarray(weight_kg, dtype=np.float64)
    out = np.full(len(banding), None, dtype=object)
    with np.errstate(invalid="ignore"):
        child = age < paediatric_age_limit_years  # False where the age is NaN
    for kind, value in (("weight", weight), ("age", age)):
        todo = child & (banding == kind)
        if not todo.any():
            continue
        found = np.zeros(len(out), dtype=bool)
        for g in groups:
            if g.banding != kind:
                continue
            low, high = g.bounds
            with np.errstate(invalid="ignore"):
                hit = todo & (value >= low) & (value < high)
            out[hit] = g.patient_group
            found |= hit
        missing = todo & np.isnan(value)
        out[missing] = WEIGHT_NOT_RECORDED if kind == "weight" else OUTSIDE_BANDS
        out[todo & ~found & ~missing] = OUTSIDE_BANDS
    return out


# ---------------------------------------------------------------------------------------- CSV files
def read_patient_groups_csv(source: CsvSource) -> PatientGroups:
    """Read a patient-group CSV file (layout in the module docstring).

    Raises
    ------
    CsvFormatError
        Every problem of the file, each with its line number.
    """
    table = read_table(source, required=_REQUIRED, optional=PATIENT_GROUP_COLUMNS)
    problems: list[tuple[int | None, str]] = []
    groups: list[PatientGroup] = []
    for line, row in table.rows:
        try:
            low = float(row["low"])
            high = float(row["high"]) if row["high"] else math.inf
        except ValueError:
            problems.append((line, f"low {row['low']!r} and high {row['high']!r} must be numbers"))
            continue
        try:
            groups.append(
                PatientGroup(
                    patient_group=row["patient_group"],
                    banding=cast(Banding, row["banding"]),
                    low=low,
                    high=high,
                    unit=row["unit"],
                    label=row["label"],
                    source=row["source"],
                )
            )
        except ReviewError as exc:
            problems.append((line, str(exc)))
    if problems:
        raise CsvFormatError(table.source, problems)
    try:
        return PatientGroups(tuple(groups), comments=table.comments, source=table.source)
    except ReviewError as exc:
        raise CsvFormatError(table.source, [(None, str(exc))]) from exc


def write_patient_groups_csv(
    groups: PatientGroups, destination: CsvSource | None = None
) -> str | None:
    """Write ``groups`` as CSV (with its comments); returns the text without a destination."""
    rows = (
        {
            "patient_group": g.patient_group,
            "banding": g.banding,
            "low": g.low,
            "high": None if math.isinf(g.high) else g.high,
            "unit": g.unit,
            "label": g.label,
            "source": g.source,
        }
        for g in groups.groups
    )
    return write_table(
        cast("str | None", destination),
        columns=PATIENT_GROUP_COLUMNS,
        rows=rows,
        comments=groups.comments,
    )


def load_default_patient_groups() -> PatientGroups:
    """The shipped bands, ``beamaudit/api/data/patient_groups.csv`` (ICRP 135, EC RP 185)."""
    with resources.files("beamaudit.api").joinpath("data", "patient_groups.csv").open("rb") as fh:
        return read_patient_groups_csv(fh)
