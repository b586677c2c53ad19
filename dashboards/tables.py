"""The plain tables the dashboards take, and their validation.

Every figure and page in :mod:`beamaudit.dashboards` takes its data as a plain
table: a :class:`pandas.DataFrame`, or an iterable of mappings (one per row).
Each table has a contract here, a :class:`TableSpec`, naming each column, its
kind, its unit and what it means. :meth:`TableSpec.validate` checks a table
against it and returns a clean DataFrame, or raises
:class:`~beamaudit.dashboards.errors.TableError` naming the column and row at
fault. Extra columns are dropped; optional columns that are absent are added
as empty.

The contracts
-------------
``GROUPS``
    One row per (room, exam_type, quantity, reference level) of a review
    period, as the review core produces it. A group compared with two levels
    (local and national) has two rows.

    ========================= ======== ===========================================
    column                    unit     meaning
    ========================= ======== ===========================================
    room                      –        room (x-ray unit) name
    exam_type                 –        examination type, as the review names it
    quantity                  –        DRL quantity, a field name with its unit
                                       suffix (``dap_gy_cm2``, ``esak_mgy``,
                                       ``ctdivol_mgy``, ``dlp_mgy_cm``...)
    n                         1        examinations in the group
    n_standard                1        of which standard-size patients
    median, q1, q3, mean      quantity median, quartiles and mean of the quantity
    ci_low, ci_high           quantity confidence interval of the median (optional)
    reference_level           quantity the level compared with (empty if none)
    level_kind                –        ``local`` or ``national`` (empty if none)
    level_set                 –        name of the published or local level set
    ratio_to_level            1        median / reference_level (empty if none)
    status                    –        ``above_level``, ``possibly_above``,
                                       ``below_level``, ``insufficient_sample``,
                                       ``no_level``
    status_reason             –        the review's reason, in words (optional)
    ========================= ======== ===========================================

``FLAGS``
    One row per flag raised by the review: ``kind``, ``severity``, ``reason``,
    ``room``, ``exam_type``, ``event_id``, ``study_uid``, ``period``
    (``YYYY-MM``), ``status`` (``open``, ``acknowledged``, ``closed``), and
    optionally ``flag_id``, ``raised_at`` (UTC), ``note`` (why it was acknowledged or closed,
    and by whom) and ``changed`` (what changed since the finding's previous review).

``EVENTS``
    One row per irradiation event: ``event_id``, ``study_uid``,
    ``event_datetime`` (UTC), ``room``, ``exam_type``, ``patient_weight_kg``,
    ``standard_patient`` (bool), ``kvp_kv``, ``exposure_mas``, ``dap_gy_cm2``
    (reported), ``recon_dap_gy_cm2`` (reconstructed), ``esak_mgy``,
    ``ctdivol_mgy``, ``dlp_mgy_cm``, ``ref_point_air_kerma_mgy`` and optionally
    ``agd_mgy`` (mean glandular dose); the dose columns may be empty where a
    modality does not give them.

``ROOM_HISTORY``
    One row per (month, exam_type, quantity) of one room: ``month``
    (``YYYY-MM``), ``exam_type``, ``quantity``, ``median`` (in the quantity's
    unit), ``n``, ``change_point`` (bool: a change detected at this month),
    ``dap_ratio_median`` (median of reported / reconstructed DAP, 1),
    ``tolerance_low`` and ``tolerance_high`` (1, the accepted band for that
    ratio). The ratio and its band may be repeated on every row of a month or
    given on some rows only.

``LEVELS``
    Reference levels to draw on distributions: ``exam_type``, ``quantity``,
    ``reference_level`` (quantity's unit), ``level_kind``, ``level_set``.
    The ``GROUPS`` table satisfies it.

The drill-down of one examination is a nested record rather than a table; see
:mod:`beamaudit.dashboards.records`.
"""

from __future__ import annotations

import re
from collections.abc import Callable, Iterable, Mapping
from dataclasses import dataclass, field
from typing import Any, Literal, TypeAlias

import pandas as pd

from beamaudit.dashboards.errors import TableError
from beamaudit.dashboards.wording import quantity_unit

__all__ = [
    "EVENTS",
    "FLAGS",
    "GROUPS",
    "LEVELS",
    "PERIOD_PATTERN",
    "ROOM_HISTORY",
    "Column",
    "Rule",
    "TableLike",
    "TableSpec",
    "as_frame",
]

#: What a table argument may be: a DataFrame, or an iterable of row mappings.
TableLike: TypeAlias = "pd.DataFrame | Iterable[Mapping[str, Any]]"

Kind = Literal["str", "float", "int", "bool", "datetime", "month"]

_SHOW_AT_MOST = 3


@dataclass(frozen=True)
class Column:
    """One column of a table contract.

    Attributes
    ----------
    name : str
        Column name, with its unit suffix where it has a unit.
    kind : {"str", "float", "int", "bool", "datetime", "month"}
        What the values are. ``datetime`` values become UTC timestamps;
        ``month`` values (``"2026-03"``, a date or a timestamp) become the
        first day of their month.
    unit : str
        Unit of the values (``"1"`` for a ratio or count, ``""`` for text,
        ``"quantity"`` where the row's ``quantity`` names it).
    description : str
        What the column means.
    required : bool
        The column must be present (even if some values are empty).
    nullable : bool
        Values may be empty (``None`` / NaN).
    choices : tuple of str, optional
        The only values allowed.
    minimum : float, optional
        Smallest value allowed (numbers only).
    """

    name: str
    kind: Kind
    unit: str
    description: str
    required: bool = True
    nullable: bool = False
    choices: tuple[str, ...] | None = None
    minimum: float | None = None


@dataclass(frozen=True)
class Rule:
    """A check across the columns of a validated table.

    Attributes
    ----------
    description : str
        What must hold, in words (used in the error message).
    bad_rows : callable
        Takes the coerced DataFrame, returns a boolean Series, true where the
        rule fails (missing values should give false).
    """

    description: str
    bad_rows: Callable[[pd.DataFrame], pd.Series]


@dataclass(frozen=True)
class TableSpec:
    """A table contract: a name and its columns.

    Parameters
    ----------
    name : str
        Name used in error messages (``"groups"``).
    columns : tuple of Column
        The columns, in display order.
    rules : tuple of Rule
        Checks across columns, run after each column is coerced.
    """

    name: str
    columns: tuple[Column, ...]
    rules: tuple[Rule, ...] = ()
    _by_name: dict[str, Column] = field(init=False, repr=False, compare=False)

    def __post_init__(self) -> None:
        object.__setattr__(self, "_by_name", {c.name: c for c in self.columns})

    @property
    def names(self) -> tuple[str, ...]:
        """Column names in order."""
        return tuple(c.name for c in self.columns)

    def column(self, name: str) -> Column:
        """The column called ``name``."""
        return self._by_name[name]

    def validate(self, data: TableLike) -> pd.DataFrame:
        """Check ``data`` against this contract and return a clean copy.

        Parameters
        ----------
        data : DataFrame or iterable of mappings
            The table, one row per mapping.

        Returns
        -------
        DataFrame
            The contract's columns only, in order, values coerced to their kind,
            with a fresh ``RangeIndex``.

        Raises
        ------
        TableError
            A required column is missing, or a value is empty where it may not
            be, of the wrong kind, outside its choices or below its minimum.
        """
        frame = as_frame(data, self.name)
        if frame.empty and len(frame.columns) == 0:
            frame = pd.DataFrame(columns=list(self.names))
        missing = [c.name for c in self.columns if c.required and c.name not in frame.columns]
        if missing:
            raise TableError(
                f"{self.name} table: missing column(s) {_quoted(missing)}; "
                f"the contract is {_quoted(self.names)}"
            )
        out = pd.DataFrame(index=pd.RangeIndex(len(frame)))
        for col in self.columns:
            raw = (
                frame[col.name].reset_index(drop=True)
                if col.name in frame.columns
                else pd.Series([None] * len(frame), dtype=object)
            )
            out[col.name] = _coerce(self.name, col, raw)
        for rule in self.rules:
            bad = rule.bad_rows(out).fillna(False).astype(bool)
            if bad.any():
                rows = list(bad[bad].index[:_SHOW_AT_MOST])
                raise TableError(f"{self.name} table: {rule.description}; fails in row(s) {rows}")
        return out


def as_frame(data: TableLike, name: str) -> pd.DataFrame:
    """Turn a DataFrame or an iterable of row mappings into a DataFrame.

    Raises
    ------
    TableError
        ``data`` is neither, or a row is not a mapping.
    """
    if isinstance(data, pd.DataFrame):
        return data
    if isinstance(data, (str, bytes, Mapping)) or not isinstance(data, Iterable):
        raise TableError(
            f"{name} table: expected a DataFrame or a list of rows (mappings), "
            f"got {type(data).__name__}"
        )
    rows = list(data)
    for i, row in enumerate(rows):
        if not isinstance(row, Mapping):
            raise TableError(f"{name} table: row {i} is a {type(row).__name__}, expected a mapping")
    return pd.DataFrame.from_records(rows) if rows else pd.DataFrame()


def _quoted(names: Iterable[str]) -> str:
    return ", ".join(f"'{n}'" for n in names)


def _where(table: str, col: Column, bad: pd.Series, what: str) -> TableError:
    rows = list(bad[bad].index[:_SHOW_AT_MOST])
    more = "" if int(bad.sum()) <= _SHOW_AT_MOST else f" (and {int(bad.sum()) - len(rows)} more)"
    return TableError(
        f"{table} table, column '{col.name}': {what} in row(s) {rows}{more}; "
        f"{col.description}" + (f" [{col.unit}]" if col.unit not in ("", "1") else "")
    )


def _is_empty(raw: pd.Series) -> pd.Series:
    blank = raw.map(lambda v: isinstance(v, str) and v.strip() == "").astype(bool)
    return raw.isna() | blank


def _coerce(table: str, col: Column, raw: pd.Series) -> pd.Series:
    empty = _is_empty(raw)
    if not col.nullable and empty.any():
        raise _where(table, col, empty, "empty value")
    if col.kind == "str":
        bad = ~empty & ~raw.map(lambda v: isinstance(v, str))
        if bad.any():
            raise _where(table, col, bad, "not text")
        values = raw.astype(object).where(~empty, None)
        if col.choices is not None:
            bad = ~empty & ~values.isin(col.choices)
            if bad.any():
                shown = sorted({str(v) for v in values[bad]})[:_SHOW_AT_MOST]
                raise _where(
                    table,
                    col,
                    bad,
                    f"value(s) {_quoted(shown)} not among {_quoted(col.choices)}",
                )
        return values
    if col.kind in ("float", "int"):
        bad = ~empty & raw.map(lambda v: isinstance(v, (bool, str)))
        if bad.any():
            raise _where(table, col, bad, "not a number")
        numbers = pd.to_numeric(raw.where(~empty, None), errors="coerce").astype(float)
        bad = ~empty & numbers.isna()
        if bad.any():
            raise _where(table, col, bad, "not a number")
        if col.kind == "int":
            bad = ~empty & (numbers != numbers.round())
            if bad.any():
                raise _where(table, col, bad, "not a whole number")
        if col.minimum is not None:
            bad = ~empty & (numbers < col.minimum)
            if bad.any():
                raise _where(table, col, bad, f"value below {col.minimum:g}")
        return numbers.astype("Int64") if col.kind == "int" else numbers
    if col.kind == "bool":
        bad = ~empty & ~raw.map(lambda v: isinstance(v, bool) or type(v).__name__ == "bool")
        if bad.any():
            raise _where(table, col, bad, "not true/false")
        return raw.astype(object).where(~empty, None).map(lambda v: None if v is None else bool(v))
    return _coerce_time(table, col, raw, empty)


def _coerce_time(table: str, col: Column, raw: pd.Series, empty: pd.Series) -> pd.Series:
    def parse(v: Any) -> pd.Timestamp | None:
        if v is None or (not isinstance(v, str) and pd.isna(v)):
            return None
        if col.kind == "month" and isinstance(v, pd.Period):
            v = v.to_timestamp()
        try:
            stamp = pd.Timestamp(v)
        except (ValueError, TypeError):
            return None
        if stamp is pd.NaT:
            return None
        stamp = stamp.tz_localize("UTC") if stamp.tzinfo is None else stamp.tz_convert("UTC")
        if col.kind == "month":
            stamp = stamp.tz_localize(None).to_period("M").to_timestamp()
        return stamp

    parsed = raw.astype(object).where(~empty, None).map(parse)
    bad = ~empty & parsed.isna()
    if bad.any():
        what = "not a month (YYYY-MM)" if col.kind == "month" else "not a date and time"
        raise _where(table, col, bad, what)
    if col.kind == "month":
        return pd.to_datetime(parsed)
    return pd.to_datetime(parsed, utc=True)


_STATUSES = ("above_level", "possibly_above", "below_level", "insufficient_sample", "no_level")
#: A review period: a calendar month written ``YYYY-MM``.
PERIOD_PATTERN = re.compile(r"^\d{4}-(0[1-9]|1[0-2])$")

_OPTIONAL: dict[str, Any] = {"required": False, "nullable": True, "minimum": 0}
_QUANTITY = "DRL quantity: a field name with its unit suffix, e.g. 'dap_gy_cm2'"

_QUANTITY_HAS_UNIT = Rule(
    "'quantity' must be a field name ending in its unit, e.g. 'dap_gy_cm2', 'esak_mgy'",
    lambda t: t["quantity"].map(lambda q: quantity_unit(str(q)) == ""),
)

GROUPS = TableSpec(
    "groups",
    (
        Column("room", "str", "", "room (x-ray unit) name"),
        Column("exam_type", "str", "", "examination type"),
        Column("quantity", "str", "", _QUANTITY),
        Column("n", "int", "1", "examinations in the group", minimum=0),
        Column("n_standard", "int", "1", "standard-size patients in the group", minimum=0),
        Column("median", "float", "quantity", "median of the quantity", nullable=True, minimum=0),
        Column("q1", "float", "quantity", "first quartile", nullable=True, minimum=0),
        Column("q3", "float", "quantity", "third quartile", nullable=True, minimum=0),
        Column("mean", "float", "quantity", "mean of the quantity", nullable=True, minimum=0),
        Column("ci_low", "float", "quantity", "median's lower confidence limit", **_OPTIONAL),
        Column("ci_high", "float", "quantity", "median's upper confidence limit", **_OPTIONAL),
        Column(
            "reference_level", "float", "quantity", "level compared with", nullable=True, minimum=0
        ),
        Column(
            "level_kind",
            "str",
            "",
            "kind of reference level",
            nullable=True,
            choices=("local", "national"),
        ),
        Column("level_set", "str", "", "name of the level set", nullable=True),
        Column("ratio_to_level", "float", "1", "median / level", nullable=True, minimum=0),
        Column("status", "str", "", "review status", choices=_STATUSES),
        Column("status_reason", "str", "", "the review's reason", required=False, nullable=True),
    ),
    rules=(
        _QUANTITY_HAS_UNIT,
        Rule("n_standard must not exceed n", lambda t: t["n_standard"] > t["n"]),
        Rule("q1 <= median <= q3", lambda t: (t["q1"] > t["median"]) | (t["median"] > t["q3"])),
    ),
)

FLAGS = TableSpec(
    "flags",
    (
        Column("flag_id", "str", "", "flag identifier", required=False, nullable=True),
        Column("kind", "str", "", "what kind of finding"),
        Column("severity", "str", "", "how serious the finding is"),
        Column("reason", "str", "", "why the flag was raised"),
        Column("room", "str", "", "room name", nullable=True),
        Column("exam_type", "str", "", "examination type", nullable=True),
        Column("event_id", "str", "", "irradiation event", nullable=True),
        Column("study_uid", "str", "", "Study Instance UID", nullable=True),
        Column("period", "str", "", "review period, YYYY-MM"),
        Column("status", "str", "", "flag status", choices=("open", "acknowledged", "closed")),
        Column("raised_at", "datetime", "", "when raised (UTC)", required=False, nullable=True),
        Column(
            "note",
            "str",
            "",
            "why the finding was acknowledged or closed, and by whom",
            required=False,
            nullable=True,
        ),
        Column(
            "changed",
            "str",
            "",
            "what changed since the finding's previous review",
            required=False,
            nullable=True,
        ),
    ),
    rules=(
        Rule(
            "'period' must be a month written YYYY-MM",
            lambda t: ~t["period"].map(lambda p: bool(PERIOD_PATTERN.match(str(p)))).astype(bool),
        ),
    ),
)


def _dose(name: str, description: str) -> Column:
    return Column(name, "float", name, description, nullable=True, minimum=0)


EVENTS = TableSpec(
    "events",
    (
        Column("event_id", "str", "", "irradiation event identifier"),
        Column("study_uid", "str", "", "Study Instance UID"),
        Column("event_datetime", "datetime", "", "when the irradiation happened (UTC)"),
        Column("room", "str", "", "room name"),
        Column("exam_type", "str", "", "examination type"),
        Column("patient_weight_kg", "float", "kg", "patient weight", nullable=True, minimum=0),
        Column("standard_patient", "bool", "", "a standard-size patient (true/false)"),
        _dose("kvp_kv", "tube voltage"),
        _dose("exposure_mas", "tube current-exposure time product"),
        _dose("dap_gy_cm2", "reported air kerma-area product"),
        _dose("recon_dap_gy_cm2", "reconstructed air kerma-area product"),
        _dose("esak_mgy", "entrance surface air kerma"),
        _dose("ctdivol_mgy", "volume CT air kerma index"),
        _dose("dlp_mgy_cm", "CT air kerma-length product"),
        _dose("ref_point_air_kerma_mgy", "air kerma at the reference point"),
        Column(
            "agd_mgy",
            "float",
            "agd_mgy",
            "mean glandular dose",
            required=False,
            nullable=True,
            minimum=0,
        ),
    ),
)

ROOM_HISTORY = TableSpec(
    "room history",
    (
        Column("month", "month", "", "calendar month, YYYY-MM"),
        Column("exam_type", "str", "", "examination type"),
        Column("quantity", "str", "", _QUANTITY),
        Column("median", "float", "quantity", "monthly median", nullable=True, minimum=0),
        Column("n", "int", "1", "examinations in the month", minimum=0),
        Column("change_point", "bool", "", "a change detected at this month"),
        Column(
            "dap_ratio_median",
            "float",
            "1",
            "median of reported / reconstructed DAP",
            nullable=True,
            minimum=0,
        ),
        Column("tolerance_low", "float", "1", "lower edge of the accepted ratio", nullable=True),
        Column("tolerance_high", "float", "1", "upper edge of the accepted ratio", nullable=True),
    ),
    rules=(
        _QUANTITY_HAS_UNIT,
        Rule(
            "tolerance_low must not exceed tolerance_high",
            lambda t: t["tolerance_low"] > t["tolerance_high"],
        ),
    ),
)

LEVELS = TableSpec(
    "levels",
    (
        Column("exam_type", "str", "", "examination type"),
        Column("quantity", "str", "", _QUANTITY),
        Column("reference_level", "float", "quantity", "reference level", nullable=True, minimum=0),
        Column(
            "level_kind",
            "str",
            "",
            "kind of reference level",
            nullable=True,
            choices=("local", "national"),
        ),
        Column("level_set", "str", "", "name of the level set", nullable=True),
    ),
    rules=(_QUANTITY_HAS_UNIT,),
)
