r"""Change-points in monthly series (a room's monthly median dose, a room's DAP ratio) by the
two-sided tabular CUSUM.

The tabular CUSUM of Page (Biometrika 41:100, 1954), in the form of Montgomery, *Introduction to
Statistical Quality Control* (chapter "Cumulative sum and exponentially weighted moving average
control charts", §9.1 in the 6th/7th editions):

.. math::

    C_i^+ = \max\bigl(0,\; x_i - (\mu_0 + K) + C_{i-1}^+\bigr), \qquad
    C_i^- = \max\bigl(0,\; (\mu_0 - K) - x_i + C_{i-1}^-\bigr), \qquad C_0^\pm = 0,

with the reference value :math:`K = k\sigma` and the decision interval :math:`H = h\sigma`; an alarm
is raised at the first :math:`i` with :math:`C_i^+ > H` or :math:`C_i^- > H`. The change is dated
at the first point of the run that led to the alarm, :math:`i - N^+ + 1`, where :math:`N^+` counts
the consecutive points with :math:`C^+ > 0`, and the new mean is estimated as
:math:`\mu_0 + K + C_i^+/N^+` (or :math:`\mu_0 - K - C_i^-/N^-`) (Montgomery, same section).

After an alarm both sums restart at zero with the target moved to the new level, estimated
robustly as the median of the points from the estimated change up to ``baseline_points`` points
after the alarm (the analysis is retrospective, so those points are known); a persisting shift is
thus reported once and each later alarm is a further change. (Montgomery's run-mean estimate of the
new level is kept in :attr:`ChangePoint.run_mean`; it is diluted when a noisy point just before the
step starts the run, which would make a persisting shift alarm twice.)

Parameters, in units of the series' robust standard deviation :math:`\sigma`:

* ``k`` = 0.5 (tuned to detect a shift of one :math:`\sigma`) and ``h`` = 5, the values Montgomery
  recommends (``h`` = 4 or 5); with known :math:`\mu_0, \sigma` the in-control average run length
  is about 465 points for ``h`` = 5 and 168 for ``h`` = 4 (Montgomery's ARL table, from memory; the
  tests check 168 and the 1-:math:`\sigma` ARL of 8.38 against Siegmund's approximation).
* :math:`\mu_0` is the median of the first ``baseline_points`` points (default 6 months).
* :math:`\sigma` is estimated from the whole series by the median moving range,
  :math:`\hat\sigma = \mathrm{median}|x_i - x_{i-1}| / 0.9539`, where
  :math:`0.9539 = \sqrt{2}\,\Phi^{-1}(0.75)` is that median for independent normal points. A step
  change spoils one moving range only, so the estimate survives the change it must detect (the
  moving-range estimate is Montgomery's for individuals; its median form is the robust variant).
  If it is zero (a flat series) the MAD about :math:`\mu_0` (times 1.4826) is used, and if that is
  zero too, :math:`10^{-9}\,\max(|\mu_0|, 1)` so that any departure from a constant series alarms.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Literal

import numpy as np

from beamaudit.api.review.errors import ReviewError

__all__ = [
    "MOVING_RANGE_MEDIAN_FACTOR",
    "ChangePoint",
    "CusumResult",
    "cusum",
    "robust_sd",
]

#: Median of |X_i - X_{i-1}| for independent N(0, 1) points: sqrt(2) * Phi^-1(0.75).
MOVING_RANGE_MEDIAN_FACTOR = math.sqrt(2.0) * 0.6744897501960817
#: Consistency factor of the MAD for the normal distribution, 1 / Phi^-1(0.75).
MAD_FACTOR = 1.0 / 0.6744897501960817
#: Floor of sigma for a constant series, relative to the target.
SIGMA_FLOOR_RELATIVE = 1e-9


@dataclass(frozen=True, slots=True)
class ChangePoint:
    r"""One detected change.

    Attributes
    ----------
    index : int
        Estimated first point of the changed level (0-based position in the series).
    alarm_index : int
        Point at which the CUSUM crossed the decision interval.
    direction : {"up", "down"}
    before : float
        Target (level) before the change.
    after : float
        Estimated level after the change (median of the new regime; see the module docstring).
    run_mean : float
        Montgomery's estimate :math:`\mu_0 \pm K + C^\pm/N^\pm`, the mean of the run.
    cusum_value : float
        :math:`C^\pm` at the alarm, in the series' units.
    """

    index: int
    alarm_index: int
    direction: Literal["up", "down"]
    before: float
    after: float
    run_mean: float
    cusum_value: float


@dataclass(frozen=True, slots=True)
class CusumResult:
    """The CUSUM of a series: its parameters, both sums and the changes found."""

    target: float
    sigma: float
    k: float
    h: float
    upper: np.ndarray
    lower: np.ndarray
    changes: tuple[ChangePoint, ...]


def robust_sd(values: np.ndarray, target: float | None = None) -> float:
    """Robust standard deviation of a series (median moving range; see the module docstring)."""
    x = np.asarray(values, dtype=np.float64)
    if len(x) < 2:
        return float("nan")
    sigma = float(np.median(np.abs(np.diff(x)))) / MOVING_RANGE_MEDIAN_FACTOR
    if sigma == 0.0:
        centre = float(np.median(x)) if target is None else target
        sigma = float(np.median(np.abs(x - centre))) * MAD_FACTOR
    if sigma == 0.0:
        centre = float(np.median(x)) if target is None else target
        sigma = SIGMA_FLOOR_RELATIVE * max(abs(centre), 1.0)
    return sigma


def cusum(
    values: np.ndarray | list[float],
    *,
    k: float = 0.5,
    h: float = 5.0,
    baseline_points: int = 6,
    target: float | None = None,
    sigma: float | None = None,
) -> CusumResult:
    """Two-sided tabular CUSUM of ``values`` with re-targeting after each alarm.

    Parameters
    ----------
    values : array of float
        The series in time order, without gaps (NaN not allowed: drop missing months first).
    k, h : float
        Reference value and decision interval in units of ``sigma``.
    baseline_points : int
        Number of leading points whose median is the target, when ``target`` is not given.
    target, sigma : float, optional
        Known in-control mean and standard deviation; estimated when not given.

    Returns
    -------
    CusumResult
        ``changes`` is empty when the series is too short (fewer than ``baseline_points + 1``
        points with an estimated target) or when nothing changed.

    Raises
    ------
    ReviewError
        NaN in ``values``, or non-positive ``k``, ``h``, ``sigma`` or ``baseline_points``.
    """
    x = np.asarray(values, dtype=np.float64)
    if np.isnan(x).any():
        raise ReviewError("the CUSUM series must not contain NaN; drop missing months first")
    if k <= 0 or h <= 0 or baseline_points < 1:
        raise ReviewError("CUSUM k, h and baseline_points must be positive")
    if sigma is not None and not (math.isfinite(sigma) and sigma > 0):
        raise ReviewError(f"CUSUM sigma must be a positive number, got {sigma!r}")
    n = len(x)
    upper = np.zeros(n)
    lower = np.zeros(n)
    if target is None:
        if n < baseline_points + 1:
            return CusumResult(float("nan"), float("nan"), k, h, upper, lower, ())
        target = float(np.median(x[:baseline_points]))
    if sigma is None:
        sigma = robust_sd(x, target)
    if not math.isfinite(sigma):  # fewer than two points: nothing to estimate sigma from
        return CusumResult(target, float("nan"), k, h, upper, lower, ())
    big_k, big_h = k * sigma, h * sigma
    mu = target
    c_up = c_down = 0.0
    n_up = n_down = 0
    changes: list[ChangePoint] = []
    for i in range(n):
        c_up = max(0.0, x[i] - (mu + big_k) + c_up)
        c_down = max(0.0, (mu - big_k) - x[i] + c_down)
        n_up = n_up + 1 if c_up > 0 else 0
        n_down = n_down + 1 if c_down > 0 else 0
        upper[i], lower[i] = c_up, c_down
        if c_up > big_h or c_down > big_h:
            up = c_up > big_h
            run = n_up if up else n_down
            start = i - run + 1
            run_mean = mu + big_k + c_up / n_up if up else mu - big_k - c_down / n_down
            after = float(np.median(x[start : i + 1 + baseline_points]))
            changes.append(
                ChangePoint(
                    index=start,
                    alarm_index=i,
                    direction="up" if up else "down",
                    before=mu,
                    after=after,
                    run_mean=run_mean,
                    cusum_value=c_up if up else c_down,
                )
            )
            mu = after
            c_up = c_down = 0.0
            n_up = n_down = 0
    return CusumResult(float(target), float(sigma), k, h, upper, lower, tuple(changes))
