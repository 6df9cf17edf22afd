"""fftgauge.harness.stats against outside sources: scipy.stats (binomial, Mann-Whitney), hand
computations of published procedures (Holm 1979, the normal approximation of U), and seeded
Monte Carlo coverage on distributions whose median is known in closed form."""

from __future__ import annotations

import math

import numpy as np
import pytest
import scipy.stats

from fftgauge.harness.stats import (bootstrap_median_ci, holm_bonferroni, mann_whitney_p, median_ci, quantile_ci,
                           order_statistic_ranks, ratio_ci, relative_spread)


# -- order-statistic interval for the median ------------------------------------------------

@pytest.mark.parametrize("confidence", [0.90, 0.95, 0.99])
def test_ranks_match_the_binomial_from_scipy(confidence):
    """Conover, Practical Nonparametric Statistics, 3rd ed. (1999), CI for a quantile:
    P(x_(l) <= median <= x_(n+1-l)) = 1 - 2 P(B <= l - 1), B ~ Binomial(n, 1/2); the chosen l
    is the largest that still reaches the confidence. Binomial values from scipy.stats.binom."""
    for n in range(6, 81):
        lo, hi, coverage = order_statistic_ranks(n, confidence)
        assert hi == n + 1 - lo
        expected = 1.0 - 2.0 * scipy.stats.binom.cdf(lo - 1, n, 0.5)
        assert coverage == pytest.approx(expected, rel=1e-12, abs=1e-15)
        if expected < confidence:  # only allowed when no rank reaches it (small n)
            assert lo == 1
        tighter = 1.0 - 2.0 * scipy.stats.binom.cdf(lo, n, 0.5)
        assert lo + 1 > (n + 1) // 2 or tighter < confidence


def test_ranks_known_sizes():
    """n = 25 at 95%: x_(8)..x_(18), coverage 1 - 2 P(B <= 7) (computed with scipy.stats.binom);
    n = 5 at 95%: no interval reaches 95%, the full range covers 1 - 2/32 = 0.9375 (hand)."""
    assert order_statistic_ranks(25, 0.95)[:2] == (8, 18)
    assert order_statistic_ranks(25, 0.95)[2] == pytest.approx(1 - 2 * scipy.stats.binom.cdf(7, 25, 0.5))
    assert order_statistic_ranks(5, 0.95) == (1, 5, pytest.approx(0.9375))
    assert order_statistic_ranks(1, 0.95) == (1, 1, 0.0)


def test_median_ci_picks_those_order_statistics():
    x = np.random.default_rng(3).exponential(size=25)
    med, low, high = median_ci(x)
    s = np.sort(x)
    assert med == pytest.approx(np.median(x))
    assert (low, high) == (s[7], s[17])
    assert low <= med <= high


def test_median_ci_coverage_monte_carlo():
    """Exponential(1) has median ln 2 (closed form); seeded, so deterministic. The coverage
    over 4000 trials must match the exact binomial coverage within 4 binomial standard errors."""
    rng = np.random.default_rng(12345)
    trials, n = 4000, 25
    data = rng.exponential(size=(trials, n))
    hits = 0
    for row in data:
        _, low, high = median_ci(row)
        hits += low <= math.log(2) <= high
    exact = order_statistic_ranks(n)[2]
    se = math.sqrt(exact * (1 - exact) / trials)
    assert abs(hits / trials - exact) < 4 * se


def test_median_ci_rejects_empty_and_bad_confidence():
    with pytest.raises(ValueError, match="empty"):
        median_ci([])
    with pytest.raises(ValueError, match="confidence"):
        median_ci([1.0, 2.0], confidence=1.5)


def test_bootstrap_median_ci_contains_median_and_covers():
    """Lognormal(0, 0.5) has median exp(0) = 1 (closed form); percentile bootstrap coverage
    over 200 seeded trials of 25 samples is at least 88% (nominal 95%)."""
    rng = np.random.default_rng(7)
    hits = 0
    for _ in range(200):
        x = rng.lognormal(0.0, 0.5, size=25)
        med, low, high = bootstrap_median_ci(x, n_resamples=500, rng=rng)
        assert low <= med <= high
        hits += low <= 1.0 <= high
    assert hits / 200 >= 0.88
    assert bootstrap_median_ci([2.0, 2.0, 2.0]) == (2.0, 2.0, 2.0)


# -- spread ---------------------------------------------------------------------------------

def test_relative_spread_is_iqr_over_median():
    """[1..5]: Q1 = 2, Q3 = 4 (linear interpolation), median 3 -> 2/3 by hand; and equal to
    scipy.stats.iqr / median on a random sample."""
    assert relative_spread([1, 2, 3, 4, 5]) == pytest.approx(2 / 3)
    x = np.random.default_rng(1).lognormal(size=40)
    assert relative_spread(x) == pytest.approx(scipy.stats.iqr(x) / np.median(x))
    assert relative_spread([4.0, 4.0, 4.0]) == 0.0
    assert relative_spread([-1.0, 0.0, 1.0]) == math.inf


# -- ratio of medians -----------------------------------------------------------------------

def test_ratio_ci_point_is_ratio_of_medians():
    old = [1.0, 2.0, 3.0, 10.0]
    new = [3.0, 4.0, 5.0]
    ratio, low, high = ratio_ci(old, new, n_resamples=500, rng=0)
    assert ratio == pytest.approx(4.0 / 2.5)
    assert low <= ratio <= high


def test_ratio_ci_coverage_on_lognormal_samples():
    """Lognormal(mu, sigma) has median exp(mu) (closed form), so the true ratio of medians is
    exp(mu_new - mu_old). The interval must contain it in >= 90% of 200 seeded trials."""
    rng = np.random.default_rng(2026)
    mu_old, mu_new, sigma = math.log(1e-4), math.log(1.2e-4), 0.3
    true_ratio = math.exp(mu_new - mu_old)
    hits = 0
    for _ in range(200):
        old = rng.lognormal(mu_old, sigma, size=25)
        new = rng.lognormal(mu_new, sigma, size=25)
        ratio, low, high = ratio_ci(old, new, n_resamples=1000, rng=rng)
        assert low <= ratio <= high
        hits += low <= true_ratio <= high
    assert hits / 200 >= 0.90


def test_ratio_ci_degenerate_and_bad_input():
    assert ratio_ci([2.0, 2.0], [3.0, 3.0], rng=0) == (1.5, 1.5, 1.5)
    with pytest.raises(ValueError, match="positive"):
        ratio_ci([0.0, 0.0], [1.0])
    with pytest.raises(ValueError, match="empty"):
        ratio_ci([], [1.0])


# -- Mann-Whitney ---------------------------------------------------------------------------

def test_mann_whitney_exact_small_case():
    """Mann & Whitney, Ann. Math. Statist. 18 (1947) 50-60: under the null every one of the
    C(6, 3) = 20 rank splits is equally likely; complete separation (U = 0) has probability
    1/20 on each side, so the two-sided p-value is 2/20 = 0.1 (hand computation)."""
    assert mann_whitney_p([1.0, 2.0, 3.0], [4.0, 5.0, 6.0]) == pytest.approx(0.1)
    assert mann_whitney_p([4.0, 5.0, 6.0], [1.0, 2.0, 3.0]) == pytest.approx(0.1)


def _hand_mann_whitney(a: np.ndarray, b: np.ndarray) -> float:
    """Normal approximation of U with tie and continuity corrections (common practice):
    mu = n1 n2 / 2, sigma^2 = n1 n2 / 12 ((n + 1) - sum(t^3 - t) / (n (n - 1)))."""
    n1, n2 = len(a), len(b)
    n = n1 + n2
    ranks = scipy.stats.rankdata(np.concatenate([a, b]))
    u1 = ranks[:n1].sum() - n1 * (n1 + 1) / 2
    _, counts = np.unique(np.concatenate([a, b]), return_counts=True)
    ties = float(np.sum(counts**3 - counts))
    sigma = math.sqrt(n1 * n2 / 12 * ((n + 1) - ties / (n * (n - 1))))
    z = (abs(u1 - n1 * n2 / 2) - 0.5) / sigma
    return math.erfc(z / math.sqrt(2))


def test_mann_whitney_asymptotic_with_ties_matches_hand_formula():
    rng = np.random.default_rng(11)
    a = np.round(rng.normal(10.0, 1.0, size=30), 1)  # rounding makes ties
    b = np.round(rng.normal(10.5, 1.0, size=28), 1)
    p = mann_whitney_p(a, b)
    assert p == pytest.approx(_hand_mann_whitney(a, b), rel=1e-10)
    assert p == pytest.approx(scipy.stats.mannwhitneyu(a, b, alternative="two-sided").pvalue)
    assert 0.0 <= p <= 1.0


def test_mann_whitney_identical_values():
    assert mann_whitney_p([1.0, 1.0, 1.0], [1.0, 1.0]) == 1.0


# -- Holm -----------------------------------------------------------------------------------

def test_holm_hand_examples():
    """Holm, Scand. J. Statist. 6 (1979) 65-70, worked by hand at alpha = 0.05:
    sorted 0.005 <= 0.05/4, 0.01 <= 0.05/3, 0.03 > 0.05/2 -> stop; and 0.01 <= 0.05/3,
    0.02 <= 0.05/2, 0.03 <= 0.05/1 -> all rejected (Bonferroni would reject only 0.01)."""
    assert holm_bonferroni([0.01, 0.04, 0.03, 0.005], 0.05) == [True, False, False, True]
    assert holm_bonferroni([0.03, 0.01, 0.02], 0.05) == [True, True, True]
    assert holm_bonferroni([0.02, 0.5], 0.01) == [False, False]
    assert holm_bonferroni([], 0.05) == []


def test_holm_matches_adjusted_p_formulation():
    """Holm (1979) restated with adjusted p-values: p~_(j) = max_{i<=j} min(1, (m-i+1) p_(i));
    H_(j) is rejected iff p~_(j) <= alpha. An independent formulation, on random p-values."""
    rng = np.random.default_rng(5)
    for _ in range(300):
        m = int(rng.integers(1, 12))
        p = rng.uniform(0, 0.1, size=m) ** rng.uniform(0.5, 2)
        order = np.argsort(p, kind="stable")
        adjusted = np.maximum.accumulate(np.minimum(1.0, (m - np.arange(m)) * p[order]))
        expected = [False] * m
        for j, i in enumerate(order):
            expected[i] = bool(adjusted[j] <= 0.05)
        assert holm_bonferroni(p.tolist(), 0.05) == expected


def test_holm_rejects_bad_alpha():
    with pytest.raises(ValueError, match="alpha"):
        holm_bonferroni([0.1], alpha=0.0)


# -- quantile_ci ------------------------------------------------------------------------------

def test_quantile_ci_ranks_from_the_binomial_n100_q10():
    """n = 100, q = 0.1, 95%: the ranks follow from Binomial(100, 0.1) (Conover 1999, interval
    for a quantile): P(B <= 4) = 0.0237 <= 0.025 < P(B <= 5), so the low rank is 5;
    P(B >= 17) = 0.0206 <= 0.025 < P(B >= 16), so the high rank is 17. The probabilities are
    scipy.stats.binom's, checked here rather than trusted from the text."""
    binom = scipy.stats.binom(100, 0.1)
    assert binom.cdf(4) <= 0.025 < binom.cdf(5)
    assert binom.sf(16) <= 0.025 < binom.sf(15)
    x = np.arange(1.0, 101.0)  # the sorted sample is its own rank
    value, low, high = quantile_ci(np.random.default_rng(3).permutation(x), 0.1)
    assert (value, low, high) == (10.0, 5.0, 17.0)


def test_quantile_ci_coverage_monte_carlo():
    """Seeded Monte Carlo: the interval holds the true 10th percentile of an exponential
    distribution (-ln 0.9) in at least ~95% of 2000 samples of 40."""
    rng = np.random.default_rng(11)
    true = -math.log(0.9)
    hits = sum(low <= true <= high for _, low, high in (quantile_ci(rng.exponential(size=40), 0.1)
                                                          for _ in range(2000)))
    assert hits / 2000 >= 0.94


def test_quantile_ci_few_samples_falls_back_to_the_extremes_and_rejects_bad_input():
    value, low, high = quantile_ci([3.0, 1.0, 2.0], 0.1)
    assert (value, low, high) == (1.0, 1.0, 3.0)
    with pytest.raises(ValueError):
        quantile_ci([], 0.1)
    with pytest.raises(ValueError, match="q must be"):
        quantile_ci([1.0, 2.0], 1.0)
    with pytest.raises(ValueError, match="confidence"):
        quantile_ci([1.0, 2.0], 0.1, confidence=1.5)
