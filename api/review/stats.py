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
:data:`PREFERRED_SAMPLES` gives the sizes ICRP 135 prefers (radiography and diagnostic
fluoroscopy 30, PUBLISHED-VALUES e, medium; mammography 50; interventional 30; CT 30 as
**common practice**, like radiography): a group between the two is judged, and its row says the
sample is below the preferred size.

Confidence interval of any quantile
-----------------------------------
The same argument holds for the population :math:`p`-quantile with
:math:`B \sim \mathrm{Binomial}(n, p)` (Conover 1999, §3.2): :math:`[x_{(r)}, x_{(s)}]` covers it
with probability :math:`F(s-1) - F(r-1)`, :math:`F` the binomial distribution function. We take
:math:`r` the largest rank with :math:`F(r-1) \le \alpha/2` and :math:`s` the smallest with
:math:`1 - F(s-1) \le \alpha/2` (equal tails of at most :math:`\alpha/2` each; for
:math:`p = 1/2` these are the median's ranks above). Away from the median one bound can be
missing while the other exists: for the 75th percentile of 10 values no upper rank reaches 97.5 %
(:math:`0.75^{10} = 0.056 > 0.025`), so the interval is one-sided and its missing bound is NaN.
:func:`quantile_ci` serves the ICRP 135 typical value (median of room medians) and proposed local
DRL (75th percentile of room medians); the ranks are those of
``scipy.stats.quantile_test(x, p=p).confidence_interval`` (checked in the tests).
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import lru_cache
from types import MappingProxyType
from typing import Literal

import numpy as np
import pandas as pd

from beamaudit.api.review.errors import ReviewError

__all__ = [
    "DEFAULT_MINIMUM_SAMPLES",
    "PREFERRED_SAMPLES",
    "STATUSES",
    "GroupStatistics",
    "MedianCI",
    "QuantileCI",
    "classify_status",
    "group_medians",
    "group_statistics",
    "median_ci",
    "median_ci_ranks",
    "quantile_ci",
    "quantile_ci_ranks",
    "sample_checks",
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

#: Preferred patients per group by modality group (ICRP 135 §3 from memory; module docstring).
PREFERRED_SAMPLES: MappingProxyType[str, int] = MappingProxyType(
    {"radiography": 30, "fluoroscopy": 30, "mammography": 50, "interventional": 30, "ct": 30}
)

# Relative slack when comparing a binomial tail with alpha/2: the tails are dyadic rationals and
# alpha/2 rarely is, so this only guards against rounding in scipy's cdf.
_TAIL_RTOL = 1e-12


def _binom_cdf(k: np.ndarray, n: np.ndarray, p: float) -> np.ndarray:
    """P(X <= k) for X ~ Binomial(n, p), any integer ``k`` (0 below the support, 1 above).

    From ``scipy.special.bdtr`` (what ``scipy.stats.binom.cdf`` computes too), without importing
    ``scipy.stats``: a review command spent most of its start-up there.
    """
    from scipy import special

    k, n = np.broadcast_arrays(np.asarray(k, dtype=np.int64), np.asarray(n, dtype=np.int64))
    inside = special.bdtr(np.clip(k, 0, np.maximum(n, 0)), n, p)
    return np.where(k < 0, 0.0, np.where(k >= n, 1.0, inside))


def _binom_sf(k: np.ndarray, n: np.ndarray, p: float) -> np.ndarray:
    """P(X > k) for X ~ Binomial(n, p) (``scipy.special.bdtrc``), any integer ``k``."""
    from scipy import special

    k, n = np.broadcast_arrays(np.asarray(k, dtype=np.int64), np.asarray(n, dtype=np.int64))
    inside = special.bdtrc(np.clip(k, 0, np.maximum(n, 0)), n, p)
    return np.where(k < 0, 1.0, np.where(k >= n, 0.0, inside))


def _binom_ppf(q: float, n: np.ndarray, p: float) -> np.ndarray:
    """The smallest ``k`` in 0..n with P(X <= k) >= ``q``, for 0 < q < 1 (the definition of
    ``scipy.stats.binom.ppf``): a first guess from ``scipy.special.bdtrik``, then corrected."""
    from scipy import special

    n = np.asarray(n, dtype=np.int64)
    guess = np.nan_to_num(np.ceil(special.bdtrik(q, n, p)), nan=0.0)
    k = np.clip(guess, 0, np.maximum(n, 0)).astype(np.int64)
    for _ in range(64):  # the guess is off by a rank at most; the loop only guards rounding
        down = (k > 0) & (_binom_cdf(k - 1, n, p) >= q)
        up = (k < n) & (_binom_cdf(k, n, p) < q)
        if not (down.any() or up.any()):
            break
        k = k - down + up
    return k


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
    return quantile_ci_ranks(n, 0.5, confidence_level)  # symmetric at p = 1/2: s = n + 1 - r


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


#: groups above which the values are sorted in two passes over all of them, not group by group
_GROUPS_SORTED_ONE_BY_ONE = 20_000


def _grouped_sorted_values(codes: np.ndarray, values: np.ndarray, n_groups: int) -> np.ndarray:
    """The values sorted by group, then by value within a group: ``values[np.lexsort((values,
    codes))]``.

    The values are put in group order by a stable sort of the codes (by radix for small codes),
    then each group's run is sorted in place. With more groups than
    ``_GROUPS_SORTED_ONE_BY_ONE`` (a Python step per group would cost more) the order is made in
    two stable passes over all values instead, values first, then codes.
    """
    small = codes.astype(np.int16) if n_groups <= np.iinfo(np.int16).max else codes
    if n_groups > _GROUPS_SORTED_ONE_BY_ONE:
        by_value = np.argsort(values, kind="stable")
        return values[by_value[np.argsort(small[by_value], kind="stable")]]
    out = values[np.argsort(small, kind="stable")]
    ends = np.cumsum(np.bincount(codes, minlength=n_groups))
    starts = np.concatenate(([0], ends[:-1])) if len(ends) else ends
    for start, end in zip(starts.tolist(), ends.tolist(), strict=True):
        if end - start > 1:
            out[start:end].sort()
    return out


def group_medians(codes: np.ndarray, values: np.ndarray, n_groups: int) -> np.ndarray:
    """The sample median of each group's values: the middle value of the sorted values, or the
    mean of the two middle ones for an even count, ``(x_(n/2) + x_(n/2+1)) / 2`` (as pandas'
    ``groupby().median()`` gives it, to the bit); NaN for a group without values.

    ``values`` must hold no NaN (the caller leaves them out); ``codes`` are in
    ``0 .. n_groups - 1``.
    """
    values = np.asarray(values, dtype=np.float64)
    n = np.bincount(codes, minlength=n_groups)
    ordered = _grouped_sorted_values(codes, values, n_groups)
    starts = np.cumsum(n) - n
    has = n > 0
    if not len(ordered):
        return np.full(n_groups, np.nan)
    low = ordered[np.where(has, starts + (n - 1) // 2, 0)]
    high = ordered[np.where(has, starts + n // 2, 0)]
    return np.where(has, (low + high) / 2, np.nan)


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
    sorted_values = _grouped_sorted_values(codes, values, n_groups)
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


@dataclass(frozen=True, slots=True)
class QuantileCI:
    """A sample quantile with its order-statistic confidence interval (bounds NaN where missing).

    ``coverage`` is that of the interval as given: two-sided when both bounds exist, one-sided
    (:math:`[x_{(r)}, \\infty)` or :math:`(-\\infty, x_{(s)}]`) when only one does, NaN when none.
    """

    p: float
    n: int
    value: float
    low: float
    high: float
    rank_low: int
    rank_high: int
    coverage: float


def quantile_ci_ranks(
    n: np.ndarray | int, p: float, confidence_level: float = 0.95
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Exact binomial ranks of the distribution-free confidence interval of the ``p``-quantile.

    Parameters
    ----------
    n : int or array of int
        Sample sizes.
    p : float
        The quantile, strictly between 0 and 1 (0.75 for the third quartile).
    confidence_level : float
        Wanted coverage :math:`1 - \\alpha`, strictly between 0 and 1.

    Returns
    -------
    r, s : arrays of int
        1-based ranks of the lower and upper bounds; 0 where that bound does not exist.
    coverage : array of float
        Exact coverage of the interval as it exists (see :class:`QuantileCI`); NaN without bounds.

    Raises
    ------
    ReviewError
        ``p`` or ``confidence_level`` outside (0, 1), or a negative ``n``.

    Examples
    --------
    >>> r, s, c = quantile_ci_ranks(10, 0.75)
    >>> int(r[0]), int(s[0]), round(float(c[0]), 4)
    (5, 0, 0.9803)
    """
    if not 0.0 < p < 1.0:
        raise ReviewError(f"the quantile p must be between 0 and 1, got {p!r}")
    if not 0.0 < confidence_level < 1.0:
        raise ReviewError(f"confidence_level must be between 0 and 1, got {confidence_level!r}")

    n_arr = np.atleast_1d(np.asarray(n, dtype=np.int64))
    if (n_arr < 0).any():
        raise ReviewError("sample sizes must not be negative")
    if n_arr.size == 1:  # one group at a time: the ranks of a size are computed once a process
        r1, s1, c1 = _ranks_of_one_size(int(n_arr[0]), float(p), float(confidence_level))
        return np.array([r1]), np.array([s1]), np.array([c1])
    return _ranks(n_arr, p, confidence_level)


#: Sample sizes up to which the ranks are computed in exact integer arithmetic (no SciPy: a
#: review whose groups are all this small, such as a month of one hospital, never imports it).
_EXACT_RANKS_MAX_N = 400


@lru_cache(maxsize=4096)
def _ranks_of_one_size(n: int, p: float, confidence_level: float) -> tuple[int, int, float]:
    if n <= _EXACT_RANKS_MAX_N:
        return _exact_ranks(n, p, confidence_level)
    r, s, coverage = _ranks_by_scipy(np.array([n], dtype=np.int64), p, confidence_level)
    return int(r[0]), int(s[0]), float(coverage[0])


def _exact_ranks(n: int, p: float, confidence_level: float) -> tuple[int, int, float]:
    """The ranks of :func:`_ranks_by_scipy` for one sample size, with F the Binomial(n, p)
    distribution function summed exactly: p, alpha/2 and the thresholds are the binary fractions
    the floats are, each term C(n, i) a^i (b - a)^(n - i) / b^n an integer over b^n."""
    from fractions import Fraction

    half_alpha = (1.0 - confidence_level) / 2.0
    a, b = Fraction(p).as_integer_ratio()
    sums = []  # sums[k] = b^n F(k)
    total, term = 0, (b - a) ** n  # i = 0
    for i in range(n + 1):
        total += term
        sums.append(total)
        if i < n:  # C(n, i+1) a^(i+1) (b-a)^(n-i-1) from C(n, i) a^i (b-a)^(n-i)
            term = term * (n - i) * a // ((i + 1) * (b - a))
    scale = b**n

    def cdf(k: int) -> Fraction:
        return Fraction(0) if k < 0 else Fraction(1) if k >= n else Fraction(sums[k], scale)

    def ppf(q: float) -> int:  # the smallest k in 0..n with F(k) >= q
        bound = Fraction(q)
        return next((k for k in range(n + 1) if cdf(k) >= bound), n)

    slack = Fraction(half_alpha * (1.0 + _TAIL_RTOL))
    k = ppf(half_alpha)
    j = k if cdf(k) <= slack else k - 1
    r = j + 1 if j >= 0 and n > 0 else 0
    upper_k = ppf(1.0 - half_alpha)
    if 1 - cdf(upper_k - 1) <= slack:
        upper_k -= 1
    s = upper_k + 1 if upper_k + 1 <= n and upper_k >= 0 and n > 0 else 0
    if not (r or s):
        return r, s, float("nan")
    lower_tail = cdf(r - 1) if r else Fraction(0)
    upper_mass = cdf(s - 1) if s else Fraction(1)
    return r, s, float(upper_mass - lower_tail)


def _ranks(
    n_arr: np.ndarray, p: float, confidence_level: float
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """:func:`quantile_ci_ranks` of checked arguments: small samples exactly (once a size and
    process), the others through SciPy."""
    r = np.zeros(len(n_arr), dtype=np.int64)
    s = np.zeros(len(n_arr), dtype=np.int64)
    coverage = np.full(len(n_arr), np.nan)
    small = n_arr <= _EXACT_RANKS_MAX_N
    sizes, at = np.unique(n_arr[small], return_inverse=True)
    if len(sizes):
        each = np.array(
            [_ranks_of_one_size(int(n), float(p), float(confidence_level)) for n in sizes]
        )
        r[small] = each[at.reshape(-1), 0].astype(np.int64)
        s[small] = each[at.reshape(-1), 1].astype(np.int64)
        coverage[small] = each[at.reshape(-1), 2]
    if not small.all():
        r[~small], s[~small], coverage[~small] = _ranks_by_scipy(n_arr[~small], p, confidence_level)
    return r, s, coverage


def _ranks_by_scipy(
    n_arr: np.ndarray, p: float, confidence_level: float
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """The ranks through SciPy's binomial functions (any sample size)."""
    half_alpha = (1.0 - confidence_level) / 2.0
    k = np.nan_to_num(_binom_ppf(half_alpha, n_arr, p), nan=-1.0).astype(np.int64)
    j = np.where(_binom_cdf(k, n_arr, p) <= half_alpha * (1.0 + _TAIL_RTOL), k, k - 1)
    r = np.where((j >= 0) & (n_arr > 0), j + 1, 0)
    # smallest k with F(k) >= 1 - alpha/2; the upper bound is x_(k+1) when k + 1 <= n
    upper_k = np.nan_to_num(_binom_ppf(1.0 - half_alpha, n_arr, p), nan=-1.0).astype(np.int64)
    upper_k = np.where(
        _binom_sf(upper_k - 1, n_arr, p) <= half_alpha * (1.0 + _TAIL_RTOL),
        upper_k - 1,
        upper_k,
    )  # guard against ppf rounding one rank too far
    s = np.where((upper_k + 1 <= n_arr) & (upper_k >= 0) & (n_arr > 0), upper_k + 1, 0)
    lower_tail = np.where(r > 0, _binom_cdf(r - 1, n_arr, p), 0.0)
    upper_mass = np.where(s > 0, _binom_cdf(s - 1, n_arr, p), 1.0)
    coverage = np.where((r > 0) | (s > 0), upper_mass - lower_tail, np.nan)
    return r, s, coverage


def quantile_ci(
    values: np.ndarray | list[float], p: float, confidence_level: float = 0.95
) -> QuantileCI:
    """The sample ``p``-quantile (linear interpolation, Hyndman & Fan definition 7) and its
    distribution-free confidence interval (see the module docstring). NaN values are ignored."""
    x = np.sort(np.asarray(values, dtype=np.float64))
    x = x[~np.isnan(x)]
    r, s, coverage = quantile_ci_ranks(len(x), p, confidence_level)
    ri, si = int(r[0]), int(s[0])
    return QuantileCI(
        p=p,
        n=len(x),
        value=float(np.quantile(x, p)) if len(x) else float("nan"),
        low=float(x[ri - 1]) if ri else float("nan"),
        high=float(x[si - 1]) if si else float("nan"),
        rank_low=ri,
        rank_high=si,
        coverage=float(coverage[0]),
    )


def sample_checks(n: np.ndarray, n_minimum: np.ndarray, n_preferred: np.ndarray) -> np.ndarray:
    """ICRP 135's sample-size rule per group: ``below_minimum`` (no verdict), ``below_preferred``
    (judged, but fewer patients than ICRP 135 prefers) or ``ok``."""
    n = np.asarray(n)
    return np.select(
        [n < np.asarray(n_minimum), n < np.asarray(n_preferred)],
        ["below_minimum", "below_preferred"],
        default="ok",
    ).astype(object)
