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


def _strictest(frame: pd.DataFrame, kind: str) -> tuple[float, str | None]:
    rows = frame.loc[frame["level_kind"] == kind]
    if not len(rows):
        return float("nan"), None
    best = rows.sort_values(["reference_level", "level_set"], kind="mergesort").iloc[0]
    return float(best["reference_level"]), str(best["level_set"])


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
    for key, part in frame.groupby(keys, dropna=False, sort=True):
        rooms = part.drop_duplicates([*keys, *room_keys])
        enough = rooms["n_used"].to_numpy() >= rooms["n_minimum"].to_numpy()
        medians = rooms.loc[enough, "median"].to_numpy(dtype=np.float64)
        typical = quantile_ci(medians, 0.5, confidence_level)
        proposed = quantile_ci(medians, 0.75, confidence_level)
        can_propose = len(medians) >= min_rooms
        p25 = float(np.quantile(medians, 0.25)) if can_propose else float("nan")
        local, local_set = _strictest(part, "local")
        national, national_set = _strictest(part, "national")
        nan = float("nan")
        rows.append(
            {
                **dict(zip(keys, key, strict=True)),
                "unit": rooms["unit"].iloc[0],
                "basis": rooms["basis"].iloc[0],
                "n_rooms": len(medians),
                "n_rooms_too_few_patients": int((~enough).sum()),
                "n_patients": int(rooms.loc[enough, "n_used"].sum()),
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
