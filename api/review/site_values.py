r"""Typical values and proposed local DRLs: ICRP 135's figures over a site's rooms.

For one site, exam type, clinical indication, patient group and quantity, each room that has
enough patients (its group's ``n_used`` at least the ICRP 135 minimum sample) contributes its
**median**. Over those room medians (ICRP Publication 135, 2017, glossary; PUBLISHED-VALUES e,
high):

* the **typical value** is their median: the figure ICRP 135 gives a facility that has too few
  rooms for a local DRL;
* the **proposed local DRL** is their 75th percentile, computed only when at least
  ``min_rooms`` rooms contribute (default 10: the low end of ICRP 135's "reasonable number
  (e.g. 10-20)" of rooms for a local DRL); with fewer rooms the row says ``too_few_rooms`` and
  only the typical value is given;
* the 25th percentile of the room medians, with as many rooms, marks rooms far below the others
  for the low-dose review (:func:`beamaudit.api.review.flags.low_dose_review`).

Quantiles use linear interpolation (Hyndman & Fan definition 7), as the group statistics do.
Their **confidence intervals** are the distribution-free order-statistic intervals of
:func:`beamaudit.api.review.stats.quantile_ci` over the room medians, treating the rooms as a sample
of the rooms such a site could have (the between-room spread is what a DRL describes; the sampling
error of each room median is not added). They are exact where they exist and one-sided or absent
where the number of rooms cannot support them: a 95 % interval of the median needs 6 rooms, and
the 75th percentile of 10 rooms has a lower bound only (:math:`0.75^{10} > 0.025`).

A proposal is for a committee to consider, never adopted by itself: the current local and national
levels stand beside it.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

import numpy as np
import pandas as pd

from beamaudit.api.review.bands import SPECIAL_GROUPS
from beamaudit.api.review.stats import quantile_ci

__all__ = ["SITE_KEYS", "SITE_VALUE_COLUMNS", "site_values"]

#: The keys of a row of :func:`site_values` (a room's group, less its room and device).
SITE_KEYS = ("site", "exam_type", "clinical_indication", "patient_group", "quantity")

#: Columns of :func:`site_values` (and of ``ReviewResult.site_values_df``).
SITE_VALUE_COLUMNS = (
    *SITE_KEYS,
    "unit",
    "basis",
    "n_rooms",
    "n_rooms_too_few_patients",
    "n_patients",
    "typical_value",
    "typical_ci_low",
    "typical_ci_high",
    "typical_ci_coverage",
    "proposal_status",
    "proposed_local_drl",
    "proposed_ci_low",
    "proposed_ci_high",
    "proposed_ci_coverage",
    "room_median_p25",
    "min_rooms",
    "local_level",
    "local_level_set",
    "national_level",
    "national_level_set",
    "proposed_to_local_ratio",
)


def _strictest(
    kinds: np.ndarray, values: np.ndarray, sets: np.ndarray, kind: str
) -> tuple[float, str | None]:
    """The strictest level of ``kind`` among a group's rows: the lowest reference level, then
    the first level set by name (missing values last, as a stable sort of the rows puts them)."""
    best: tuple[Any, ...] | None = None
    for value, name in zip(values[kinds == kind], sets[kinds == kind], strict=True):
        missing, unnamed = bool(np.isnan(value)), bool(pd.isna(name))
        key = (missing, 0.0 if missing else value, unnamed, "" if unnamed else name)
        if best is None or key < best[0]:
            best = (key, value, name)
    if best is None:
        return float("nan"), None
    return float(best[1]), str(best[2])


def site_values(
    groups: pd.DataFrame,
    *,
    location_keys: Sequence[str],
    min_rooms: int = 10,
    confidence_level: float = 0.95,
) -> pd.DataFrame:
    """Typical values and proposed local DRLs from a review's group table.

    Parameters
    ----------
    groups : DataFrame
        The review's group table (one row per group and applicable level; the level columns are
        read for the current levels shown beside the proposal).
    location_keys : sequence of str
        The review's location keys (``group_by``). A room is a group's location less its site;
        without ``room`` or ``device`` in them there is one "room" per site and no site values.
    min_rooms : int
        Contributing rooms needed for a proposed local DRL and the 25th percentile.
    confidence_level : float
        Of the intervals.

    Returns
    -------
    DataFrame
        Columns :data:`SITE_VALUE_COLUMNS`, one row per :data:`SITE_KEYS`, sorted by them. Groups
        of children without a band (:data:`~beamaudit.api.review.bands.SPECIAL_GROUPS`) are left
        out: their median describes no defined patient.
    """
    room_keys = [k for k in ("room", "device") if k in location_keys]
    if not room_keys or len(groups) == 0:
        return pd.DataFrame(columns=list(SITE_VALUE_COLUMNS))
    keys = list(SITE_KEYS)
    rows = []
    banded = ~groups["patient_group"].isin(list(SPECIAL_GROUPS))
    frame = groups.loc[banded]
    # one pass over plain arrays: a group's rows are few, and pandas' selections per group cost
    # more than the statistics
    codes = frame.groupby(keys, dropna=False, sort=True).ngroup().to_numpy()
    order = np.argsort(codes, kind="stable")
    parts = np.split(order, np.flatnonzero(np.diff(codes[order])) + 1) if len(order) else []
    key_values = [frame[k].to_numpy(dtype=object) for k in keys]
    room_values = [frame[k].to_numpy(dtype=object) for k in room_keys]
    n_used = frame["n_used"].to_numpy()
    n_minimum = frame["n_minimum"].to_numpy()
    group_medians = frame["median"].to_numpy(dtype=np.float64)
    units = frame["unit"].to_numpy(dtype=object)
    bases = frame["basis"].to_numpy(dtype=object)
    kinds = frame["level_kind"].to_numpy(dtype=object)
    level_values = frame["reference_level"].to_numpy(dtype=np.float64)
    level_sets = frame["level_set"].to_numpy(dtype=object)
    for part in parts:
        seen: set[tuple[Any, ...]] = set()
        first = []  # a room's first row (rows of one room differ only in their level)
        for i in part:
            room = tuple(None if pd.isna(v) else v for v in (c[i] for c in room_values))
            if room not in seen:
                seen.add(room)
                first.append(i)
        rooms = np.array(first, dtype=np.int64)
        enough = n_used[rooms] >= n_minimum[rooms]
        medians = group_medians[rooms[enough]]
        typical = quantile_ci(medians, 0.5, confidence_level)
        proposed = quantile_ci(medians, 0.75, confidence_level)
        can_propose = len(medians) >= min_rooms
        p25 = float(np.quantile(medians, 0.25)) if can_propose else float("nan")
        local, local_set = _strictest(kinds[part], level_values[part], level_sets[part], "local")
        national, national_set = _strictest(
            kinds[part], level_values[part], level_sets[part], "national"
        )
        nan = float("nan")
        rows.append(
            {
                **{k: values[part[0]] for k, values in zip(keys, key_values, strict=True)},
                "unit": units[rooms[0]],
                "basis": bases[rooms[0]],
                "n_rooms": len(medians),
                "n_rooms_too_few_patients": int((~enough).sum()),
                "n_patients": int(n_used[rooms[enough]].sum()),
                "typical_value": typical.value,
                "typical_ci_low": typical.low,
                "typical_ci_high": typical.high,
                "typical_ci_coverage": typical.coverage,
                "proposal_status": "proposed" if can_propose else "too_few_rooms",
                "proposed_local_drl": proposed.value if can_propose else nan,
                "proposed_ci_low": proposed.low if can_propose else nan,
                "proposed_ci_high": proposed.high if can_propose else nan,
                "proposed_ci_coverage": proposed.coverage if can_propose else nan,
                "room_median_p25": p25,
                "min_rooms": min_rooms,
                "local_level": local,
                "local_level_set": local_set,
                "national_level": national,
                "national_level_set": national_set,
                "proposed_to_local_ratio": (proposed.value / local)
                if can_propose and local == local
                else nan,
            }
        )
    out = pd.DataFrame(rows, columns=list(SITE_VALUE_COLUMNS))
    for c in SITE_KEYS:
        out[c] = out[c].astype(object).where(out[c].notna(), None)
    return out
