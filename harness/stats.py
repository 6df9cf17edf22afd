"""The statistics the timer and the gate rest on: medians with distribution-free intervals,
a relative spread, the ratio of two medians with a bootstrap interval, a rank test and a
multiple-testing correction.

Timing samples are skewed (a floor set by the machine, a long right tail of interruptions),
so everything here is built on the median and on methods that assume no distribution:
order statistics, the bootstrap, ranks.
"""

from __future__ import annotations

import math
from fractions import Fraction
from math import comb
from typing import Sequence

import numpy as np
import scipy.stats

#: Bootstrap resamples used by :func:`ratio_ci` and :func:`bootstrap_median_ci` by default.
DEFAULT_RESAMPLES = 4000


def _as_samples(samples: Sequence[float], what: str = "samples") -> np.ndarray:
    arr = np.asarray(samples, dtype=float).ravel()
    if arr.size == 0:
        raise ValueError(f"{what} is empty; at least one value is needed")
    return arr


def order_statistic_ranks(n: int, confidence: float = 0.95) -> tuple[int, int, float]:
    """Return the ranks of the order statistics that bracket the median, and their coverage.

    The interval ``[x_(lo), x_(hi)]`` of the sorted sample (ranks from 1) contains the
    population median with probability ``P(lo <= B <= hi - 1)``, ``B ~ Binomial(n, 1/2)``,
    whatever the (continuous) distribution. The ranks are symmetric, ``hi = n + 1 - lo``,
    with ``lo`` the largest rank whose coverage ``1 - 2 P(B <= lo - 1)`` is at least
    ``confidence``. The binomial sums are computed exactly in integers.

    Source: Conover, Practical Nonparametric Statistics, 3rd ed. (1999), confidence
    interval for a quantile; common practice.

    Parameters
    ----------
    n : number of samples (>= 1).
    confidence : wanted coverage, in (0, 1).

    Returns
    -------
    (lo, hi, coverage) : ranks from 1 and the exact coverage of ``[x_(lo), x_(hi)]``. When
        even the full range ``[x_(1), x_(n)]`` covers less than ``confidence`` (n <= 5 at
        95%), that range is returned with its smaller coverage ``1 - 2**(1 - n)``.

    Raises
    ------
    ValueError
        When ``n < 1`` or ``confidence`` is not in (0, 1).
    """
    if n < 1:
        raise ValueError(f"need at least one sample, got n = {n}")
    if not 0.0 < confidence < 1.0:
        raise ValueError(f"confidence must be in (0, 1), got {confidence!r}")
    total = 2**n
    alpha_total = (1 - Fraction(confidence)) * total  # exact rational
    lo, tail = 1, comb(n, 0)  # tail = 2**n * P(B <= lo - 1)
    while lo + 1 <= (n + 1) // 2:
        next_tail = tail + comb(n, lo)
        if 2 * next_tail > alpha_total:
            break
        lo, tail = lo + 1, next_tail
    coverage = 1.0 - float(Fraction(2 * tail, total))
    return lo, n + 1 - lo, coverage


def median_ci(samples: Sequence[float], confidence: float = 0.95) -> tuple[float, float, float]:
    """Return the sample median and a distribution-free confidence interval for the median.

    The interval is the pair of order statistics :func:`order_statistic_ranks` chooses.

    Source: Conover, Practical Nonparametric Statistics, 3rd ed. (1999), confidence
    interval for a quantile; common practice.

    Returns
    -------
    (median, low, high) : floats with ``low <= median <= high``.

    Raises
    ------
    ValueError
        When ``samples`` is empty or ``confidence`` is not in (0, 1).
    """
    arr = np.sort(_as_samples(samples))
    lo, hi, _ = order_statistic_ranks(arr.size, confidence)
    return float(np.median(arr)), float(arr[lo - 1]), float(arr[hi - 1])


#: The low quantile the timing rows report beside the median, and the statistic the gate's
#: stored mode compares (see :func:`quantile_ci`).
LOW_QUANTILE = 0.10


def quantile_ci(samples: Sequence[float], q: float, confidence: float = 0.95) -> tuple[float, float, float]:
    """Return the sample ``q``-quantile and a distribution-free confidence interval for it.

    The estimate is the order statistic of rank ``ceil(q n)`` (at least 1); the interval is
    ``[x_(lo), x_(hi)]`` with ``lo`` the largest rank such that ``P(B <= lo - 1) <= a/2`` and
    ``hi`` the smallest such that ``P(B >= hi) <= a/2``, ``B ~ Binomial(n, q)`` and
    ``a = 1 - confidence``; where no rank satisfies a side (few samples, extreme ``q``) that
    side is the sample's extreme, and the interval covers less than ``confidence``.

    Why a low quantile at all: noise from a shared machine (another process taking the
    CPU, interrupts, a busy neighbour) only ever *adds* time, so on a loaded machine the
    median moves with the load while the fastest samples keep describing the code (Chen &
    Revels, "Robust benchmarking in noisy environments", arXiv:1608.04295, 2016, argue for the
    minimum on this ground; from memory). The 10th percentile keeps most of that robustness
    without resting on a single sample. ``benchmarks/bench_timing.py reproducibility`` and
    ``benchmarks/bench_gate.py`` measure what it buys here.

    Source: Conover, Practical Nonparametric Statistics, 3rd ed. (1999), confidence interval
    for a quantile; common practice.

    Returns
    -------
    (value, low, high) : floats with ``low <= value <= high``.

    Raises
    ------
    ValueError
        When ``samples`` is empty, or ``q`` or ``confidence`` is not in (0, 1).
    """
    if not 0.0 < q < 1.0:
        raise ValueError(f"q must be in (0, 1), got {q!r}")
    if not 0.0 < confidence < 1.0:
        raise ValueError(f"confidence must be in (0, 1), got {confidence!r}")
    arr = np.sort(_as_samples(samples))
    n = arr.size
    rank = min(n, max(1, math.ceil(q * n)))
    tail = (1.0 - confidence) / 2.0
    cdf = scipy.stats.binom.cdf(np.arange(n + 1), n, q)  # cdf[k] = P(B <= k)
    lows = [r for r in range(1, rank + 1) if cdf[r - 1] <= tail]
    highs = [r for r in range(rank, n + 1) if 1.0 - cdf[r - 1] <= tail]
    lo = max(lows) if lows else 1
    hi = min(highs) if highs else n
    return float(arr[rank - 1]), float(arr[lo - 1]), float(arr[hi - 1])


def _rng(rng: int | np.random.Generator | None) -> np.random.Generator:
    return rng if isinstance(rng, np.random.Generator) else np.random.default_rng(rng)


def bootstrap_median_ci(samples: Sequence[float], confidence: float = 0.95,
                        n_resamples: int = DEFAULT_RESAMPLES,
                        rng: int | np.random.Generator | None = None) -> tuple[float, float, float]:
    """Return the sample median and a percentile-bootstrap confidence interval for it.

    A second opinion on :func:`median_ci` (scipy.stats.bootstrap, percentile method).

    Returns
    -------
    (median, low, high) : floats.

    Raises
    ------
    ValueError
        When ``samples`` is empty.
    """
    arr = _as_samples(samples)
    med = float(np.median(arr))
    if arr.size == 1 or np.all(arr == arr[0]):
        return med, med, med
    res = scipy.stats.bootstrap((arr,), np.median, n_resamples=n_resamples, vectorized=True,
                                confidence_level=confidence, method="percentile", rng=_rng(rng))
    return med, float(res.confidence_interval.low), float(res.confidence_interval.high)


def relative_spread(samples: Sequence[float]) -> float:
    """Return the interquartile range over the median, ``(Q3 - Q1) / |median|``.

    Quartiles by linear interpolation between order statistics (numpy's default). The IQR
    ignores the tail of interruptions that the standard deviation would be dominated by.

    Returns
    -------
    float : the relative IQR (0 for identical samples); ``inf`` when the median is 0.

    Raises
    ------
    ValueError
        When ``samples`` is empty.
    """
    arr = _as_samples(samples)
    q1, med, q3 = np.percentile(arr, [25.0, 50.0, 75.0])
    if med == 0.0:
        return float("inf") if q3 > q1 else 0.0
    return float((q3 - q1) / abs(med))


def _median_ratio(old: np.ndarray, new: np.ndarray, axis: int = -1) -> np.ndarray:
    return np.median(new, axis=axis) / np.median(old, axis=axis)


def ratio_ci(old_samples: Sequence[float], new_samples: Sequence[float], confidence: float = 0.95,
             n_resamples: int = DEFAULT_RESAMPLES,
             rng: int | np.random.Generator | None = None) -> tuple[float, float, float]:
    """Return ``median(new) / median(old)`` with a bootstrap confidence interval.

    The two sets of samples are independent runs (a baseline and a candidate), so each is
    resampled with replacement on its own (a two-sample bootstrap) and the statistic is
    recomputed on every pair of resamples. The interval is the percentile interval of those
    ratios: it respects transformations (the interval for the log ratio is the log of this
    one, so "x% slower" and "x% faster" are treated alike) and, unlike BCa, needs no
    jackknife estimate of acceleration, which is unreliable for the median. Its coverage on
    skewed (lognormal) timing samples is checked in the tests.

    Source: Efron & Tibshirani, An Introduction to the Bootstrap, Chapman & Hall (1993),
    two-sample problems and percentile intervals (from memory; coverage verified
    numerically in the tests); computed with scipy.stats.bootstrap.

    Returns
    -------
    (ratio, low, high) : floats; ``ratio > 1`` means the new samples are slower.

    Raises
    ------
    ValueError
        When either set is empty or ``median(old)`` is not positive.
    """
    old = _as_samples(old_samples, "old_samples")
    new = _as_samples(new_samples, "new_samples")
    if not np.median(old) > 0.0:
        raise ValueError("the median of old_samples must be positive to form a ratio")
    ratio = float(_median_ratio(old, new))
    if old.size == 1 and new.size == 1:
        return ratio, ratio, ratio
    res = scipy.stats.bootstrap((old, new), _median_ratio, n_resamples=n_resamples, paired=False,
                                vectorized=True, confidence_level=confidence, method="percentile",
                                rng=_rng(rng))
    low, high = float(res.confidence_interval.low), float(res.confidence_interval.high)
    if np.isnan(low) or np.isnan(high):  # every resample gave the same ratio
        return ratio, ratio, ratio
    return ratio, low, high


def mann_whitney_p(old: Sequence[float], new: Sequence[float]) -> float:
    """Return the two-sided p-value of the Mann-Whitney U test of ``old`` against ``new``.

    scipy.stats.mannwhitneyu with its default method choice: the exact distribution of U
    when a sample has at most 8 values and there are no ties, the normal approximation with
    tie and continuity corrections otherwise.

    Source: Mann & Whitney, Ann. Math. Statist. 18 (1947) 50-60; computed with
    scipy.stats.mannwhitneyu.

    Returns
    -------
    float : the p-value in [0, 1]; 1.0 when every value in both sets is the same.

    Raises
    ------
    ValueError
        When either set is empty.
    """
    a = _as_samples(old, "old")
    b = _as_samples(new, "new")
    if np.all(a == a[0]) and np.all(b == a[0]):
        return 1.0
    return float(scipy.stats.mannwhitneyu(a, b, alternative="two-sided").pvalue)


def holm_bonferroni(p_values: Sequence[float], alpha: float = 0.05) -> list[bool]:
    """Return which hypotheses Holm's step-down procedure rejects at family-wise level ``alpha``.

    Sort the m p-values ascending, p_(1) <= ... <= p_(m); reject H_(1), ..., H_(k-1) where k
    is the first index with p_(k) > alpha / (m - k + 1); reject none if p_(1) fails. The
    family-wise error rate is at most ``alpha`` whatever the dependence between the tests.

    Source: Holm, "A simple sequentially rejective multiple test procedure", Scand. J.
    Statist. 6 (1979) 65-70.

    Returns
    -------
    list[bool] : ``True`` for each rejected hypothesis, in the order of ``p_values``.

    Raises
    ------
    ValueError
        When ``alpha`` is not in (0, 1).
    """
    if not 0.0 < alpha < 1.0:
        raise ValueError(f"alpha must be in (0, 1), got {alpha!r}")
    p = [float(v) for v in p_values]
    m = len(p)
    order = sorted(range(m), key=lambda i: p[i])
    reject = [False] * m
    for k, i in enumerate(order):  # k = 0 .. m-1, threshold alpha / (m - k)
        if not p[i] <= alpha / (m - k):
            break
        reject[i] = True
    return reject
