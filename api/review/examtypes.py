"""Exam types: the catalogue of standard examinations, and rules that map raw header values to them.

The catalogue (CSV layout below; shipped as ``beamaudit/api/data/exam_types.csv``) says for each
exam type which modality group it belongs to (this sets the ICRP 135 minimum sample), which DICOM
modalities produce it, whether its reference level applies **per projection** (one view, one
irradiation event: one value per event) or **per examination** (all views or acquisitions of a
study: one value per study), and which dose quantities are reviewed.

Mapping rules (shipped as ``beamaudit/api/data/mapping_rules.csv``) are tried in ascending
``priority``; the **first rule that matches wins**. A rule matches an event when every non-empty
pattern cell matches the event's field; an empty cell matches anything, a missing value included.
Events that no rule matches map to ``None`` and are listed by :func:`unmapped_summary` for
someone to map; they are never dropped.

Pattern syntax (all matching is case-insensitive; values are compared after stripping leading and
trailing spaces):

* **glob** (default): ``*`` any run of characters, ``?`` one character, ``[abc]`` one of a set
  (Python :mod:`fnmatch`), matched against the **whole** value; ``|`` separates alternatives, so
  ``CR|DX`` matches either modality and ``*chest*`` matches any value containing "chest".
* **regular expression**: a cell starting with ``re:`` is a regular expression searched
  **anywhere** in the value (``re:\\bchest\\b``); anchor it with ``^``/``$`` to match the
  whole value. Expressions run on RE2 (linear time, whatever the text): Python's syntax without
  back-references or look-arounds. Only the first :data:`MAX_MATCHED_CHARS` characters of a
  value are matched.

A non-empty pattern never matches a missing value. The pseudo-field ``any_description`` matches when
the pattern matches the study description, the series description or the protocol name.

Catalogue CSV columns (``exam_types.csv``)
------------------------------------------
==================  ========  ================================================================
column              required  content
==================  ========  ================================================================
exam_type           yes       identifier, lower-case ``[a-z0-9_]``, unique (``chest_pa``)
name                yes       name for people (``Chest PA``)
modality_group      yes       ``radiography``, ``mammography``, ``fluoroscopy`` (diagnostic),
                              ``interventional`` or ``ct``
dicom_modalities    yes       DICOM Modality values that produce it, separated by spaces
                              (``CR DX``)
level_applies_per   yes       ``projection`` or ``examination``
quantities          yes       reviewed quantities separated by spaces (``dap_gy_cm2 esak_mgy``);
                              names of :data:`~beamaudit.api.review.quantities.QUANTITIES` (an
                              earlier name of :data:`~.quantities.QUANTITY_ALIASES` is read as its
                              quantity)
aggregation         no        examination types only: ``quantity=rule`` pairs separated by
                              spaces, rule ``sum``, ``max`` or ``mean``, overriding
                              :data:`DEFAULT_AGGREGATION`
description         no        free text
paediatric_bands    no        how children are grouped for paediatric levels: ``weight`` (body
                              examinations) or ``age`` (head examinations), after ICRP 135 and
                              EC RP 185 (see :mod:`beamaudit.api.review.bands`); empty = children
                              are not banded
==================  ========  ================================================================

Mapping-rule CSV columns (``mapping_rules.csv``)
------------------------------------------------
``priority`` (required, integer, unique: lower is tried first), ``exam_type`` (required, a catalogue
identifier), ``clinical_indication`` (optional, lower-case ``[a-z0-9_]``: the clinical indication
the rule sets with the exam type, e.g. ``acute_stroke`` for a head CT whose description names a
stroke; a level may apply to an exam type and an indication), the pattern columns ``modality``,
``room``, ``body_part``, ``view_position``,
``study_description``, ``series_description``, ``protocol_name``, ``mammography_acquisition``
(``2d`` or ``tomosynthesis``, as ingest read it from the image or the dose report: so 2D views and
tomosynthesis sweeps are told apart whatever the descriptions say), ``mammography_intent``
(``screening`` or ``diagnostic``, as ingest read it from a view modifier, a procedure code or the
dose report's intent: before any description), ``any_description`` (all optional, empty = any),
and ``note`` (optional free text). A rules file without the ``mammography_intent`` column reads
as before.
"""

from __future__ import annotations

import hashlib
import re
from collections.abc import Iterator, Mapping
from dataclasses import dataclass, field
from importlib import resources
from types import MappingProxyType
from typing import Any, Literal, cast

import numpy as np
import pandas as pd

from beamaudit.api.review._csv import CsvSource, read_table, write_table
from beamaudit.api.review.errors import CsvFormatError, ReviewInputError
from beamaudit.api.review.quantities import QUANTITIES, quantity_name

__all__ = [
    "AGGREGATIONS",
    "CATALOGUE_COLUMNS",
    "DEFAULT_AGGREGATION",
    "EVENT_FIELDS",
    "MODALITY_GROUPS",
    "OPTIONAL_EVENT_FIELDS",
    "RULE_COLUMNS",
    "RULE_FIELDS",
    "ExamCatalogue",
    "ExamType",
    "MappingRule",
    "MappingRules",
    "compile_pattern",
    "load_default_catalogue",
    "load_default_rules",
    "map_events",
    "map_events_with_indication",
    "match_rules",
    "read_catalogue_csv",
    "read_rules_csv",
    "unmapped_summary",
    "write_catalogue_csv",
    "write_rules_csv",
]

LevelAppliesPer = Literal["projection", "examination"]
Aggregation = Literal["sum", "max", "mean"]

MODALITY_GROUPS = ("radiography", "mammography", "fluoroscopy", "interventional", "ct")
AGGREGATIONS: tuple[Aggregation, ...] = ("sum", "max", "mean")

#: How an examination-level type turns a study's events into one value, per quantity.
#: Additive quantities are summed over the study's irradiation events (DAP, DLP and K_a,r add up
#: over events; mean glandular dose adds over the views of a breast). CTDIvol is a dose *index* of
#: one acquisition and does not add: the study's value is the **largest** CTDIvol of its
#: acquisitions, which for a single-phase examination is the CTDIvol of its diagnostic series (the
#: localiser's tiny CTDIvol never lowers it, as it would a mean) and for a multi-phase one the most
#: exposing phase, the conservative choice against a per-sequence reference level. ESAK is the
#: kerma at one entrance point and does not add across projections either: largest value.
DEFAULT_AGGREGATION: MappingProxyType[str, Aggregation] = MappingProxyType(
    {
        "dap_gy_cm2": "sum",
        "dlp_mgy_cm": "sum",
        "reference_point_air_kerma_mgy": "sum",
        "mgd_mgy": "sum",
        "ctdivol_mgy": "max",
        "esak_mgy": "max",
    }
)

CATALOGUE_COLUMNS = (
    "exam_type",
    "name",
    "modality_group",
    "dicom_modalities",
    "level_applies_per",
    "quantities",
    "aggregation",
    "description",
    "paediatric_bands",
)
_CATALOGUE_REQUIRED = CATALOGUE_COLUMNS[:6]
PaediatricBands = Literal["", "weight", "age"]
_PAEDIATRIC_BANDS = ("", "weight", "age")

#: Raw header fields of the events table that rules look at.
EVENT_FIELDS = (
    "modality",
    "room",
    "body_part",
    "view_position",
    "study_description",
    "series_description",
    "protocol_name",
    "mammography_acquisition",
    "mammography_intent",
)
#: Fields a rule may look at that an events table may lack (then they count as not recorded):
#: ``mammography_acquisition`` is ``2d`` or ``tomosynthesis`` as ingest read it (X-Ray 3D
#: Acquisition Sequence, SOP Class and Image Type of an image; the event type of a dose report);
#: ``mammography_intent`` is ``screening`` or ``diagnostic`` as ingest read it (a CID 4015 view
#: modifier of a workup view, a performed or requested procedure code's meaning, the dose
#: report's Has Intent).
OPTIONAL_EVENT_FIELDS = ("mammography_acquisition", "mammography_intent")
_DESCRIPTION_FIELDS = ("study_description", "series_description", "protocol_name")
RULE_FIELDS = (*EVENT_FIELDS, "any_description")
RULE_COLUMNS = ("priority", "exam_type", "clinical_indication", *RULE_FIELDS, "note")

_IDENTIFIER = re.compile(r"^[a-z0-9][a-z0-9_]*$")
_DICOM_MODALITY = re.compile(r"^[A-Z0-9]{2,16}$")


# --------------------------------------------------------------------------------------- catalogue
@dataclass(frozen=True, slots=True)
class ExamType:
    """One standard exam type of the catalogue (see the module docstring for the fields)."""

    exam_type: str
    name: str
    modality_group: str
    dicom_modalities: tuple[str, ...]
    level_applies_per: LevelAppliesPer
    quantities: tuple[str, ...]
    aggregation: tuple[tuple[str, Aggregation], ...] = ()
    description: str = ""
    paediatric_bands: PaediatricBands = ""

    def aggregation_for(self, quantity: str) -> Aggregation:
        """The rule that turns a study's events into one value of ``quantity``."""
        return dict(self.aggregation).get(quantity, DEFAULT_AGGREGATION[quantity])


@dataclass(frozen=True, slots=True)
class ExamCatalogue:
    """The catalogue of exam types, in file order, with the file's comment lines."""

    types: tuple[ExamType, ...]
    comments: tuple[str, ...] = ()
    _index: Mapping[str, ExamType] = field(init=False, repr=False, compare=False)

    def __post_init__(self) -> None:
        index = {t.exam_type: t for t in self.types}
        if len(index) != len(self.types):
            raise ReviewInputError("the exam-type catalogue lists an exam type twice")
        object.__setattr__(self, "_index", MappingProxyType(index))

    def __contains__(self, exam_type: object) -> bool:
        return exam_type in self._index

    def __iter__(self) -> Iterator[ExamType]:
        return iter(self.types)

    def __len__(self) -> int:
        return len(self.types)

    def get(self, exam_type: str) -> ExamType | None:
        """The exam type named ``exam_type``, or ``None``."""
        return self._index.get(exam_type)

    def to_frame(self) -> pd.DataFrame:
        """One row per exam type; list fields joined with spaces, as in the CSV file."""
        return pd.DataFrame([_catalogue_row(t) for t in self.types], columns=CATALOGUE_COLUMNS)

    def fingerprint(self) -> str:
        """SHA-256 of the catalogue's CSV form (without comments): identifies it in a stored run.

        A catalogue that bands no exam type is hashed without the ``paediatric_bands`` column, so
        it keeps the fingerprint it had before the column existed."""
        columns: tuple[str, ...] = CATALOGUE_COLUMNS
        if not any(t.paediatric_bands for t in self.types):
            columns = tuple(c for c in CATALOGUE_COLUMNS if c != "paediatric_bands")
        text = write_table(None, columns=columns, rows=map(_catalogue_row, self.types))
        return hashlib.sha256(cast(str, text).encode("utf-8")).hexdigest()


def _catalogue_row(t: ExamType) -> dict[str, str]:
    return {
        "exam_type": t.exam_type,
        "name": t.name,
        "modality_group": t.modality_group,
        "dicom_modalities": " ".join(t.dicom_modalities),
        "level_applies_per": t.level_applies_per,
        "quantities": " ".join(t.quantities),
        "aggregation": " ".join(f"{q}={r}" for q, r in t.aggregation),
        "description": t.description,
        "paediatric_bands": t.paediatric_bands,
    }


def read_catalogue_csv(source: CsvSource) -> ExamCatalogue:
    """Read an exam-type catalogue CSV file (layout in the module docstring).

    Raises
    ------
    CsvFormatError
        Every problem of the file, each with its line number.
    """
    table = read_table(source, required=_CATALOGUE_REQUIRED, optional=CATALOGUE_COLUMNS)
    problems: list[tuple[int | None, str]] = []
    types: list[ExamType] = []
    seen: dict[str, int] = {}
    for line, row in table.rows:
        exam_type, row_problems = _catalogue_row_type(row, line=line, seen=seen)
        problems += [(line, problem) for problem in row_problems]
        if exam_type is not None:
            types.append(exam_type)
    if problems:
        raise CsvFormatError(table.source, problems)
    return ExamCatalogue(types=tuple(types), comments=table.comments)


def _catalogue_row_type(
    row: Mapping[str, str], *, line: int, seen: dict[str, int]
) -> tuple[ExamType | None, list[str]]:
    """The exam type of one catalogue row on ``line``, or ``None`` and the row's problems in the
    order of its columns; ``seen`` (exam type -> its line) notes a new exam type."""
    problems = _identity_problems(row, line=line, seen=seen)
    modalities = tuple(row["dicom_modalities"].upper().split())
    if not modalities or not all(_DICOM_MODALITY.match(m) for m in modalities):
        problems.append(
            f"dicom_modalities {row['dicom_modalities']!r} must be DICOM modality codes "
            "separated by spaces"
        )
    per = row["level_applies_per"]
    if per not in ("projection", "examination"):
        problems.append(f"level_applies_per must be 'projection' or 'examination', got {per!r}")
    quantities = tuple(quantity_name(q) for q in row["quantities"].split())
    bad = [q for q in quantities if q not in QUANTITIES]
    if not quantities or bad:
        problems.append(
            f"quantities {row['quantities']!r}: each must be one of {', '.join(QUANTITIES)}"
        )
    aggregation = _row_aggregation(row["aggregation"], quantities, problems)
    if aggregation and per == "projection":
        problems.append("aggregation applies only to examination-level exam types")
    bands = row["paediatric_bands"]
    if bands not in _PAEDIATRIC_BANDS:
        problems.append(f"paediatric_bands must be 'weight', 'age' or empty, got {bands!r}")
    if problems:
        return None, problems
    exam_type = ExamType(
        exam_type=row["exam_type"],
        name=row["name"],
        modality_group=row["modality_group"],
        dicom_modalities=modalities,
        level_applies_per=cast(LevelAppliesPer, per),
        quantities=quantities,
        aggregation=aggregation,
        description=row["description"],
        paediatric_bands=cast(PaediatricBands, bands),
    )
    return exam_type, []


def _identity_problems(row: Mapping[str, str], *, line: int, seen: dict[str, int]) -> list[str]:
    """Problems of a catalogue row's code (lower-case, not defined on an earlier line), name
    (not empty) and modality group (one of :data:`MODALITY_GROUPS`)."""
    problems = []
    exam_type = row["exam_type"]
    if not _IDENTIFIER.match(exam_type):
        problems.append(f"exam_type {exam_type!r} must be lower-case [a-z0-9_]")
    elif exam_type in seen:
        problems.append(f"exam_type {exam_type!r} already defined on line {seen[exam_type]}")
    else:
        seen[exam_type] = line
    if not row["name"]:
        problems.append("name is empty")
    if row["modality_group"] not in MODALITY_GROUPS:
        problems.append(
            f"modality_group {row['modality_group']!r} is not one of {', '.join(MODALITY_GROUPS)}"
        )
    return problems


def _row_aggregation(
    text: str, quantities: tuple[str, ...], problems: list[str]
) -> tuple[tuple[str, Aggregation], ...]:
    """The ``aggregation`` column's ``quantity=rule`` tokens, each naming one of the row's
    ``quantities`` and a rule of :data:`AGGREGATIONS`; a token that does not goes to
    ``problems``."""
    aggregation: list[tuple[str, Aggregation]] = []
    for token in text.split():
        quantity, _, rule = token.partition("=")
        quantity = quantity_name(quantity)
        if quantity not in quantities or rule not in AGGREGATIONS:
            problems.append(
                f"aggregation {token!r} must be quantity=rule with one of this row's "
                f"quantities and a rule of {', '.join(AGGREGATIONS)}"
            )
        else:
            aggregation.append((quantity, cast(Aggregation, rule)))
    return tuple(aggregation)


def write_catalogue_csv(
    catalogue: ExamCatalogue, destination: CsvSource | None = None
) -> str | None:
    """Write ``catalogue`` as CSV (with its comments); returns the text without a destination."""
    return write_table(
        cast("str | None", destination),
        columns=CATALOGUE_COLUMNS,
        rows=map(_catalogue_row, catalogue.types),
        comments=catalogue.comments,
    )


# ------------------------------------------------------------------------------------------- rules
#: characters of a value that a pattern looks at; DICOM's LO values (descriptions, protocol
#: names) hold at most 64 (PS3.5 6.2), so a longer text is a malformed or hostile header
MAX_MATCHED_CHARS = 1024


class RulePattern:
    """One compiled pattern cell: :meth:`search` runs in time linear in the text.

    The regular expression runs on RE2 (google-re2: an automaton, no backtracking, so a text
    such as ``"chest " * 8000`` costs microseconds, not a minute of CPU as with a backtracking
    engine), and only the first :data:`MAX_MATCHED_CHARS` characters of a value are looked at.
    """

    __slots__ = ("_regex", "pattern")

    def __init__(self, pattern: str, regex: Any) -> None:
        self.pattern = pattern
        self._regex = regex

    def search(self, text: str) -> Any:
        """A match object where the pattern matches ``text`` (its first characters), else None."""
        return self._regex.search(text[:MAX_MATCHED_CHARS])


def _glob_to_regex(glob: str) -> str:
    """Python :mod:`fnmatch` glob syntax as an RE2 expression matching the whole value."""
    out: list[str] = []
    i, n = 0, len(glob)
    while i < n:
        c = glob[i]
        i += 1
        if c == "*":
            out.append(".*")
        elif c == "?":
            out.append(".")
        elif c == "[":
            j = i + (1 if i < n and glob[i] == "!" else 0)
            j += 1 if j < n and glob[j] == "]" else 0
            while j < n and glob[j] != "]":
                j += 1
            if j >= n:
                out.append("\\[")
                continue
            body = glob[i:j].replace("\\", "\\\\")
            i = j + 1
            if body.startswith("!"):
                body = "^" + body[1:]
            elif body.startswith("^"):
                body = "\\" + body
            out.append(f"[{body}]")
        else:
            out.append(re.escape(c))
    return "".join(out)


def compile_pattern(pattern: str) -> RulePattern:
    """Compile one pattern cell (syntax in the module docstring), case-insensitive, on RE2.

    Globs are anchored at both ends, ``re:`` patterns are searched anywhere. RE2 accepts the
    usual syntax but no back-references or look-arounds (they are what makes matching slow).

    Raises
    ------
    re.error
        An invalid ``re:`` pattern, or one RE2 cannot run (the CSV readers turn it into a
        :class:`CsvFormatError`).

    Examples
    --------
    >>> bool(compile_pattern("CR|DX").search("dx"))
    True
    >>> bool(compile_pattern("re:\\\\bchest\\\\b").search("XR CHEST PA"))
    True
    """
    import re2

    if pattern.startswith("re:"):
        expression = pattern[3:]
    else:
        alternatives = [_glob_to_regex(p.strip()) for p in pattern.split("|")]
        expression = "^(?:" + "|".join(alternatives) + ")\\z"
    options = re2.Options()
    options.case_sensitive = False
    options.dot_nl = not pattern.startswith("re:")  # a glob's * spans any character
    options.log_errors = False
    try:
        return RulePattern(pattern, re2.compile(expression, options))
    except re2.error as exc:
        message = exc.args[0] if exc.args else str(exc)
        if isinstance(message, bytes):
            message = message.decode("utf-8", "replace")
        raise re.error(str(message)) from None


@dataclass(frozen=True, slots=True)
class MappingRule:
    """One mapping rule: ``patterns`` holds the non-empty ``(field, pattern)`` cells."""

    priority: int
    exam_type: str
    patterns: tuple[tuple[str, str], ...]
    note: str = ""
    line: int | None = None
    clinical_indication: str = ""

    def __post_init__(self) -> None:
        object.__setattr__(self, "patterns", tuple((str(f), str(p)) for f, p in self.patterns))
        if self.clinical_indication and not _IDENTIFIER.match(self.clinical_indication):
            raise ReviewInputError(
                f"mapping rule {self.priority}: clinical_indication {self.clinical_indication!r} "
                f"must be lower-case [a-z0-9_]"
            )
        for field_name, pattern in self.patterns:
            if field_name not in RULE_FIELDS:
                raise ReviewInputError(
                    f"mapping rule {self.priority}: unknown field {field_name!r}; the fields are "
                    f"{', '.join(RULE_FIELDS)}"
                )
            try:
                compile_pattern(pattern)
            except re.error as exc:
                raise ReviewInputError(
                    f"mapping rule {self.priority}: invalid regular expression {pattern!r} "
                    f"for {field_name}: {exc}"
                ) from exc

    def to_row(self) -> dict[str, object]:
        """The rule as a CSV row."""
        row: dict[str, object] = {
            "priority": self.priority,
            "exam_type": self.exam_type,
            "clinical_indication": self.clinical_indication,
        }
        row.update(dict(self.patterns))
        row["note"] = self.note
        return row


@dataclass(frozen=True, slots=True)
class MappingRules:
    """An ordered rule set (ascending priority), with the file's comment lines and name."""

    rules: tuple[MappingRule, ...]
    comments: tuple[str, ...] = ()
    source: str = "<rules>"

    def __post_init__(self) -> None:
        ordered = tuple(sorted(self.rules, key=lambda r: r.priority))
        priorities = [r.priority for r in ordered]
        if len(set(priorities)) != len(priorities):
            raise ReviewInputError("two mapping rules share a priority; priorities must be unique")
        object.__setattr__(self, "rules", ordered)

    def validate(self, catalogue: ExamCatalogue) -> None:
        """Check that every rule names an exam type of ``catalogue``.

        Raises
        ------
        CsvFormatError
            One problem per rule naming an unknown exam type, with the rule's line.
        """
        problems: list[tuple[int | None, str]] = [
            (r.line, f"exam_type {r.exam_type!r} (priority {r.priority}) is not in the catalogue")
            for r in self.rules
            if r.exam_type not in catalogue
        ]
        if problems:
            raise CsvFormatError(self.source, problems)


def read_rules_csv(source: CsvSource, catalogue: ExamCatalogue | None = None) -> MappingRules:
    """Read a mapping-rule CSV file; with ``catalogue``, also check every rule's exam type.

    Raises
    ------
    CsvFormatError
        Every problem of the file (bad priority, repeated priority, invalid pattern, unknown exam
        type), each with its line number.
    """
    table = read_table(source, required=("priority", "exam_type"), optional=RULE_COLUMNS)
    problems: list[tuple[int | None, str]] = []
    rules: list[MappingRule] = []
    seen: dict[int, int] = {}
    for line, row in table.rows:
        n_before = len(problems)
        try:
            priority = int(row["priority"])
        except ValueError:
            problems.append((line, f"priority {row['priority']!r} is not an integer"))
            priority = 0
        else:
            if priority in seen:
                problems.append(
                    (line, f"priority {priority} already used on line {seen[priority]}")
                )
            seen.setdefault(priority, line)
        exam_type = row["exam_type"]
        if not exam_type:
            problems.append((line, "exam_type is empty"))
        elif catalogue is not None and exam_type not in catalogue:
            problems.append((line, f"exam_type {exam_type!r} is not in the catalogue"))
        indication = row["clinical_indication"]
        if indication and not _IDENTIFIER.match(indication):
            problems.append(
                (line, f"clinical_indication {indication!r} must be lower-case [a-z0-9_]")
            )
        patterns = tuple((f, row[f]) for f in RULE_FIELDS if row[f])
        for f, pattern in patterns:
            try:
                compile_pattern(pattern)
            except re.error as exc:
                problems.append((line, f"{f}: invalid regular expression {pattern!r}: {exc}"))
        if not patterns:
            problems.append((line, "the rule has no pattern and would match every event"))
        if len(problems) == n_before:
            rules.append(MappingRule(priority, exam_type, patterns, row["note"], line, indication))
    if problems:
        raise CsvFormatError(table.source, problems)
    return MappingRules(rules=tuple(rules), comments=table.comments, source=table.source)


def write_rules_csv(rules: MappingRules, destination: CsvSource | None = None) -> str | None:
    """Write ``rules`` as CSV (with its comments); returns the text if ``destination`` is None."""
    return write_table(
        cast("str | None", destination),
        columns=RULE_COLUMNS,
        rows=(r.to_row() for r in rules.rules),
        comments=rules.comments,
    )


def _combination_codes(frame: pd.DataFrame) -> tuple[np.ndarray, np.ndarray]:
    """Codes of the distinct rows of ``frame`` and the position of each one's first occurrence."""
    key = np.zeros(len(frame), dtype=np.int64)
    for column in frame.columns:
        codes, uniques = pd.factorize(frame[column], use_na_sentinel=True)
        key = key * (len(uniques) + 1) + (codes.astype(np.int64) + 1)
        key, _ = pd.factorize(key)
        key = key.astype(np.int64)
    _, first = np.unique(key, return_index=True)
    return key, first


def _match_rule_index(events: pd.DataFrame, rules: MappingRules) -> np.ndarray:
    """Index into ``rules.rules`` of the first matching rule per event, -1 where none matches."""
    missing = [
        c for c in EVENT_FIELDS if c not in events.columns and c not in OPTIONAL_EVENT_FIELDS
    ]
    if missing:
        raise ReviewInputError(f"the events table lacks the column(s) {', '.join(missing)}")
    if len(events) == 0:
        return np.zeros(0, dtype=np.int64)
    raw = events.loc[:, [c for c in EVENT_FIELDS if c in events.columns]]
    for c in EVENT_FIELDS:  # an optional field the table lacks: not recorded
        if c not in raw.columns:
            raw = raw.assign(**{c: pd.Series(None, index=raw.index, dtype=object)})
    raw = raw.loc[:, list(EVENT_FIELDS)]
    codes, first = _combination_codes(raw)
    # Per field: the distinct values among the distinct combinations, each tested once per pattern.
    distinct: dict[str, tuple[np.ndarray, list[str]]] = {}
    for c in EVENT_FIELDS:
        values = raw[c].to_numpy()[first]
        value_codes, uniques = pd.factorize(pd.Series(values, dtype=object), use_na_sentinel=True)
        distinct[c] = (value_codes, [str(u).strip() for u in uniques])
    cache: dict[tuple[str, str], np.ndarray] = {}

    def matches(field_name: str, pattern: str) -> np.ndarray:
        if (field_name, pattern) not in cache:
            if field_name == "any_description":
                hit = np.zeros(len(first), dtype=bool)
                for f in _DESCRIPTION_FIELDS:
                    hit |= matches(f, pattern)
            else:
                value_codes, uniques = distinct[field_name]
                regex = compile_pattern(pattern)
                # a trailing False for the missing-value code -1: a pattern never matches "missing"
                found = np.array([regex.search(u) is not None for u in uniques] + [False])
                hit = found[value_codes]
            cache[(field_name, pattern)] = hit
        return cache[(field_name, pattern)]

    chosen = np.full(len(first), -1, dtype=np.int64)
    open_ = np.ones(len(first), dtype=bool)
    for index, rule in enumerate(rules.rules):
        hit = open_.copy()
        for field_name, pattern in rule.patterns:
            hit &= matches(field_name, pattern)
        chosen[hit] = index
        open_ &= ~hit
        if not open_.any():
            break
    return chosen[codes]


def match_rules(events: pd.DataFrame, rules: MappingRules) -> pd.Series:
    """The priority of the first rule matching each event (``<NA>`` when none matches).

    Vectorised: the rules are evaluated once per distinct combination of the raw fields, not per
    row, so a million events with a few thousand distinct header combinations map in well under a
    second.

    Raises
    ------
    ReviewInputError
        ``events`` lacks one of :data:`EVENT_FIELDS`.
    """
    index = _match_rule_index(events, rules)
    priorities = np.array([r.priority for r in rules.rules] + [-1], dtype=np.int64)[index]
    result = pd.array(priorities, dtype="Int64")
    result[index == -1] = pd.NA
    return pd.Series(result, index=events.index, name="rule_priority")


def map_events(events: pd.DataFrame, rules: MappingRules) -> pd.Series:
    """Map each event to an exam type by the first matching rule; ``None`` where none matches.

    Parameters
    ----------
    events : DataFrame
        Must hold the raw fields :data:`EVENT_FIELDS` (missing values as ``None``/NaN).
    rules : MappingRules
        The ordered rules.

    Returns
    -------
    Series of object
        Exam type identifiers, aligned with ``events.index``, named ``exam_type``.

    Raises
    ------
    ReviewInputError
        ``events`` lacks one of :data:`EVENT_FIELDS`.
    """
    return map_events_with_indication(events, rules)["exam_type"]


def map_events_with_indication(events: pd.DataFrame, rules: MappingRules) -> pd.DataFrame:
    """Exam type and clinical indication of each event, both from its first matching rule.

    Returns
    -------
    DataFrame
        Columns ``exam_type`` and ``clinical_indication`` (``None`` where no rule matches or the
        matching rule sets no indication), aligned with ``events.index``.

    Raises
    ------
    ReviewInputError
        ``events`` lacks one of :data:`EVENT_FIELDS`.
    """
    index = _match_rule_index(events, rules)
    # index -1 (no rule matched) picks the trailing None
    names = np.array([r.exam_type for r in rules.rules] + [None], dtype=object)
    indications = np.array([r.clinical_indication or None for r in rules.rules] + [None], object)
    return pd.DataFrame(
        {"exam_type": names[index], "clinical_indication": indications[index]},
        index=events.index,
        dtype=object,
    )


def unmapped_summary(events: pd.DataFrame, exam_types: pd.Series | None = None) -> pd.DataFrame:
    """The distinct raw-value combinations of the events that map to no exam type.

    Parameters
    ----------
    events : DataFrame
        Events with the raw fields (those of :data:`EVENT_FIELDS` present are used) and, when
        ``exam_types`` is not given, an ``exam_type`` column. ``study_uid`` and ``event_datetime``
        are used when present.
    exam_types : Series, optional
        Exam type per event (as returned by :func:`map_events`); ``None``/NaN is unmapped.

    Returns
    -------
    DataFrame
        One row per distinct combination: the raw fields, ``n_events``, and when available
        ``n_studies``, ``first_seen``, ``last_seen``; most frequent first. Empty (with the same
        columns) when everything is mapped.
    """
    mapped = events["exam_type"] if exam_types is None else exam_types
    fields = [c for c in EVENT_FIELDS if c in events.columns]
    unmapped = events.loc[mapped.isna().to_numpy()]
    grouped = unmapped.groupby(fields, dropna=False, sort=False, observed=True)
    out = grouped.size().rename("n_events").to_frame()
    if "study_uid" in events.columns:
        out["n_studies"] = grouped["study_uid"].nunique()
    if "event_datetime" in events.columns:
        out["first_seen"] = grouped["event_datetime"].min()
        out["last_seen"] = grouped["event_datetime"].max()
    out = out.reset_index()
    for c in fields:
        out[c] = out[c].astype(object).where(out[c].notna(), None)
    return out.sort_values(
        ["n_events", *fields],
        ascending=[False] + [True] * len(fields),
        na_position="last",
        kind="mergesort",
    ).reset_index(drop=True)


# ----------------------------------------------------------------------------------- shipped data
def _data_file(name: str) -> resources.abc.Traversable:
    return resources.files("beamaudit.api").joinpath("data", name)


def load_default_catalogue() -> ExamCatalogue:
    """The shipped catalogue, ``beamaudit/api/data/exam_types.csv``."""
    with _data_file("exam_types.csv").open("rb") as handle:
        return read_catalogue_csv(handle)


def load_default_rules(catalogue: ExamCatalogue | None = None) -> MappingRules:
    """The shipped mapping rules, ``beamaudit/api/data/mapping_rules.csv``, checked against
    ``catalogue`` (default: the shipped catalogue)."""
    with _data_file("mapping_rules.csv").open("rb") as handle:
        return read_rules_csv(handle, catalogue or load_default_catalogue())
