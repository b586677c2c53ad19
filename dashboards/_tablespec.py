"""The machinery of the table contracts: columns, rules, validation.

Package-internal; :mod:`beamaudit.dashboards.tables` re-exports the public names and holds the
contracts themselves.
"""

from __future__ import annotations

from collections.abc import Callable, Iterable, Mapping
from dataclasses import dataclass, field
from typing import Any, Literal, TypeAlias

import pandas as pd

from beamaudit.dashboards.errors import TableError

__all__ = ["Column", "Rule", "TableLike", "TableSpec", "as_frame"]

#: What a table argument may be: a DataFrame, or an iterable of row mappings.
TableLike: TypeAlias = "pd.DataFrame | Iterable[Mapping[str, Any]]"

Kind = Literal["str", "float", "int", "bool", "datetime", "month", "mapping"]

_SHOW_AT_MOST = 3


@dataclass(frozen=True)
class Column:
    """One column of a table contract.

    Attributes
    ----------
    name : str
        Column name, with its unit suffix where it has a unit.
    kind : {"str", "float", "int", "bool", "datetime", "month", "mapping"}
        What the values are. ``datetime`` values become UTC timestamps;
        ``month`` values (``"2026-03"``, a date or a timestamp) become the
        first day of their month; ``mapping`` values are mappings of names to
        plain values (a JSON object), kept as ``dict``.
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
        bad = ~empty & ~raw.map(lambda v: isinstance(v, str)).astype(bool)  # bool when empty too
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
    if col.kind == "mapping":
        bad = ~empty & ~raw.map(lambda v: isinstance(v, Mapping))
        if bad.any():
            raise _where(table, col, bad, "not a mapping of names to values")
        return raw.astype(object).where(~empty, None).map(lambda v: None if v is None else dict(v))
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
