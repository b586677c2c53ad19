"""Reference-level sets: local and national diagnostic reference levels, versioned by the date they
take effect.

A :class:`ReferenceLevelSet` is one version of one named set (``"UK NDRL (UKHSA)"`` version
``"2024-11-20"``, in effect from 20 November 2024). Each holds at most one value per exam type,
quantity, patient group and clinical indication.

A level's **patient group** is empty for adults (the ICRP 135 standard-size patient) or names a
paediatric band (:mod:`beamaudit.api.review.bands`: ``weight_15_30kg``, ``age_1_6y``); an adult
level never applies to a band, nor a band's level to adults. A CT level may name a patient-size
band (:mod:`.ct_size`: ``ct_dw_20_25cm``) and a mammography level the compressed-thickness band it
is set for (:mod:`.mammography`: ``breast_50_60mm``, ``breast_45_55mm``), in the same column
(:func:`patient_group_problem` checks all three kinds). Its **clinical indication** is empty
(the level applies to every examination of the type) or names one (``acute_stroke``): it then
applies only to examinations of that indication, and for those it takes the place of the same set's
level without an indication.

For a review date, :func:`applicable_levels` picks, for every set name, the **newest version in
effect** on that date (the latest ``effective_from`` not after it); a newer version
supersedes an older one entirely, so an exam type dropped from the newer version has no level from
that set any more (it does not fall back to the older version).

CSV layout (``beamaudit levels import FILE.csv`` / ``beamaudit levels export``)
-------------------------------------------------------------------------------
One row per value; the set's own fields repeat on each row and must agree within a set version.
Lines before the header that start with ``#`` are comments (kept on export).

==============  ========  ==================================================================
column          required  content
==============  ========  ==================================================================
set_name        yes       name of the set, the same for all its versions
kind            yes       ``local``, ``national`` or ``international`` (guidance such as IAEA
                          Safety Series No. 115)
version         yes       version label, unique within the set name (``2024-11-20``)
effective_from  yes       ISO date the version takes effect (``2024-11-20``); unique within the
                          set name
set_source      no        the document the set comes from (or, for a local set, who decided it)
exam_type       yes       an exam type of the catalogue (``ct_head``)
quantity        yes       ``dap_gy_cm2``, ``esak_mgy``, ``reference_point_air_kerma_mgy``,
                          ``ctdivol_mgy``, ``dlp_mgy_cm`` or ``mgd_mgy``; the names earlier
                          versions wrote (``ref_point_air_kerma_mgy``, ``agd_mgy``) are read
                          as these (:data:`~.quantities.QUANTITY_ALIASES`)
value           yes       the reference level, a positive number
unit            yes       its unit; converted on import to the quantity's own unit (Gy.cm2,
                          mGy, mGy.cm), e.g. ``mGy.cm2`` and ``cGy.cm2`` for DAP are accepted
source          national  the published source of this value (table and row); required for
                          national and international sets
note            no        free text (e.g. the clinical indication an NDRL is defined for)
patient_group   no        empty for adults, a paediatric band (``weight_15_30kg``), for CT a
                          size band (``ct_dw_20_25cm``: Dw 20-25 cm, :mod:`.ct_size`), or for
                          mammography a compressed-thickness band (``breast_50_60mm``:
                          50-60 mm, :mod:`.mammography`)
clinical_       no        empty, or the clinical indication the level is set for, lower-case
indication                ``[a-z0-9_]`` (``acute_stroke``)
==============  ========  ==================================================================

Export always writes values in the quantity's own unit, and writes the last two columns only when
a level uses them (so files of adult levels keep their layout).
"""

from __future__ import annotations

import math
import re
from collections.abc import Iterable, Sequence
from dataclasses import dataclass, field
from datetime import date
from importlib import resources
from types import MappingProxyType
from typing import Literal, cast

import pandas as pd

from beamaudit.api.review._csv import CsvSource, read_table, write_table
from beamaudit.api.review.bands import PatientGroups, load_default_patient_groups
from beamaudit.api.review.ct_size import is_size_band
from beamaudit.api.review.errors import CsvFormatError, ReviewError
from beamaudit.api.review.examtypes import ExamCatalogue
from beamaudit.api.review.mammography import is_thickness_band
from beamaudit.api.review.quantities import QUANTITIES, quantity_name, to_canonical_unit

__all__ = [
    "LEVELS_TABLE_COLUMNS",
    "LEVEL_COLUMNS",
    "LEVEL_OPTIONAL_COLUMNS",
    "SHIPPED_LEVEL_FILES",
    "AppliedLevel",
    "LevelEntry",
    "ReferenceLevelSet",
    "applicable_levels",
    "check_level_sets",
    "levels_in_effect",
    "levels_table",
    "load_demo_local_levels",
    "load_mammography_levels",
    "load_national_levels",
    "load_shipped_levels",
    "patient_group_problem",
    "read_levels_csv",
    "write_levels_csv",
]

LevelKind = Literal["national", "local", "international"]
#: the kinds of level set: the hospital's own, its country's, and international guidance (such as
#: IAEA Safety Series No. 115), a kind of its own
LEVEL_KINDS: tuple[str, ...] = ("local", "national", "international")
#: kinds whose every value needs its published source
PUBLISHED_KINDS: tuple[str, ...] = ("national", "international")


def _a(kind: str) -> str:
    """``kind`` with its article: "a national", "an international"."""
    return f"{'an' if kind[:1] in 'aeiou' else 'a'} {kind}"


LEVEL_COLUMNS = (
    "set_name",
    "kind",
    "version",
    "effective_from",
    "set_source",
    "exam_type",
    "quantity",
    "value",
    "unit",
    "source",
    "note",
)
#: Columns a level file may add to :data:`LEVEL_COLUMNS`.
LEVEL_OPTIONAL_COLUMNS = ("patient_group", "clinical_indication")
_IDENTIFIER = re.compile(r"^[a-z0-9][a-z0-9_]*$")
_REQUIRED = (
    "set_name",
    "kind",
    "version",
    "effective_from",
    "exam_type",
    "quantity",
    "value",
    "unit",
)
_ISO_DATE = re.compile(r"^\d{4}-\d{2}-\d{2}$")

#: Columns of :func:`levels_table`.
LEVELS_TABLE_COLUMNS = (
    "exam_type",
    "quantity",
    "level_set",
    "level_kind",
    "level_version",
    "level_effective_from",
    "reference_level",
    "level_unit",
    "level_source",
    "patient_group",
    "clinical_indication",
)


@dataclass(frozen=True, slots=True)
class LevelEntry:
    """One reference level: ``value`` in the quantity's own unit ``unit``, for adults
    (``patient_group`` empty) or a paediatric band, for every examination of the type
    (``clinical_indication`` empty) or one indication."""

    exam_type: str
    quantity: str
    value: float
    unit: str
    source: str = ""
    note: str = ""
    patient_group: str = ""
    clinical_indication: str = ""

    @property
    def key(self) -> tuple[str, str, str, str]:
        """``(exam_type, quantity, patient_group, clinical_indication)``: unique within a set."""
        return (self.exam_type, self.quantity, self.patient_group, self.clinical_indication)


@dataclass(frozen=True, slots=True)
class ReferenceLevelSet:
    """One version of a named reference-level set.

    Raises
    ------
    ReviewError
        Bad kind, an entry in a unit that is not the quantity's own, a non-positive value, or two
        entries for the same exam type and quantity.
    """

    name: str
    kind: LevelKind
    version: str
    effective_from: date
    source: str
    entries: tuple[LevelEntry, ...]
    _index: MappingProxyType[tuple[str, str, str, str], LevelEntry] = field(
        init=False, repr=False, compare=False
    )

    def __post_init__(self) -> None:
        if self.kind not in LEVEL_KINDS:
            raise ReviewError(
                f"level set {self.name!r}: kind must be one of {', '.join(LEVEL_KINDS)}"
            )
        index: dict[tuple[str, str, str, str], LevelEntry] = {}
        for e in self.entries:
            if e.quantity not in QUANTITIES or e.unit != QUANTITIES[e.quantity].unit:
                raise ReviewError(
                    f"level set {self.name!r} {self.version}: {e.exam_type} {e.quantity} must be "
                    f"stored in the quantity's own unit"
                )
            if not (math.isfinite(e.value) and e.value > 0):
                raise ReviewError(
                    f"level set {self.name!r} {self.version}: {e.exam_type} {e.quantity} value "
                    f"{e.value!r} is not a positive number"
                )
            for name, text in (
                ("patient_group", e.patient_group),
                ("indication", e.clinical_indication),
            ):
                if text and not _IDENTIFIER.match(text):
                    raise ReviewError(
                        f"level set {self.name!r} {self.version}: {e.exam_type} {e.quantity} "
                        f"{name} {text!r} must be lower-case [a-z0-9_]"
                    )
            if e.key in index:
                raise ReviewError(
                    f"level set {self.name!r} {self.version}: two values for {e.exam_type} "
                    f"{e.quantity}{_qualifier(e.patient_group, e.clinical_indication)}"
                )
            index[e.key] = e
        object.__setattr__(self, "_index", MappingProxyType(index))

    def get(
        self,
        exam_type: str,
        quantity: str,
        patient_group: str = "",
        clinical_indication: str = "",
    ) -> LevelEntry | None:
        """The entry that applies to ``exam_type`` and ``quantity`` for ``patient_group`` (empty:
        adults) and ``clinical_indication`` (empty: none recorded), or ``None``.

        The entry for the indication itself is preferred; else the one without an indication.
        """
        if clinical_indication:
            found = self._index.get((exam_type, quantity, patient_group, clinical_indication))
            if found is not None:
                return found
        return self._index.get((exam_type, quantity, patient_group, ""))

    def describe(self) -> dict[str, str]:
        """The set's identity as plain strings (for a stored run)."""
        return {
            "name": self.name,
            "kind": self.kind,
            "version": self.version,
            "effective_from": self.effective_from.isoformat(),
            "source": self.source,
        }


@dataclass(frozen=True, slots=True)
class AppliedLevel:
    """A reference level that applies to one exam type and quantity on a date."""

    set_name: str
    kind: LevelKind
    version: str
    effective_from: date
    exam_type: str
    quantity: str
    value: float
    unit: str
    source: str


def _qualifier(patient_group: str, clinical_indication: str) -> str:
    parts = [f"patient group {patient_group}"] if patient_group else []
    parts += [f"indication {clinical_indication}"] if clinical_indication else []
    return f" ({', '.join(parts)})" if parts else ""


def check_level_sets(sets: Iterable[ReferenceLevelSet]) -> None:
    """Check that versions of a set name agree on kind and never share a version or a date.

    Raises
    ------
    ReviewError
        Naming the set and the clash.
    """
    seen: dict[str, ReferenceLevelSet] = {}
    versions: set[tuple[str, str]] = set()
    dates: set[tuple[str, date]] = set()
    for s in sets:
        first = seen.setdefault(s.name, s)
        if first.kind != s.kind:
            raise ReviewError(f"level set {s.name!r} is both {first.kind} and {s.kind}")
        if (s.name, s.version) in versions:
            raise ReviewError(f"level set {s.name!r} has version {s.version!r} twice")
        if (s.name, s.effective_from) in dates:
            raise ReviewError(
                f"level set {s.name!r} has two versions in effect from {s.effective_from}; "
                f"the newer one would be ambiguous"
            )
        versions.add((s.name, s.version))
        dates.add((s.name, s.effective_from))


def levels_in_effect(sets: Sequence[ReferenceLevelSet], on_date: date) -> list[ReferenceLevelSet]:
    """For every set name, its newest version in effect on ``on_date`` (local sets first).

    Raises
    ------
    ReviewError
        As :func:`check_level_sets`.
    """
    check_level_sets(sets)
    newest: dict[str, ReferenceLevelSet] = {}
    for s in sets:
        if s.effective_from <= on_date and (
            s.name not in newest or s.effective_from > newest[s.name].effective_from
        ):
            newest[s.name] = s
    return sorted(newest.values(), key=lambda s: (s.kind != "local", s.name))


def applicable_levels(
    sets: Sequence[ReferenceLevelSet],
    exam_type: str,
    quantity: str,
    on_date: date,
    *,
    patient_group: str = "",
    clinical_indication: str = "",
) -> list[AppliedLevel]:
    """The levels that apply to ``exam_type`` and ``quantity`` on ``on_date``.

    One per set name at most: from the newest version of that set in effect on the date, if that
    version has a value for the exam type and quantity, for ``patient_group`` (empty: adults) and
    ``clinical_indication`` (as :meth:`ReferenceLevelSet.get`). Local sets come first, then by name.

    Examples
    --------
    >>> from datetime import date
    >>> [a.value for a in applicable_levels(load_national_levels(), "ct_head", "dlp_mgy_cm",
    ...                                     date(2025, 1, 1))]
    [790.0]
    """
    out = []
    for s in levels_in_effect(sets, on_date):
        entry = s.get(exam_type, quantity, patient_group, clinical_indication)
        if entry is not None:
            out.append(
                AppliedLevel(
                    set_name=s.name,
                    kind=s.kind,
                    version=s.version,
                    effective_from=s.effective_from,
                    exam_type=exam_type,
                    quantity=quantity,
                    value=entry.value,
                    unit=entry.unit,
                    source=entry.source or s.source,
                )
            )
    return out


def levels_table(sets: Sequence[ReferenceLevelSet], on_date: date) -> pd.DataFrame:
    """Every level in effect on ``on_date``, one row per set, exam type and quantity.

    Columns :data:`LEVELS_TABLE_COLUMNS` (``patient_group`` and ``clinical_indication`` empty
    strings where the level has none); rows ordered local first, then set name, exam type,
    quantity, patient group, indication. This is :func:`applicable_levels` for all exam types at
    once, for joining to groups.
    """
    rows = [
        {
            "exam_type": e.exam_type,
            "quantity": e.quantity,
            "level_set": s.name,
            "level_kind": s.kind,
            "level_version": s.version,
            "level_effective_from": s.effective_from.isoformat(),
            "reference_level": e.value,
            "level_unit": e.unit,
            "level_source": e.source or s.source,
            "patient_group": e.patient_group,
            "clinical_indication": e.clinical_indication,
        }
        for s in levels_in_effect(sets, on_date)
        for e in sorted(s.entries, key=lambda e: e.key)
    ]
    return pd.DataFrame(rows, columns=list(LEVELS_TABLE_COLUMNS))


# ---------------------------------------------------------------------------------------- CSV files
def _group_of(row: dict[str, str]) -> tuple[str, str]:
    """A level row's patient group and clinical indication (empty: any)."""
    return row["patient_group"], row["clinical_indication"]


def patient_group_problem(group: str, bands: PatientGroups) -> str | None:
    """Why ``group`` cannot be a level's patient group, or None: empty (adults), a band of
    ``bands``, a CT size band or a mammography compressed-thickness band."""
    if not group or group in bands or is_size_band(group) or is_thickness_band(group):
        return None
    return (
        f"patient_group {group!r} is not a band of {bands.source} (bands: "
        f"{', '.join(g.patient_group for g in bands)}) nor a CT size band (ct_dw_20_25cm) nor a "
        "breast thickness band (breast_50_60mm)"
    )


def _set_head_problems(
    row: dict[str, str], line: int, heads: dict[tuple[str, str], tuple[int, dict[str, str]]]
) -> list[str]:
    """What is wrong with the set a level row belongs to: its kind, its date, and whether they
    and its source agree with the set's first row (kept in ``heads``)."""
    problems = []
    if row["kind"] not in LEVEL_KINDS:
        problems.append(f"kind must be one of {', '.join(LEVEL_KINDS)}, got {row['kind']!r}")
    if not _ISO_DATE.match(row["effective_from"]):
        problems.append(f"effective_from {row['effective_from']!r} is not a date YYYY-MM-DD")
    else:
        try:
            date.fromisoformat(row["effective_from"])
        except ValueError:
            problems.append(f"effective_from {row['effective_from']!r} is not a valid date")
    name, version = row["set_name"], row["version"]
    head = {k: row[k] for k in ("kind", "effective_from", "set_source")}
    if (name, version) not in heads:
        heads[(name, version)] = (line, head)
        return problems
    first_line, first = heads[(name, version)]
    problems += [
        f"{k} {v!r} differs from {first[k]!r} on line {first_line} for "
        f"set {name!r} version {version!r}"
        for k, v in head.items()
        if v != first[k]
    ]
    return problems


def _level_entry(
    row: dict[str, str], catalogue: ExamCatalogue | None, bands: PatientGroups
) -> tuple[LevelEntry, list[str]]:
    """A level row's entry (value in the quantity's own unit) and what is wrong with it; the
    entry is only usable when nothing is."""
    problems = []
    exam_type, quantity = row["exam_type"], quantity_name(row["quantity"])
    if not exam_type:
        problems.append("exam_type is empty")
    elif catalogue is not None and exam_type not in catalogue:
        problems.append(f"exam_type {exam_type!r} is not in the catalogue")
    if quantity not in QUANTITIES:
        problems.append(f"quantity {quantity!r} is not one of {', '.join(QUANTITIES)}")
    value = math.nan
    try:
        value = float(row["value"])
    except ValueError:
        problems.append(f"value {row['value']!r} is not a number")
    else:
        if not (math.isfinite(value) and value > 0):
            problems.append(f"value {row['value']!r} must be a positive number")
    if quantity in QUANTITIES and math.isfinite(value):
        try:
            value = to_canonical_unit(quantity, value, row["unit"])
        except ReviewError as exc:
            problems.append(str(exc))
    group, indication = _group_of(row)
    group_problem = patient_group_problem(group, bands)
    if group_problem:
        problems.append(group_problem)
    if indication and not _IDENTIFIER.match(indication):
        problems.append(f"clinical_indication {indication!r} must be lower-case [a-z0-9_]")
    if row["kind"] in PUBLISHED_KINDS and not row["source"]:
        problems.append(f"{_a(row['kind'])} level needs its published source in the source column")
    entry = LevelEntry(
        exam_type=exam_type,
        quantity=quantity,
        value=value,
        unit=QUANTITIES[quantity].unit if quantity in QUANTITIES else row["unit"],
        source=row["source"],
        note=row["note"],
        patient_group=group,
        clinical_indication=indication,
    )
    return entry, problems


def read_levels_csv(
    source: CsvSource,
    catalogue: ExamCatalogue | None = None,
    patient_groups: PatientGroups | None = None,
) -> list[ReferenceLevelSet]:
    """Read reference-level sets from a CSV file (layout in the module docstring).

    Parameters
    ----------
    source : path or open file
        The file.
    catalogue : ExamCatalogue, optional
        When given, every exam type must be in it.
    patient_groups : PatientGroups, optional
        When given, every patient group must be one of its bands (default: the shipped bands).

    Returns
    -------
    list of ReferenceLevelSet
        In the order each set version first appears in the file.

    Raises
    ------
    CsvFormatError
        Every problem of the file, each with its line number.
    """
    table = read_table(
        source, required=_REQUIRED, optional=(*LEVEL_COLUMNS, *LEVEL_OPTIONAL_COLUMNS)
    )
    bands = patient_groups if patient_groups is not None else load_default_patient_groups()
    problems: list[tuple[int | None, str]] = []
    heads: dict[tuple[str, str], tuple[int, dict[str, str]]] = {}
    entries: dict[tuple[str, str], list[LevelEntry]] = {}
    seen_entries: dict[tuple[str, ...], int] = {}
    for line, row in table.rows:
        name, version = row["set_name"], row["version"]
        if not name or not version:
            problems.append((line, "set_name and version must not be empty"))
            continue
        row_problems = _set_head_problems(row, line, heads)
        entry, entry_problems = _level_entry(row, catalogue, bands)
        row_problems += entry_problems
        entry_key = (name, version, row["exam_type"], entry.quantity, *_group_of(row))
        if entry_key in seen_entries:
            row_problems.append(
                f"{row['exam_type']} {entry.quantity}{_qualifier(*_group_of(row))} already "
                f"given on line {seen_entries[entry_key]} for set {name!r} version {version!r}"
            )
        seen_entries.setdefault(entry_key, line)
        problems += [(line, problem) for problem in row_problems]
        if not row_problems:
            entries.setdefault((name, version), []).append(entry)
    if problems:
        raise CsvFormatError(table.source, problems)
    sets = [
        ReferenceLevelSet(
            name=name,
            kind=cast(LevelKind, head["kind"]),
            version=version,
            effective_from=date.fromisoformat(head["effective_from"]),
            source=head["set_source"],
            entries=tuple(entries.get((name, version), ())),
        )
        for (name, version), (_, head) in heads.items()
    ]
    try:
        check_level_sets(sets)
    except ReviewError as exc:
        raise CsvFormatError(table.source, [(None, str(exc))]) from exc
    return sets


def write_levels_csv(
    sets: Iterable[ReferenceLevelSet],
    destination: CsvSource | None = None,
    *,
    comments: Sequence[str] = (),
) -> str | None:
    """Write ``sets`` in the CSV layout of the module docstring, values in their own unit.

    Returns the text when ``destination`` is ``None``.
    """
    sets = list(sets)
    qualified = any(e.patient_group or e.clinical_indication for s in sets for e in s.entries)
    columns = (*LEVEL_COLUMNS, *LEVEL_OPTIONAL_COLUMNS) if qualified else LEVEL_COLUMNS
    rows = (
        {
            "set_name": s.name,
            "kind": s.kind,
            "version": s.version,
            "effective_from": s.effective_from.isoformat(),
            "set_source": s.source,
            "exam_type": e.exam_type,
            "quantity": e.quantity,
            "value": e.value,
            "unit": e.unit,
            "source": e.source,
            "note": e.note,
            "patient_group": e.patient_group,
            "clinical_indication": e.clinical_indication,
        }
        for s in sets
        for e in s.entries
    )
    return write_table(
        cast("str | None", destination), columns=columns, rows=rows, comments=comments
    )


def _load(name: str) -> list[ReferenceLevelSet]:
    with resources.files("beamaudit.api").joinpath("data", name).open("rb") as handle:
        return read_levels_csv(handle)


def load_national_levels() -> list[ReferenceLevelSet]:
    """The shipped national sets (``beamaudit/api/data/national_levels.csv``), each value with its
    published source."""
    return _load("national_levels.csv")


def load_mammography_levels() -> list[ReferenceLevelSet]:
    """The shipped mammography sets (``beamaudit/api/data/mammography_levels.csv``): mean
    glandular dose per view for a standard breast, each value's source naming its confidence
    (recalled, not read in the source: see the file's comments)."""
    return _load("mammography_levels.csv")


#: The level files shipped in ``beamaudit/api/data`` that ``beamaudit levels import --shipped
#: NAME`` imports, by name (the demo's invented local set is not one of them).
SHIPPED_LEVEL_FILES: MappingProxyType[str, str] = MappingProxyType(
    {"national": "national_levels.csv", "mammography": "mammography_levels.csv"}
)


def load_shipped_levels(name: str) -> list[ReferenceLevelSet]:
    """The sets of the shipped level file ``name`` (a key of :data:`SHIPPED_LEVEL_FILES`).

    Raises
    ------
    ReviewError
        ``name`` is no shipped level file.
    """
    if name not in SHIPPED_LEVEL_FILES:
        known = ", ".join(SHIPPED_LEVEL_FILES)
        raise ReviewError(f"no shipped level file {name!r} (shipped: {known})")
    return _load(SHIPPED_LEVEL_FILES[name])


def load_demo_local_levels() -> list[ReferenceLevelSet]:
    """The demo's local set (``beamaudit/api/data/demo_local_levels.csv``): **invented** values,
    for demonstrations and tests only."""
    return _load("demo_local_levels.csv")
