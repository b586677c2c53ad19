"""CUSUM change-points on constructed series; run lengths against Siegmund's approximation."""

from __future__ import annotations

import math

import numpy as np
import pytest

from beamaudit.api.review.changepoint import MOVING_RANGE_MEDIAN_FACTOR, cusum, robust_sd
from beamaudit.api.review.errors import ReviewError

BASE = [10.0, 10.2, 9.8, 10.0, 10.1, 9.9, 10.0, 10.2, 9.8, 10.0]


def test_moving_range_factor_is_the_median_of_a_normal_difference() -> None:
    # |X1 - X2| ~ |N(0, 2)|: median sqrt(2) * Phi^-1(0.75) (standard normal quantile)
    from scipy.stats import norm

    assert pytest.approx(math.sqrt(2) * norm.ppf(0.75), rel=1e-12) == MOVING_RANGE_MEDIAN_FACTOR


def test_robust_sd_ignores_a_single_step() -> None:
    series = np.array([*BASE, 14.0, 14.2, 13.8, 14.0])
    # moving ranges: median 0.2 (the 4.0 jump is one of 13); sigma = 0.2 / 0.9539
    assert robust_sd(series) == pytest.approx(0.2 / MOVING_RANGE_MEDIAN_FACTOR)


def test_robust_sd_of_flat_series_falls_back() -> None:
    assert robust_sd(np.array([1.0, 1.0, 1.0, 1.0, 2.0]), 1.0) > 0
    assert robust_sd(np.array([5.0, 5.0, 5.0])) == pytest.approx(5e-9)
    assert math.isnan(robust_sd(np.array([1.0])))


def test_a_large_step_is_found_where_it_happens() -> None:
    # Worked by hand (Montgomery's tabular CUSUM, k = 0.5, h = 5): target = median of the first 6
    # points = 10.0; sigma = 0.2 / 0.9539 = 0.2097, K = 0.1048, H = 1.048. C+ stays below 0.1 until
    # x = 14.0 at index 10, where C+ = 14.0 - 10.1048 = 3.895 > H: alarm at 10, run length 1,
    # so the change starts at 10 and the run mean is 10 + K + C+/1 = 14.0; the new level, the
    # median of the points from 10 on, is 14.0 too.
    series = [*BASE, 14.0, 14.2, 13.8, 14.0]
    result = cusum(series)
    assert result.target == 10.0
    assert result.sigma == pytest.approx(0.2 / MOVING_RANGE_MEDIAN_FACTOR)
    (change,) = result.changes
    assert (change.index, change.alarm_index, change.direction) == (10, 10, "up")
    assert change.before == 10.0
    assert change.after == pytest.approx(14.0)
    assert change.run_mean == pytest.approx(14.0)
    assert change.cusum_value == pytest.approx(14.0 - 10.0 - 0.5 * result.sigma)


def test_a_smaller_step_alarms_later_but_is_dated_at_its_start() -> None:
    # Step of 0.6 (about 2.9 sigma) at index 10: C+ = 0.4952 at 10, 1.1904 at 11 > H = 1.048;
    # N+ = 2, so the change is dated at 11 - 2 + 1 = 10; run mean 10 + K + 1.1904 / 2 = 10.70;
    # new level: median of 10.6, 10.8, 10.4, 10.6, 10.7 = 10.6
    series = [*BASE, 10.6, 10.8, 10.4, 10.6, 10.7]
    result = cusum(series)
    (change,) = result.changes
    sigma = 0.2 / MOVING_RANGE_MEDIAN_FACTOR
    k = 0.5 * sigma
    c_up = (10.6 - 10.0 - k) + (10.8 - 10.0 - k)
    assert (change.index, change.alarm_index) == (10, 11)
    assert change.run_mean == pytest.approx(10.0 + k + c_up / 2)
    assert change.after == pytest.approx(10.6)
    assert result.upper[11] == pytest.approx(c_up)


def test_a_step_down() -> None:
    series = [*BASE, 6.0, 5.9, 6.1, 6.0]
    (change,) = cusum(series).changes
    assert (change.index, change.direction) == (10, "down")
    assert change.after == pytest.approx(6.0)


def test_a_persisting_shift_is_reported_once_and_a_second_shift_again() -> None:
    series = [*BASE, *(v + 4.0 for v in BASE), *(v + 8.0 for v in BASE)]
    changes = cusum(series).changes
    assert [(c.index, c.direction) for c in changes] == [(10, "up"), (20, "up")]


def test_a_noisy_point_before_the_step_does_not_split_the_change() -> None:
    # the point before the step is above target + K, so the run starts one point early; the
    # shift must still be reported once
    series = [*BASE[:-1], 10.2, 14.0, 14.2, 13.8, 14.0, 14.1, 13.9]
    changes = cusum(series).changes
    assert [(c.index, c.alarm_index) for c in changes] == [(9, 10)]
    assert changes[0].after == pytest.approx(14.0)


def test_no_change_in_a_stationary_series() -> None:
    assert cusum(BASE * 3).changes == ()
    rng = np.random.default_rng(11)
    assert cusum(100.0 + rng.normal(0.0, 1.0, 24)).changes == ()


def test_constant_series_alarms_on_any_departure() -> None:
    result = cusum([2.0] * 8 + [2.01, 2.01])
    assert [c.index for c in result.changes] == [8]


def test_too_short_series_has_no_verdict() -> None:
    result = cusum([1.0, 2.0, 3.0], baseline_points=6)
    assert result.changes == () and math.isnan(result.target)


def test_bad_input() -> None:
    with pytest.raises(ReviewError, match="NaN"):
        cusum([1.0, math.nan])
    with pytest.raises(ReviewError, match="positive"):
        cusum([1.0, 2.0], k=0.0)
    with pytest.raises(ReviewError, match="sigma"):
        cusum([1.0, 2.0], target=1.0, sigma=0.0)


def siegmund_arl(delta: float, k: float, h: float) -> float:
    """Two-sided CUSUM average run length, Siegmund's approximation (as given in Montgomery,
    Introduction to Statistical Quality Control, §9.1): one-sided
    ARL = (exp(-2 D b) + 2 D b - 1) / (2 D^2), D = delta - k, b = h + 1.166;
    two-sided 1/ARL = 1/ARL+ + 1/ARL-."""
    b = h + 1.166

    def one(d: float) -> float:
        return (math.exp(-2 * d * b) + 2 * d * b - 1) / (2 * d * d)

    return 1.0 / (1.0 / one(delta - k) + 1.0 / one(-delta - k))


def first_alarm_lengths(shift: float, n_series: int, length: int, h: float) -> np.ndarray:
    rng = np.random.default_rng(2024)
    lengths = []
    for _ in range(n_series):
        result = cusum(rng.normal(shift, 1.0, length), k=0.5, h=h, target=0.0, sigma=1.0)
        lengths.append(result.changes[0].alarm_index + 1 if result.changes else length)
    return np.asarray(lengths, dtype=float)


def test_run_length_after_a_one_sigma_shift() -> None:
    # k = 0.5, h = 4, shift 1 sigma: Montgomery's ARL table gives 8.38 (from memory); Siegmund 8.34
    expected = siegmund_arl(1.0, 0.5, 4.0)
    assert expected == pytest.approx(8.38, abs=0.1)
    lengths = first_alarm_lengths(1.0, 2000, 80, 4.0)
    assert lengths.mean() == pytest.approx(expected, abs=0.5)


@pytest.mark.slow
def test_in_control_run_length() -> None:
    # k = 0.5, h = 4, no shift: Montgomery's table 168 (from memory); Siegmund 169
    expected = siegmund_arl(0.0, 0.5, 4.0)
    assert expected == pytest.approx(168.0, abs=2.0)
    lengths = first_alarm_lengths(0.0, 600, 2500, 4.0)
    # standard error of the mean run length is about 169 / sqrt(600) = 7
    assert lengths.mean() == pytest.approx(expected, abs=25.0)
