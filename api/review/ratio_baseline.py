"""A room's usual ratio of a reported dose figure to beamaudit's reconstruction of it.

The mean glandular dose a mammography unit reports (DICOM Organ Dose, the dose report's Average
Glandular Dose) is made by the vendor's own dosimetry method; beamaudit reconstructs D_G by the
Dance method (D_G = K g c s). The two differ by a factor that depends on the vendor's method and
is not 1, so a room's ratio is judged against the room's own past, not against 1 (as the DAP
ratio is, where IEC 60580 sets the meter's accuracy against the true value).

The baseline of a month is the median of the monthly medians of the same series' preceding
``months`` judged months (months with too few events are dropped before), and exists only when at
least ``min_months`` of them are there. The median of a few months is robust to one odd month; a
rolling window lets a lasting change become the room's new usual ratio after about half the window
(the change itself is found by the CUSUM change-points). Window and minimum are **project
choices** (``ReviewParameters.mgd_ratio_baseline_months``, default 6, the CUSUM baseline's length,
and 3).
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
import pandas as pd

__all__ = ["ratio_baselines"]


def ratio_baselines(
    series: pd.DataFrame, *, keys: Sequence[str], months: int, min_months: int
) -> pd.DataFrame:
    """``series`` with ``baseline`` and ``baseline_months`` added per row.

    Parameters
    ----------
    series : DataFrame
        One row per series (the ``keys`` columns) and month: ``month`` (``YYYY-MM``) and
        ``median``; thin months already dropped.
    keys : sequence of str
        Columns that identify a series (missing values are a key of their own).
    months : int
        The baseline is made of at most this many preceding months.
    min_months : int
        With fewer preceding months the baseline is NaN (the month is not judged).

    Returns
    -------
    DataFrame
        A copy sorted by keys and month; ``baseline`` (float, NaN when not judged) and
        ``baseline_months`` (int, the preceding months used).

    Examples
    --------
    >>> t = pd.DataFrame({"room": "A", "month": ["2026-01", "2026-02", "2026-03", "2026-04"],
    ...                   "median": [1.1, 1.0, 1.2, 2.0]})
    >>> ratio_baselines(t, keys=["room"], months=6, min_months=3)["baseline"].tolist()
    [nan, nan, nan, 1.1]
    """
    out = series.sort_values([*keys, "month"], kind="mergesort", na_position="first")
    out = out.reset_index(drop=True)
    if len(out) == 0:
        return out.assign(baseline=np.zeros(0), baseline_months=np.zeros(0, dtype=np.int64))
    group = out.groupby(list(keys), dropna=False, sort=False, observed=True)["median"]
    before = group.shift(1)
    codes = out.groupby(list(keys), dropna=False, sort=False, observed=True).ngroup()
    window = before.groupby(codes).rolling(months, min_periods=1)
    count = window.count().reset_index(level=0, drop=True).sort_index()
    median = window.median().reset_index(level=0, drop=True).sort_index()
    count = count.fillna(0).astype(np.int64)
    out["baseline"] = median.where(count >= min_months).to_numpy(dtype=np.float64)
    out["baseline_months"] = count.to_numpy(dtype=np.int64)
    return out
