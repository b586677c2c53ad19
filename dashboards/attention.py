"""What needs attention in a review period: the overview's first lines, written and ranked.

The overview opens with the period's open findings, one line each with its numbers and a link,
most important first, so that a committee can name the month's main findings from the first
screen. The lines are an ``ATTENTION`` table (contract in :mod:`beamaudit.dashboards.tables`);
this module writes them from the ``FLAGS`` table (:func:`attention_from_flags`) and ranks them
(:func:`rank_attention`). Both are pure functions of plain tables.

The ranking
-----------
1. **Severity**, as the review core set it: ``action`` before ``warning`` before ``info``.
2. **Tier of the kind** (:data:`KIND_TIERS`): a patient to follow up first (a substantial
   radiation dose level exceeded); then findings about every patient of a room or an
   examination (a median above a level, a DAP meter reading off the reconstruction, a step in a
   monthly median); then single examinations above the investigation level; then the
   completeness of the data (exams without dose, deviation index, unmapped protocols, unknown
   exam types, rejected files); then low-dose reviews.
3. **Size**, largest first: how far from expected, as a factor (a median 1.3 times its level,
   a DAP reading 1.36 times the reconstruction, a dose that doubled, one exam at 8.5 times the
   level; a factor below 1 counts as its inverse), or a count for findings counted in exams or
   files.

Findings of one kind about one place are one line: the two quantities of one step (DAP and ESAK
of the same examination), the local and national level of one group, the exams without dose of
one room.
"""

from __future__ import annotations

import re
from collections.abc import Callable, Mapping
from typing import Any

import pandas as pd

from beamaudit.dashboards import _web
from beamaudit.dashboards.rounding import format_level, format_number, format_quantity, is_number
from beamaudit.dashboards.tables import ATTENTION, EXAM_TYPES, FLAGS, INGEST_ERRORS, TableLike
from beamaudit.dashboards.wording import exam_name, quantity_short, short_group_label, words_for

__all__ = ["KIND_TIERS", "SEVERITY_RANK", "attention_from_flags", "exam_names", "rank_attention"]

#: Rank of each kind of finding within a severity, 0 first (see the module docstring).
KIND_TIERS: dict[str, int] = {
    "srdl_exceeded": 0,
    "group_above_level": 1,
    "dap_ratio_out_of_tolerance": 1,
    "mgd_ratio_off_baseline": 1,
    "changepoint": 1,
    "exam_above_investigation_level": 2,
    "no_dose_data": 3,
    "deviation_index_out_of_range": 3,
    "unmapped_events": 3,
    "unknown_exam_type": 3,
    "rejected_files": 3,
    "low_dose_review": 4,
}
_OTHER_TIER = 3

#: The reported ÷ reconstructed ratio series of the monthly tables, in words.
_RATIO_WORDS = {
    "dap_ratio": "reported ÷ reconstructed DAP",
    "mgd_ratio": "the unit's AGD ÷ reconstructed D_G",
}

#: Severities, most serious first.
SEVERITY_RANK: dict[str, int] = {"action": 0, "warning": 1, "info": 2}

Row = Mapping[str, Any]
Item = dict[str, Any]


def rank_attention(items: TableLike) -> pd.DataFrame:
    """The ``ATTENTION`` table in the order the overview lists it: severity, tier, size.

    Parameters
    ----------
    items : table
        An ``ATTENTION`` table.

    Returns
    -------
    DataFrame
        The validated table, sorted (ties by headline), with ``tier`` filled in.
    """
    table = ATTENTION.validate(items)
    tier = table["tier"].astype("Float64").fillna(table["kind"].map(KIND_TIERS).astype("Float64"))
    table["tier"] = tier.fillna(_OTHER_TIER).astype(int)
    table["_severity"] = table["severity"].map(SEVERITY_RANK)
    return (
        table.sort_values(
            ["_severity", "tier", "size", "headline"],
            ascending=[True, True, False, True],
            kind="mergesort",
        )
        .drop(columns="_severity")
        .reset_index(drop=True)
    )


def exam_names(exam_types: TableLike | None) -> dict[str, str]:
    """Code -> catalogue name, from an ``EXAM_TYPES`` table (empty without one)."""
    if exam_types is None:
        return {}
    table = EXAM_TYPES.validate(exam_types)
    return dict(zip(table["exam_type"], table["name"], strict=True))


def attention_from_flags(
    flags: TableLike,
    *,
    ingest_errors: TableLike | None = None,
    exam_types: TableLike | None = None,
    period: str | None = None,
) -> pd.DataFrame:
    """The ``ATTENTION`` lines of the open flags (and the rejected files), ranked.

    Parameters
    ----------
    flags : table
        A ``FLAGS`` table: the flags of the period's record. Only ``open`` ones make lines
        (acknowledged findings are in hand). Lines quote the flags' ``numbers`` and name their
        ``quantity``; a flag without them is summed up by the first sentence of its reason.
    ingest_errors : table, optional
        An ``INGEST_ERRORS`` table: the files to report as rejected (one line counts them).
    exam_types : table, optional
        An ``EXAM_TYPES`` table, for the examinations' names.
    period : str, optional
        The review period (``YYYY-MM``), for the links.

    Returns
    -------
    DataFrame
        The ``ATTENTION`` table, ranked by :func:`rank_attention`.
    """
    table = FLAGS.validate(flags)
    table = table[table["status"] == "open"]
    names = exam_names(exam_types)
    items: list[Item] = []
    for kind, part in table.groupby("kind", sort=True):
        rows: list[Row] = [dict(r) for _, r in part.iterrows()]
        write = _WRITERS.get(str(kind), _by_reason)
        items += write(rows, names, period)
    if ingest_errors is not None:
        items += _rejected_files(INGEST_ERRORS.validate(ingest_errors))
    return rank_attention(pd.DataFrame(items, columns=list(ATTENTION.names)))


# --------------------------------------------------------------------------------- the lines


def _numbers(row: Row) -> Mapping[str, Any]:
    value = row.get("numbers")
    return value if isinstance(value, Mapping) else {}


def _number(numbers: Mapping[str, Any], key: str) -> float | None:
    value = numbers.get(key)
    return float(value) if value is not None and is_number(value) else None


def _factor(after: float | None, before: float | None) -> float:
    """How many times ``after`` is ``before``, a factor below 1 counted as its inverse."""
    if after is None or before is None or after <= 0 or before <= 0:
        return 1.0
    ratio = after / before
    return ratio if ratio >= 1 else 1 / ratio


def _group_label(row: Row) -> str:
    """The patient group in words, or '' for the main (adult) group."""
    return short_group_label(row.get("patient_group_label"))


def _place(row: Row, names: Mapping[str, str]) -> str:
    exam, room = row.get("exam_type"), row.get("room")
    group = _group_label(row)
    what = exam_name(exam, names) if exam else ""
    if what and group:
        what = f"{what}, {group},"
    if what and room:
        return f"{what} in {room}"
    return what.rstrip(",") if what else (room or "The site")


def _item(row: Row, headline: str, href: str, size: float, *, count: int = 1,
          severity: str | None = None, kind: str | None = None) -> Item:  # fmt: skip
    return {
        "kind": kind or row["kind"],
        "severity": severity or _severity(row.get("severity")),
        "headline": headline,
        "href": href,
        "size": max(float(size), 0.0),
        "count": count,
        "tier": None,
        "room": row.get("room"),
        "exam_type": row.get("exam_type"),
        "detail": row.get("reason"),
        "patient_group_label": _group_label(row) or None,
    }


def _severity(value: Any) -> str:
    return value if value in SEVERITY_RANK else "warning"


def _most_severe(rows: list[Row]) -> str:
    return min((_severity(r.get("severity")) for r in rows), key=SEVERITY_RANK.__getitem__)


def _flags_link(row: Row, period: str | None) -> str:
    return _web.flags_href(kind=row["kind"], room=row.get("room"), period=period, status="open")


def _first_sentence(text: str) -> str:
    match = re.match(r"(.+?[.;:])(\s|$)", text)
    return (match.group(1) if match else text).rstrip(".;:")


def _by_reason(rows: list[Row], names: Mapping[str, str], period: str | None) -> list[Item]:
    return [_item(r, _first_sentence(str(r["reason"])), _flags_link(r, period), 1.0) for r in rows]


def _groups(rows: list[Row], keys: tuple[str, ...]) -> list[list[Row]]:
    out: dict[tuple[Any, ...], list[Row]] = {}
    for row in rows:
        out.setdefault(tuple(row.get(k) for k in keys), []).append(row)
    return list(out.values())


def _group_above_level(rows: list[Row], names: Mapping[str, str], period: str | None) -> list[Item]:
    items = []
    for group in _groups(rows, ("room", "exam_type", "patient_group", "quantity")):
        top = max(group, key=lambda r: _number(_numbers(r), "ratio_to_level") or 0.0)
        n = _numbers(top)
        ratio, median, level = (
            _number(n, k) for k in ("ratio_to_level", "median", "reference_level")
        )
        quantity = top.get("quantity") or ""
        if ratio is None or median is None or level is None or not quantity:
            items += _by_reason([top], names, period)
            continue
        severity = _most_severe(group)
        verb = "is" if severity == "action" else "may be"
        headline = (
            f"{_place(top, names)}: median {quantity_short(quantity, with_unit=False)} "
            f"{format_quantity(median, quantity)} {verb} {format_number(ratio)} × the level "
            f"({format_level(level, quantity)})"
        )
        href = _web.distributions_href(
            exam_type=top.get("exam_type"), quantity=quantity, period=period
        )
        items.append(_item(top, headline, href, ratio, count=len(group), severity=severity))
    return items


def _exam_excess(row: Row, names: Mapping[str, str]) -> tuple[float, str, str] | None:
    """(size, "DAP 187 Gy·cm²", "the level (22 Gy·cm²)") of one exam's flag, if its numbers say."""
    n, quantity = _numbers(row), row.get("quantity") or ""
    value = _number(n, "value")
    if value is None or not quantity:
        return None
    level, pct = _number(n, "reference_level"), _number(n, "percentile_value")
    if level:
        size, against = value / level, f"the level ({format_level(level, quantity)})"
    elif pct:
        size = value / pct
        against = f"the group's {format_number(_number(n, 'percentile'))}th percentile"
    else:
        return None
    what = f"{quantity_short(quantity, with_unit=False)} {format_quantity(value, quantity)}"
    return size, what, against


def _exam_above(rows: list[Row], names: Mapping[str, str], period: str | None) -> list[Item]:
    """One line per examination (its quantities together), one per group's overflow count."""
    items = []
    singles = []
    for row in rows:
        n = _numbers(row)
        if _number(n, "n_exceeding") is None:
            singles.append(row)
            continue
        count = int(_number(n, "n_exceeding") or 0)
        headline = (
            f"{_place(row, names)}: {count} examinations above the investigation level "
            f"(the highest {int(_number(n, 'n_listed') or 0)} are listed one by one)"
        )
        items.append(_item(row, headline, _flags_link(row, period), 1.0, count=count))
    for group in _groups(singles, ("room", "exam_type", "study_uid", "event_id")):
        excesses = [(e, r) for r in group if (e := _exam_excess(r, names)) is not None]
        if not excesses:
            items += _by_reason(group, names, period)
            continue
        excesses.sort(key=lambda pair: -pair[0][0])
        (size, what, against), top = excesses[0]
        others = "; ".join(f"{w}, {format_number(s, digits=2)} ×" for (s, w, _), _ in excesses[1:])
        kind = "exposure" if top.get("event_id") else "examination"
        headline = (
            f"{_place(top, names)}: one {kind} at {what}, {format_number(size, digits=2)} × "
            f"{against}" + (f" ({others})" if others else "")
        )
        href = (
            _web.exam_href(top["study_uid"]) if top.get("study_uid") else _flags_link(top, period)
        )
        items.append(_item(top, headline, href, size, count=len(group)))
    return items


def _srdl(rows: list[Row], names: Mapping[str, str], period: str | None) -> list[Item]:
    items = []
    for row in rows:
        n = _numbers(row)
        parts, size = [], 1.0
        for key, value in n.items():
            limit = _number(n, f"{key}_srdl")
            if limit and is_number(value):
                size = max(size, float(value) / limit)
                parts.append(
                    f"{quantity_short(key, with_unit=False)} {format_quantity(value, key)}"
                )
        if not parts:
            items += _by_reason([row], names, period)
            continue
        headline = (
            f"{_place(row, names)}: one examination above the substantial radiation dose level "
            f"({', '.join(parts)}): follow the patient up"
        )
        href = (
            _web.exam_href(row["study_uid"]) if row.get("study_uid") else _flags_link(row, period)
        )
        items.append(_item(row, headline, href, size))
    return items


def _ratio(
    figure: str, views: str, check: str, anchor: str, baseline: bool
) -> Callable[[list[Row], Mapping[str, str], str | None], list[Item]]:
    """Lines of a room's reported ÷ reconstructed ratio flags, one per room (its worst month):
    ``figure`` names the two figures, ``views`` what the median is over, ``check`` what to
    check, ``anchor`` the room page's figure; the reference is 1, or with ``baseline`` the
    room's usual ratio (the flag's ``baseline_ratio``)."""

    def reference(row: Row) -> float | None:
        return _number(_numbers(row), "baseline_ratio") if baseline else 1.0

    def size(row: Row) -> float:
        return _factor(_number(_numbers(row), "median_ratio"), reference(row))

    def write(rows: list[Row], names: Mapping[str, str], period: str | None) -> list[Item]:
        items = []
        for group in _groups(rows, ("room",)):
            top = max(group, key=size)
            n = _numbers(top)
            ratio, tolerance, usual = (
                _number(n, "median_ratio"),
                _number(n, "tolerance"),
                reference(top),
            )
            if ratio is None or usual is None:
                items += _by_reason([top], names, period)
                continue
            band = (
                f"; accepted {format_level(usual * (1 - tolerance))}–"
                f"{format_level(usual * (1 + tolerance))}"
                if tolerance is not None
                else ""
            )
            counted = _number(n, "n")
            over = f"median of {int(counted)} {views}" if counted is not None else "median"
            were = f", usually {format_number(usual)}" if baseline else ""
            headline = (
                f"{top.get('room') or 'A room'}: {figure} {format_number(ratio)} × the "
                f"reconstruction{were} ({over}{band}): {check}"
            )
            href = (
                _web.room_href(top["room"]) + anchor
                if top.get("room")
                else _flags_link(top, period)
            )
            items.append(_item(top, headline, href, size(top), count=len(group)))
        return items

    return write


def _changepoint(rows: list[Row], names: Mapping[str, str], period: str | None) -> list[Item]:
    items = []
    rows = [{**r, "_month": _numbers(r).get("change_month")} for r in rows]
    for group in _groups(rows, ("room", "exam_type", "_month")):
        steps, size = [], 1.0
        for row in group:
            n, quantity = _numbers(row), row.get("quantity") or ""
            before, after = _number(n, "before"), _number(n, "after")
            if before is None or after is None or not quantity:
                continue
            size = max(size, _factor(after, before))
            if quantity in _RATIO_WORDS:
                what = _RATIO_WORDS[quantity]
                steps.append(f"{what} {format_number(before)} → {format_number(after)}")
            else:
                steps.append(
                    f"{quantity_short(quantity, with_unit=False)} {format_number(before)} → "
                    f"{format_quantity(after, quantity)}"
                )
        top = group[0]
        if not steps:
            items += _by_reason(group, names, period)
            continue
        when = _month_words(str(top.get("_month") or ""))
        direction = "up" if all(_step_up(r) for r in group) else (
            "down" if not any(_step_up(r) for r in group) else "changed"
        )  # fmt: skip
        headline = (
            f"{_place(top, names)}: monthly median {direction} {format_number(size, digits=2)} ×"
            f"{' from ' + when if when else ''}: {'; '.join(steps)}"
        )
        href = _web.room_href(top["room"]) if top.get("room") else _flags_link(top, period)
        items.append(
            _item(top, headline, href, size, count=len(group), severity=_most_severe(group))
        )
    return items


def _step_up(row: Row) -> bool:
    n = _numbers(row)
    before, after = _number(n, "before"), _number(n, "after")
    return before is not None and after is not None and after > before


def _month_words(month: str) -> str:
    if not re.match(r"^\d{4}-\d{2}$", month):
        return ""
    return pd.Timestamp(month + "-01").strftime("%B %Y")


def _counted(
    what: str, unit: str
) -> Callable[[list[Row], Mapping[str, str], str | None], list[Item]]:
    """Lines that count flags of one kind per room: ``"{room}: {n} {unit} {what}"``."""

    def write(rows: list[Row], names: Mapping[str, str], period: str | None) -> list[Item]:
        items = []
        for group in _groups(rows, ("room",)):
            top = group[0]
            count = len(group)
            noun = unit if count == 1 else unit + "s"
            headline = f"{top.get('room') or 'The site'}: {count} {noun} {what}"
            extreme = _extreme_di(group)
            if extreme:
                headline += f" (furthest {extreme})"
            item = _item(top, headline, _flags_link(top, period), count, count=count,
                         severity=_most_severe(group))  # fmt: skip
            item["exam_type"] = None
            items.append(item)
        return items

    return write


def _extreme_di(rows: list[Row]) -> str:
    values = [_number(_numbers(r), "deviation_index") for r in rows]
    found = [v for v in values if v is not None]
    if not found:
        return ""
    far = max(found, key=abs)
    return f"DI {far:+.1f}"


def _unmapped(rows: list[Row], names: Mapping[str, str], period: str | None) -> list[Item]:
    items = []
    for row in rows:
        n = _numbers(row)
        events, combos = _number(n, "n_events"), _number(n, "n_combinations")
        if events is None:
            items += _by_reason([row], names, period)
            continue
        combos_text = (
            f" in {int(combos)} combination{'s' if combos != 1 else ''} of header values"
            if combos is not None
            else ""
        )
        headline = (
            f"{int(events)} event{'s' if events != 1 else ''}{combos_text} map to no "
            f"examination type and are in no group"
        )
        href = _web.unmapped_href(period=period)
        items.append(_item(row, headline, href, events, count=int(events)))
    return items


def _unknown_exam_types(
    rows: list[Row], names: Mapping[str, str], period: str | None
) -> list[Item]:
    events = sum(int(_number(_numbers(r), "n_events") or 0) for r in rows)
    codes = sorted({str(r.get("exam_type")) for r in rows if r.get("exam_type")})
    if not events:
        return _by_reason(rows, names, period)
    headline = (
        f"{events} event{'s' if events != 1 else ''} carry an exam type the catalogue does not "
        f"know ({', '.join(codes)})"
    )
    return [_item(rows[0], headline, _web.flags_href(kind="unknown_exam_type", period=period),
                  events, count=events, severity=_most_severe(rows))]  # fmt: skip


def _rejected_files(errors: pd.DataFrame) -> list[Item]:
    if errors.empty:
        return []
    count = len(errors)
    codes = errors["code"].value_counts()
    parts = []
    for code, n in codes.items():
        words = words_for({}, str(code))
        if not words.split(" ")[0].isupper():
            words = words[:1].lower() + words[1:]
        parts.append(f"{words} {n}" if n > 1 else words)
    headline = f"{count} file{'s' if count != 1 else ''} rejected at ingest: {', '.join(parts)}"
    return [
        {
            "kind": "rejected_files",
            "severity": "warning",
            "headline": headline,
            "href": _web.ROUTES["ingest_errors"],
            "size": float(count),
            "count": count,
            "tier": None,
            "room": None,
            "exam_type": None,
            "detail": None,
            "patient_group_label": None,
        }
    ]


_WRITERS: dict[str, Callable[[list[Row], Mapping[str, str], str | None], list[Item]]] = {
    "group_above_level": _group_above_level,
    "exam_above_investigation_level": _exam_above,
    "srdl_exceeded": _srdl,
    "dap_ratio_out_of_tolerance": _ratio(
        "reported DAP", "exposures", "check the DAP meter", "#dap-ratio", baseline=False
    ),
    "mgd_ratio_off_baseline": _ratio(
        "the unit's AGD", "views", "check the unit's dosimetry", "#mgd-ratio", baseline=True
    ),
    "changepoint": _changepoint,
    "deviation_index_out_of_range": _counted("with a deviation index out of range", "exposure"),
    "no_dose_data": _counted("without any dose value", "examination"),
    "unmapped_events": _unmapped,
    "unknown_exam_type": _unknown_exam_types,
}
