r"""Group statistics of a review: median, quartiles, mean, upper percentile, and the confidence
interval of the median by order statistics; the ICRP 135 minimum samples; the group status.

Confidence interval of the median
---------------------------------
For a sample of size :math:`n` sorted as :math:`x_{(1)} \le \dots \le x_{(n)}`, the number of
observations below the population median is :math:`B \sim \mathrm{Binomial}(n, 1/2)`, so the
interval :math:`[x_{(r)}, x_{(s)}]` covers the median with probability

.. math::

    P(r \le B < s) = \sum_{i=r}^{s-1} \binom{n}{i} 2^{-n}

(distribution-free; Conover, *Practical Nonparametric Statistics*, 3rd ed. 1999, §3.2, the
confidence interval for a quantile; Campbell & Gardner, BMJ 296:1454, 1988). We take the
symmetric ranks :math:`s = n + 1 - r` with :math:`r` the **largest** rank for which
:math:`P(B \le r - 1) \le \alpha/2`, so the coverage :math:`1 - 2 P(B \le r - 1)` is at least
:math:`1 - \alpha` and as close to it as the discrete distribution allows. When even
:math:`r = 1` fails (:math:`2^{1-n} > \alpha`, i.e. :math:`n \le 5` at 95 %) there is no such
interval and the bounds are NaN. These are the ranks that
``scipy.stats.quantile_test(...).confidence_interval`` returns (checked in the tests).

Quantiles
---------
Quartiles and the upper percentile use linear interpolation between order statistics
(Hyndman & Fan 1996 definition 7, NumPy's and pandas' default); the median is the usual sample
median. ICRP 135 prescribes the median as the facility value but no quantile definition.

Everything is vectorised over groups: one sort of all values by (group, value) and index
arithmetic on the sorted array; no Python loop over groups or rows.

ICRP 135 minimum samples
------------------------
:data:`DEFAULT_MINIMUM_SAMPLES` gives the minimum number of patients per group (room and exam type)
below which a group gets ``insufficient_sample`` instead of a verdict. ICRP Publication 135 (2017),
§3, as recalled (PUBLISHED-VALUES section e; **memory**, not read in the report):

* radiography and diagnostic fluoroscopy: at least 20, preferably 30 (confidence medium);
* mammography: 50 (confidence medium);
* interventional procedures: 30, more being better given the wide spread (confidence low-medium);
* CT: 20, set equal to radiography as **common practice**; not in PUBLISHED-VALUES (confidence low).

They are defaults: :class:`~beamaudit.api.review.run.ReviewParameters` takes any table.
"""

from __future__ import annotations

from dataclasses import dataclass
from types import MappingProxyType
from typing import Literal

import numpy as np
import pandas as pd
from scipy import stats as sps

from beamaudit.api.review.errors import ReviewError

__all__ = [
    "DEFAULT_MINIMUM_SAMPLES",
    "STATUSES",
    "GroupStatistics",
    "MedianCI",
    "classify_status",
    "group_statistics",
    "median_ci",
    "median_ci_ranks",
]

Status = Literal["above_level", "possibly_above", "below_level", "insufficient_sample", "no_level"]
STATUSES: tuple[Status, ...] = (
    "above_level",
    "possibly_above",
    "below_level",
    "insufficient_sample",
    "no_level",
)

#: Minimum patients per group by modality group (ICRP 135 §3 from memory; see the module docstring).
DEFAULT_MINIMUM_SAMPLES: MappingProxyType[str, int] = MappingProxyType(
    {"radiography": 20, "fluoroscopy": 20, "mammography": 50, "interventional": 30, "ct": 20}
)

# Relative slack when comparing a binomial tail with alpha/2: the tails are dyadic rationals and
# alpha/2 rarely is, so this only guards against rounding in scipy's cdf.
_TAIL_RTOL = 1e-12


def median_ci_ranks(
    n: np.ndarray | int, confidence_level: float = 0.95
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Exact binomial ranks of the distribution-free confidence interval of the median.

    Parameters
    ----------
    n : int or array of int
        Sample sizes.
    confidence_level : float
        Wanted coverage :math:`1 - \\alpha`, strictly between 0 and 1.

    Returns
    -------
    r, s : arrays of int
        1-based ranks of the lower and upper bounds (:math:`s = n + 1 - r`); 0 where no interval
        reaches the confidence level.
    coverage : array of float
        :math:`P(r \\le B < s)`, the exact coverage; NaN where there is no interval.

    Raises
    ------
    ReviewError
        ``confidence_level`` outside (0, 1) or a negative ``n``.

    Examples
    --------
    >>> r, s, c = median_ci_ranks(20)
    >>> int(r), int(s), round(float(c), 4)
    (6, 15, 0.9586)
    """
    if not 0.0 < confidence_level < 1.0:
        raise ReviewError(f"confidence_level must be between 0 and 1, got {confidence_level!r}")
    n_arr = np.atleast_1d(np.asarray(n, dtype=np.int64))
    if (n_arr < 0).any():
        raise ReviewError("sample sizes must not be negative")
    half_alpha = (1.0 - confidence_level) / 2.0
    k = sps.binom.ppf(half_alpha, n_arr, 0.5)  # smallest k with P(B <= k) >= alpha/2
    k = np.nan_to_num(k, nan=-1.0).astype(np.int64)
    tail_k = sps.binom.cdf(k, n_arr, 0.5)
    j = np.where(tail_k <= half_alpha * (1.0 + _TAIL_RTOL), k, k - 1)  # largest j: P(B<=j) <= a/2
    r = j + 1
    ok = (r >= 1) & (n_arr > 0)
    tail = sps.binom.cdf(j, n_arr, 0.5)
    coverage = np.where(ok, 1.0 - 2.0 * tail, np.nan)
    r = np.where(ok, r, 0)
    s = np.where(ok, n_arr + 1 - r, 0)
    return r, s, coverage


@dataclass(frozen=True, slots=True)
class MedianCI:
    """Median of one sample with its order-statistic confidence interval."""

    median: float
    low: float
    high: float
    rank_low: int
    rank_high: int
    coverage: float


def median_ci(values: np.ndarray | list[float], confidence_level: float = 0.95) -> MedianCI:
    """The sample median and its distribution-free confidence interval (see the module docstring).

    NaN values are ignored. Bounds are NaN when the sample is too small for the confidence level.
    """
    x = np.sort(np.asarray(values, dtype=np.float64))
    x = x[~np.isnan(x)]
    r, s, coverage = median_ci_ranks(len(x), confidence_level)
    ri, si = int(r[0]), int(s[0])
    return MedianCI(
        median=float(np.median(x)) if len(x) else float("nan"),
        low=float(x[ri - 1]) if ri else float("nan"),
        high=float(x[si - 1]) if si else float("nan"),
        rank_low=ri,
        rank_high=si,
        coverage=float(coverage[0]),
    )


@dataclass(frozen=True, slots=True)
class GroupStatistics:
    """Per-group statistics, arrays indexed by group code (see :func:`group_statistics`)."""

    n: np.ndarray
    median: np.ndarray
    q1: np.ndarray
    q3: np.ndarray
    mean: np.ndarray
    upper: np.ndarray
    ci_low: np.ndarray
    ci_high: np.ndarray
    ci_coverage: np.ndarray

    def to_frame(self) -> pd.DataFrame:
        """The statistics as columns ``n, median, q1, q3, mean, upper_percentile_value, ci_low,
        ci_high, ci_coverage``, one row per group code."""
        return pd.DataFrame(
            {
                "n": self.n,
                "median": self.median,
                "q1": self.q1,
                "q3": self.q3,
                "mean": self.mean,
                "upper_percentile_value": self.upper,
                "ci_low": self.ci_low,
                "ci_high": self.ci_high,
                "ci_coverage": self.ci_coverage,
            }
        )


def _group_order(codes: np.ndarray, values: np.ndarray, n_groups: int) -> np.ndarray:
    """The order that sorts by group, then by value within a group (ties by position).

    The same order as ``np.lexsort((values, codes))`` in two stable passes, values first: a
    stable sort keeps the value order within each group, and small group codes sort by radix.
    """
    by_value = np.argsort(values, kind="stable")
    grouped = codes[by_value]
    if n_groups <= np.iinfo(np.int16).max:
        grouped = grouped.astype(np.int16)
    return by_value[np.argsort(grouped, kind="stable")]


def group_statistics(
    codes: np.ndarray,
    values: np.ndarray,
    n_groups: int,
    *,
    confidence_level: float = 0.95,
    upper_percentile: float = 95.0,
) -> GroupStatistics:
    """Median, quartiles, mean, an upper percentile and the median's confidence interval per group.

    Parameters
    ----------
    codes : array of int
        Group code of each value, in ``0 .. n_groups - 1``.
    values : array of float
        The values; NaN values are not counted.
    n_groups : int
        Number of groups (groups without values get ``n = 0`` and NaN statistics).
    confidence_level : float
        Of the median's confidence interval.
    upper_percentile : float
        Percentile (0-100) reported as ``upper`` (the default 95th serves the investigation rule).

    Returns
    -------
    GroupStatistics

    Raises
    ------
    ReviewError
        Mismatched lengths, codes out of range, or a percentile outside 0-100.
    """
    codes = np.asarray(codes, dtype=np.int64)
    values = np.asarray(values, dtype=np.float64)
    if codes.shape != values.shape:
        raise ReviewError("codes and values must have the same length")
    if not 0.0 <= upper_percentile <= 100.0:
        raise ReviewError(f"upper_percentile must be within 0-100, got {upper_percentile!r}")
    keep = ~np.isnan(values)
    codes, values = codes[keep], values[keep]
    if len(codes) and (codes.min() < 0 or codes.max() >= n_groups):
        raise ReviewError("group codes out of range")
    sorted_values = values[_group_order(codes, values, n_groups)]
    n = np.bincount(codes, minlength=n_groups).astype(np.int64)
    starts = np.cumsum(n) - n
    has = n > 0
    safe_n = np.where(has, n, 1)

    def quantile(p: float) -> np.ndarray:
        h = (safe_n - 1) * p
        lo = np.floor(h).astype(np.int64)
        hi = np.minimum(lo + 1, safe_n - 1)
        frac = h - lo
        if not len(sorted_values):
            return np.full(n_groups, np.nan)
        a = sorted_values[np.where(has, starts + lo, 0)]
        b = sorted_values[np.where(has, starts + hi, 0)]
        return np.where(has, a + frac * (b - a), np.nan)

    total = np.bincount(codes, weights=values, minlength=n_groups)
    mean = np.where(has, total / safe_n, np.nan)
    r, s, coverage = median_ci_ranks(n, confidence_level)
    ok = r > 0
    if len(sorted_values):
        ci_low = np.where(ok, sorted_values[np.where(ok, starts + r - 1, 0)], np.nan)
        ci_high = np.where(ok, sorted_values[np.where(ok, starts + s - 1, 0)], np.nan)
    else:
        ci_low = ci_high = np.full(n_groups, np.nan)
    return GroupStatistics(
        n=n,
        median=quantile(0.5),
        q1=quantile(0.25),
        q3=quantile(0.75),
        mean=mean,
        upper=quantile(upper_percentile / 100.0),
        ci_low=ci_low,
        ci_high=ci_high,
        ci_coverage=np.where(ok, coverage, np.nan),
    )


def classify_status(
    *,
    n: np.ndarray,
    n_minimum: np.ndarray,
    median: np.ndarray,
    ci_low: np.ndarray,
    level: np.ndarray,
) -> np.ndarray:
    """The status of each group against its reference level.

    * ``no_level``: no reference level applies (NaN ``level``);
    * ``insufficient_sample``: fewer than ``n_minimum`` values, so no verdict;
    * ``above_level``: the lower confidence bound of the median is above the level (the median is
      above the level with at least the interval's confidence);
    * ``possibly_above``: the median is above the level but its confidence interval includes the
      level (or no interval exists at this sample size);
    * ``below_level``: the median is at or below the level.

    Returns
    -------
    array of str
        One of :data:`STATUSES` per group.
    """
    level = np.asarray(level, dtype=np.float64)
    median = np.asarray(median, dtype=np.float64)
    ci_low = np.asarray(ci_low, dtype=np.float64)
    no_level = np.isnan(level)
    too_few = ~no_level & (np.asarray(n) < np.asarray(n_minimum))
    judged = ~no_level & ~too_few
    with np.errstate(invalid="ignore"):
        above = judged & (ci_low > level)
        possibly = judged & ~above & (median > level)
    return np.select(
        [no_level, too_few, above, possibly],
        ["no_level", "insufficient_sample", "above_level", "possibly_above"],
        default="below_level",
    ).astype(object)
