"""Which distribution to show, and the values it shows: one per exposure or one per examination.

A reference level applies to one exposure (a projection of radiography) or to one examination
(a fluoroscopy or CT study: its events add up). The distributions draw the values the level is
compared with: for an examination-level type, each study's events aggregated into one value
(:func:`study_values`), so a fluoroscopy study of 187 Gy·cm² shows as one point of 187, not as
thirty exposures of 6.

The distributions page shows one chart at a time; :func:`pick_distribution` chooses it (the
most urgent group's examination and quantity unless the reader chose), so that the API can read
only that examination's events.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

import pandas as pd

from beamaudit.dashboards.tables import EXAM_TYPES, LEVELS, TableLike

__all__ = [
    "DEFAULT_STUDY_RULES",
    "ExamTypes",
    "pick_distribution",
    "study_values",
]

#: How a study's events make one value when the catalogue gives no rule for a quantity: the
#: quantities that add up over irradiation events are summed, an index of one acquisition or a
#: kerma at one entrance point takes the largest event (the shipped catalogue's own defaults,
#: api/data/README.md; the API should pass the rule the review used).
DEFAULT_STUDY_RULES: dict[str, str] = {
    "dap_gy_cm2": "sum",
    "recon_dap_gy_cm2": "sum",
    "dlp_mgy_cm": "sum",
    "reference_point_air_kerma_mgy": "sum",
    "mgd_mgy": "sum",
    "ctdivol_mgy": "max",
    "esak_mgy": "max",
}


class ExamTypes:
    """The ``EXAM_TYPES`` table as the pages use it: names, and the per-study rules.

    Parameters
    ----------
    table : table, optional
        An ``EXAM_TYPES`` table; without one every code is its own name and every level is
        taken to apply per exposure.
    """

    def __init__(self, table: TableLike | None = None) -> None:
        frame = EXAM_TYPES.validate(table if table is not None else [])
        self.names: dict[str, str] = dict(zip(frame["exam_type"], frame["name"], strict=True))
        self._per: dict[str, str | None] = dict(
            zip(frame["exam_type"], frame["level_applies_per"], strict=True)
        )
        self._rules: dict[str, dict[str, str]] = {
            code: dict(pair.split("=", 1) for pair in (rules or "").split())
            for code, rules in zip(frame["exam_type"], frame["aggregation"], strict=True)
        }

    def name(self, code: str) -> str:
        """The catalogue's name of ``code`` (the code itself when it has none)."""
        return self.names.get(code) or code

    def study_rule(self, code: str, quantity: str) -> str | None:
        """How a study of ``code`` makes one value of ``quantity`` (``sum``, ``max``, ``mean``),
        or ``None`` when the type's level applies per exposure."""
        if self._per.get(code) != "examination":
            return None
        return self._rules.get(code, {}).get(quantity) or DEFAULT_STUDY_RULES.get(quantity, "sum")


def study_values(events: pd.DataFrame, quantity: str, rule: str) -> pd.DataFrame:
    """One row per study: its events' ``quantity`` aggregated by ``rule``.

    Parameters
    ----------
    events : DataFrame
        Validated ``EVENTS`` rows of one examination type.
    quantity : str
        The dose column.
    rule : {"sum", "max", "mean"}
        How the events make one value.

    Returns
    -------
    DataFrame
        The ``EVENTS`` columns, one row per ``study_uid`` that has a value: the study's first
        event's room, time, weight and size class, the aggregated ``quantity``, and
        ``n_events`` (events with a value).
    """
    rows = events[events[quantity].notna()].sort_values("event_datetime", kind="mergesort")
    if rows.empty:
        return rows.assign(n_events=pd.Series(dtype="int64"))
    grouped = rows.groupby("study_uid", sort=False)
    first = grouped.first()
    first[quantity] = grouped[quantity].agg(rule)
    first["n_events"] = grouped.size()
    return first.reset_index()


def pick_distribution(
    levels: TableLike | None,
    *,
    exam_type: str | None = None,
    quantity: str | None = None,
    available: Mapping[str, list[str]] | None = None,
) -> tuple[str, str] | None:
    """The chart to show: ``(exam_type, quantity)``.

    The reader's choice wins where it exists. Without an examination, the most urgent group's
    (``status`` rank, then ``ratio_to_level``, both optional columns of ``LEVELS``); without a
    quantity, the first the levels cover for that examination.

    Parameters
    ----------
    levels : table, optional
        A ``LEVELS`` table (the ``GROUPS`` table will do).
    exam_type, quantity : str, optional
        The reader's choice.
    available : mapping, optional
        Examination -> the quantities that have values, to choose among when ``levels`` says
        nothing of an examination.

    Returns
    -------
    tuple of str, or None
        ``None`` when there is nothing to show.
    """
    table = LEVELS.validate(levels if levels is not None else [])
    covered: dict[str, list[str]] = {}
    for exam, q in zip(table["exam_type"], table["quantity"], strict=True):
        covered.setdefault(exam, [])
        if q not in covered[exam]:
            covered[exam].append(q)
    for exam, quantities in (available or {}).items():
        covered.setdefault(exam, list(quantities))
    if exam_type is None:
        if table.empty:
            if not covered:
                return None
            exam_type = sorted(covered)[0]
        else:
            exam_type, urgent_quantity = _most_urgent(table)
            quantity = quantity or urgent_quantity
    options = list(covered.get(exam_type, []))
    options += [q for q in (available or {}).get(exam_type, []) if q not in options]
    if quantity is None or (options and quantity not in options):
        if not options:
            return None if quantity is None else (exam_type, quantity)
        quantity = options[0]
    return exam_type, quantity


#: which group's chart opens the page: one above its level, then one possibly above, then the
#: highest ratio with a verdict, then groups without one
_OPENING_RANK = {"above_level": 0, "possibly_above": 1, "below_level": 2, "insufficient_sample": 3}


def _most_urgent(table: pd.DataFrame) -> tuple[str, str]:
    rank = table["status"].map(lambda s: _OPENING_RANK.get(s, 4))
    ordered = table.assign(_rank=rank, _ratio=table["ratio_to_level"].fillna(-1.0)).sort_values(
        ["_rank", "_ratio", "exam_type", "quantity"],
        ascending=[True, False, True, True],
        kind="mergesort",
    )
    first: Any = ordered.iloc[0]
    return str(first["exam_type"]), str(first["quantity"])
