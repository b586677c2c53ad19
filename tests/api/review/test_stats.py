"""Group statistics and the confidence interval of the median, against the textbook and scipy."""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest
from scipy import stats as sps

from beamaudit.api.review.errors import ReviewError
from beamaudit.api.review.stats import (
    DEFAULT_MINIMUM_SAMPLES,
    PREFERRED_SAMPLES,
    classify_status,
    group_statistics,
    median_ci,
    median_ci_ranks,
    quantile_ci,
    quantile_ci_ranks,
    sample_checks,
)


def textbook_ranks(n: int, confidence: float) -> tuple[int, int, float]:
    """Conover, Practical Nonparametric Statistics (3rd ed. 1999), §3.2: the largest r with
    P(B <= r - 1) <= alpha/2 for B ~ Binomial(n, 1/2), s = n + 1 - r; coverage by exact sums."""
    alpha = 1.0 - confidence
    tail = 0
    r = 0
    for k in range(n + 1):
        tail += math.comb(n, k)
        if tail / 2**n <= alpha / 2:
            r = k + 1
        else:
            break
    if r == 0:
        return 0, 0, math.nan
    inside = sum(math.comb(n, i) for i in range(r, n + 1 - r))  # P(r <= B < s), s = n + 1 - r
    return r, n + 1 - r, inside / 2**n


@pytest.mark.parametrize("confidence", [0.90, 0.95, 0.99])
def test_ranks_equal_the_exact_binomial_form(confidence: float) -> None:
    sizes = np.arange(1, 301)
    r, s, coverage = median_ci_ranks(sizes, confidence)
    for n, ri, si, ci in zip(sizes, r, s, coverage, strict=True):
        tr, ts, tc = textbook_ranks(int(n), confidence)
        assert (ri, si) == (tr, ts), n
        if tr:
            assert ci == pytest.approx(tc, rel=1e-12)
            assert ci >= confidence
        else:
            assert math.isnan(ci)


def test_worked_values() -> None:
    # n = 20: 6th and 15th ordered values, coverage 1 - 2 * 21700 / 2**20 = 0.9586
    # (exact binomial sum; the same ranks as Campbell & Gardner's table, BMJ 1988, from memory)
    r, s, c = median_ci_ranks(20)
    assert (int(r[0]), int(s[0])) == (6, 15)
    assert c[0] == pytest.approx(1 - 2 * 21700 / 2**20)
    # n = 6 is the smallest sample with a 95 % interval: [x(1), x(6)], coverage 1 - 2/64
    r, s, c = median_ci_ranks(np.array([5, 6]))
    assert r.tolist() == [0, 1] and s.tolist() == [0, 6]
    assert c[1] == pytest.approx(1 - 2 / 64)


@pytest.mark.parametrize("n", [6, 7, 10, 19, 20, 21, 30, 49, 50, 51, 99, 100, 101, 250])
def test_interval_matches_scipy_quantile_test(n: int) -> None:
    # scipy.stats.quantile_test(x, p=0.5).confidence_interval: order-statistic CI of the median
    rng = np.random.default_rng(n)
    x = rng.lognormal(0.0, 0.5, n)
    ours = median_ci(x, 0.95)
    theirs = sps.quantile_test(x, p=0.5).confidence_interval(confidence_level=0.95)
    assert ours.low == theirs.low
    assert ours.high == theirs.high
    assert ours.median == np.median(x)


@pytest.mark.parametrize("n", [20, 30, 50, 100, 200, 500, 1000])
def test_ranks_agree_with_the_campbell_gardner_approximation(n: int) -> None:
    # Campbell & Gardner, BMJ 296:1454 (1988): r = n/2 - 1.96 sqrt(n)/2,
    # s = 1 + n/2 + 1.96 sqrt(n)/2, rounded; a normal approximation, so within one rank of the
    # exact ranks
    r, s, _ = median_ci_ranks(n)
    approx_r = round(n / 2 - 1.96 * math.sqrt(n) / 2)
    approx_s = round(1 + n / 2 + 1.96 * math.sqrt(n) / 2)
    assert abs(int(r[0]) - approx_r) <= 1
    assert abs(int(s[0]) - approx_s) <= 1


def test_interval_is_close_to_a_bootstrap_interval() -> None:
    # scipy.stats.bootstrap, percentile method: a different (resampling) estimate of the same
    # interval; for n = 400 both should agree to a fraction of the interval's width
    rng = np.random.default_rng(7)
    x = rng.lognormal(np.log(0.1), 0.4, 400)
    ours = median_ci(x)
    boot = sps.bootstrap(
        (x,), np.median, confidence_level=0.95, method="percentile", n_resamples=2000, rng=rng
    ).confidence_interval
    width = ours.high - ours.low
    assert abs(boot.low - ours.low) < 0.35 * width
    assert abs(boot.high - ours.high) < 0.35 * width


def test_median_ci_of_a_tiny_sample_has_no_bounds() -> None:
    result = median_ci([1.0, 2.0, 3.0, np.nan])
    assert result.median == 2.0
    assert math.isnan(result.low) and math.isnan(result.high) and result.rank_low == 0


def test_bad_arguments() -> None:
    with pytest.raises(ReviewError, match="confidence_level"):
        median_ci_ranks(20, 1.0)
    with pytest.raises(ReviewError, match="negative"):
        median_ci_ranks(np.array([-1]))
    with pytest.raises(ReviewError, match="same length"):
        group_statistics(np.array([0]), np.array([1.0, 2.0]), 1)
    with pytest.raises(ReviewError, match="out of range"):
        group_statistics(np.array([3]), np.array([1.0]), 2)
    with pytest.raises(ReviewError, match="upper_percentile"):
        group_statistics(np.array([0]), np.array([1.0]), 1, upper_percentile=101)


def test_group_statistics_equal_pandas_and_per_group_median_ci() -> None:
    rng = np.random.default_rng(3)
    codes = rng.integers(0, 7, 5000)
    codes[codes == 5] = 6  # group 5 stays empty
    values = rng.lognormal(0.0, 0.6, 5000)
    values[rng.random(5000) < 0.05] = np.nan
    result = group_statistics(codes, values, 8, upper_percentile=95.0)
    frame = pd.DataFrame({"g": codes, "v": values}).dropna()
    grouped = frame.groupby("g")["v"]
    for g in range(8):
        if g not in grouped.groups:
            assert result.n[g] == 0
            assert math.isnan(result.median[g]) and math.isnan(result.ci_low[g])
            continue
        v = grouped.get_group(g).to_numpy()
        assert result.n[g] == len(v)
        assert result.median[g] == pytest.approx(np.median(v), rel=1e-15)
        assert result.q1[g] == pytest.approx(np.quantile(v, 0.25), rel=1e-12)
        assert result.q3[g] == pytest.approx(np.quantile(v, 0.75), rel=1e-12)
        assert result.upper[g] == pytest.approx(np.quantile(v, 0.95), rel=1e-12)
        assert result.mean[g] == pytest.approx(v.mean(), rel=1e-12)
        single = median_ci(v)
        assert (result.ci_low[g], result.ci_high[g]) == (single.low, single.high)
        assert result.ci_coverage[g] == pytest.approx(single.coverage)
    assert list(result.to_frame().columns)[:3] == ["n", "median", "q1"]


def test_group_statistics_of_nothing() -> None:
    result = group_statistics(np.zeros(0, int), np.zeros(0), 2)
    assert result.n.tolist() == [0, 0]
    assert np.isnan(result.median).all() and np.isnan(result.ci_high).all()


def test_group_statistics_single_value_group() -> None:
    result = group_statistics(np.array([0]), np.array([4.0]), 1)
    assert result.median[0] == result.q1[0] == result.q3[0] == result.upper[0] == 4.0
    assert math.isnan(result.ci_low[0])


def test_minimum_samples_default_to_icrp_135() -> None:
    # ICRP Publication 135 (2017) §3, from memory (PUBLISHED-VALUES e, medium / low-medium);
    # CT set equal to radiography as common practice
    assert DEFAULT_MINIMUM_SAMPLES["radiography"] == 20
    assert DEFAULT_MINIMUM_SAMPLES["fluoroscopy"] == 20
    assert DEFAULT_MINIMUM_SAMPLES["mammography"] == 50
    assert DEFAULT_MINIMUM_SAMPLES["interventional"] == 30
    assert DEFAULT_MINIMUM_SAMPLES["ct"] == 20


def test_status_rules() -> None:
    nan = math.nan
    status = classify_status(
        n=np.array([30, 30, 30, 30, 19, 30, 10, 30]),
        n_minimum=np.array([20, 20, 20, 20, 20, 20, 5, 20]),
        median=np.array([1.5, 1.2, 1.0, 0.8, 3.0, 2.0, 2.0, 1.0]),
        ci_low=np.array([1.1, 0.9, 0.9, 0.7, 2.5, 1.5, nan, 1.0]),
        level=np.array([1.0, 1.0, 1.0, 1.0, 1.0, nan, 1.0, 1.0]),
    )
    assert status.tolist() == [
        "above_level",  # CI entirely above
        "possibly_above",  # median above, CI includes the level
        "below_level",  # median equal to the level is not above it
        "below_level",
        "insufficient_sample",  # 19 < 20: no verdict however high
        "no_level",
        "possibly_above",  # no interval at this n: never a certain "above"
        "below_level",  # CI low equal to the level is not above it
    ]


@pytest.mark.parametrize("n_groups", [1, 7, 40_000])
def test_grouped_sorted_values_are_numpy_lexsort_order(n_groups: int) -> None:
    # group by group (7 groups) or in two passes over all values (40,000 groups: more than
    # are sorted one by one), the values must be those of numpy's lexsort((values, codes))
    from beamaudit.api.review.stats import _grouped_sorted_values

    rng = np.random.default_rng(n_groups)
    codes = rng.integers(0, n_groups, 20_000)
    values = np.round(rng.lognormal(0.0, 1.0, 20_000), 1)  # rounded: many ties
    assert np.array_equal(
        _grouped_sorted_values(codes, values, n_groups), values[np.lexsort((values, codes))]
    )


# ------------------------------------------------------------------------ any quantile's interval
@pytest.mark.parametrize("n", range(0, 120))
def test_quantile_ranks_at_one_half_are_the_median_ranks(n: int) -> None:
    r, s, coverage = median_ci_ranks(n)
    qr, qs, qcoverage = quantile_ci_ranks(n, 0.5)
    assert (int(qr[0]), int(qs[0])) == (int(r[0]), int(s[0]))
    if r[0]:
        assert float(qcoverage[0]) == pytest.approx(float(coverage[0]), rel=1e-12)


@pytest.mark.parametrize("p", [0.25, 0.75, 0.9])
@pytest.mark.parametrize("n", [1, 3, 5, 8, 10, 11, 12, 15, 20, 30, 50])
def test_quantile_interval_matches_scipy_quantile_test(p: float, n: int) -> None:
    # scipy.stats.quantile_test(x, p=p).confidence_interval: the order-statistic interval of the
    # p-quantile, NaN for a bound that no rank reaches
    rng = np.random.default_rng(n)
    x = rng.lognormal(0.0, 0.5, n)
    ours = quantile_ci(x, p)
    theirs = sps.quantile_test(x, p=p).confidence_interval(confidence_level=0.95)
    for a, b in ((ours.low, theirs.low), (ours.high, theirs.high)):
        assert (math.isnan(a) and math.isnan(b)) or a == b
    assert ours.value == pytest.approx(np.quantile(x, p))


def test_third_quartile_of_ten_values_by_hand() -> None:
    # B ~ Binomial(10, 0.75): P(B <= 4) = 0.0197 <= 0.025 < P(B <= 5) = 0.0781, so the lower
    # bound is x_(5); P(B = 10) = 0.75^10 = 0.0563 > 0.025, so no upper rank reaches 97.5 % and
    # the interval [x_(5), inf) is one-sided, with coverage 1 - 0.0197 = 0.9803.
    x = [float(v) for v in range(1, 11)]
    ci = quantile_ci(x, 0.75)
    assert ci.value == pytest.approx(7.75)  # Hyndman & Fan 7: x_(7) + 0.75 (x_(8) - x_(7))
    assert (ci.rank_low, ci.rank_high, ci.low) == (5, 0, 5.0)
    assert math.isnan(ci.high)
    assert ci.coverage == pytest.approx(1 - sps.binom.cdf(4, 10, 0.75))
    assert ci.coverage == pytest.approx(0.9803, abs=5e-5)


def test_quantile_interval_refuses_bad_arguments() -> None:
    with pytest.raises(ReviewError, match="quantile p"):
        quantile_ci_ranks(10, 1.0)
    with pytest.raises(ReviewError, match="confidence_level"):
        quantile_ci_ranks(10, 0.75, confidence_level=1.5)


def test_icrp_135_sample_checks() -> None:
    # ICRP 135: at least 20, preferably 30 patients per room for radiography (from memory, medium)
    checks = sample_checks(np.array([19, 20, 29, 30]), np.full(4, 20), np.full(4, 30))
    assert checks.tolist() == ["below_minimum", "below_preferred", "below_preferred", "ok"]
    assert PREFERRED_SAMPLES["radiography"] == 30 and PREFERRED_SAMPLES["mammography"] == 50
    assert all(PREFERRED_SAMPLES[g] >= DEFAULT_MINIMUM_SAMPLES[g] for g in PREFERRED_SAMPLES)


@pytest.mark.parametrize("confidence", [0.9, 0.95, 0.99])
@pytest.mark.parametrize("p", [0.1, 0.25, 0.5, 0.75])
def test_exact_ranks_of_small_samples_equal_scipys(p: float, confidence: float) -> None:
    # samples up to _EXACT_RANKS_MAX_N take their ranks from exact integer sums of the binomial
    # terms (no SciPy import); SciPy's binomial functions give the same ranks and coverages
    from beamaudit.api.review.stats import _EXACT_RANKS_MAX_N, _exact_ranks, _ranks_by_scipy

    sizes = np.r_[0:121, 121:_EXACT_RANKS_MAX_N:13, _EXACT_RANKS_MAX_N]
    r, s, coverage = _ranks_by_scipy(sizes, p, confidence)
    for i, n in enumerate(sizes):
        ours = _exact_ranks(int(n), p, confidence)
        assert ours[:2] == (int(r[i]), int(s[i])), n
        assert (math.isnan(ours[2]) and math.isnan(coverage[i])) or ours[2] == pytest.approx(
            float(coverage[i]), rel=1e-9, abs=1e-12
        ), n


def test_ranks_of_mixed_sizes_are_each_sizes_own() -> None:
    # one call over groups of small and large samples (exact and SciPy ways mixed)
    from beamaudit.api.review.stats import _EXACT_RANKS_MAX_N

    sizes = np.array([0, 5, 6, 40, _EXACT_RANKS_MAX_N, _EXACT_RANKS_MAX_N + 1, 5000, 40])
    r, s, coverage = quantile_ci_ranks(sizes, 0.75)
    for i, n in enumerate(sizes):
        one = quantile_ci_ranks(int(n), 0.75)
        assert (int(r[i]), int(s[i])) == (int(one[0][0]), int(one[1][0]))
        assert (np.isnan(coverage[i]) and np.isnan(one[2][0])) or coverage[i] == one[2][0]


def test_small_samples_need_no_scipy() -> None:
    # a month of one hospital (groups of at most a few hundred) reviews without importing SciPy
    import subprocess
    import sys

    code = (
        "import sys, numpy as np\n"
        "from beamaudit.api.review.stats import quantile_ci, median_ci_ranks\n"
        "median_ci_ranks(np.arange(0, 300)); quantile_ci(np.arange(50.0), 0.75)\n"
        "assert 'scipy' not in sys.modules, 'scipy imported'\n"
    )
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True)
    assert done.returncode == 0, done.stderr


@pytest.mark.parametrize("n_groups", [1, 7, 40_000])
def test_group_medians_are_pandas_groupby_medians(n_groups: int) -> None:
    # the sample median (the middle value, or the mean of the two middle ones) per group, to the
    # bit as pandas' groupby().median() and numpy's median give it; a group without values NaN
    from beamaudit.api.review.stats import group_medians

    rng = np.random.default_rng(n_groups + 1)
    codes = rng.integers(0, n_groups, 20_000)
    values = np.round(rng.lognormal(0.0, 1.0, 20_000), 2)
    ours = group_medians(codes, values, n_groups + 1)  # the last group has no values
    theirs = pd.Series(values).groupby(codes).median()
    assert np.array_equal(ours[theirs.index.to_numpy()], theirs.to_numpy())
    assert np.isnan(ours[-1])
    assert ours[codes[0]] == np.median(values[codes == codes[0]])
