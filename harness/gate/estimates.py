"""The gate's per-case estimates: candidate time / baseline time with an interval and a p-value.

- **A/B** (both sides measured in this run, block pair by block pair in a random order,
  :class:`fftgauge.harness.gate.sampling.WorkerSampler`). The default estimate is formed from the
  pairs (:func:`estimate_paired`): each pair gives the log of the ratio of its two block
  medians, ``d_k = log(median new_k / median old_k)``; the ratio is ``exp(median d_k)``, its
  interval the distribution-free order-statistic interval of that median
  (:func:`fftgauge.harness.stats.median_ci`) and the p-value the two-sided Wilcoxon signed-rank test
  of the ``d_k`` against 0. The two blocks of a pair ran a few milliseconds apart on the same
  machine state, so whatever slows the machine for longer than that divides out of ``d_k``;
  and because the order inside each pair is random, ``d_k`` is symmetric about 0 when nothing
  changed, which is what the signed-rank test needs. Blocks, not single samples, are the unit
  because the samples of one block are not independent of each other. The pooled alternative
  (:func:`estimate_ab`: ratio of the medians of all samples, two-sample bootstrap interval
  :func:`fftgauge.harness.stats.ratio_ci`, Mann-Whitney p-value) treats the two sides as
  independent samples; on the project's loaded 2-core machine the halves of one 64-pair run of
  numpy against numpy gave pooled ratios from 0.946 to 1.083 and paired ones from 0.988 to
  1.022, which is why pairing is the default.
- **Stored** (only the candidate measured; the baseline a per-case summary of stored runs,
  :func:`stored_baseline`): the estimate is formed on the log scale (:func:`estimate_stored`).
  The times compared are the 10th percentiles of the per-call samples
  (:data:`fftgauge.harness.stats.LOW_QUANTILE`) whenever every stored run holds them, the medians
  otherwise: the two sides ran at different moments, under different load from the machine's
  other tenants, and load only ever adds time, which moves the median and leaves the fastest
  samples mostly alone.
- **Referenced** (:func:`estimate_referenced`): this run's A/B ratio against a fixed reference
  implementation, compared with the stored runs' A/B ratios of the same pair.

The yardstick correction (stored mode)
--------------------------------------
Every run times the yardstick (:mod:`fftgauge.harness.gate.yardstick`). When each stored run ``i``
used has a comparable yardstick record ``Y_i`` and this run measured one, every time is put
in yardstick units first: the baseline values are ``v_i = b_i / Y_i`` and the candidate's is
``m / Y_now`` (``b_i``, ``m``, ``Y_i`` and ``Y_now`` all in the same statistic, the 10th
percentile or the median); the reported ``ratio`` is ``(m / Y_now) / median_i(v_i)``, and
``ratio_raw`` the uncorrected ``m / median_i(b_i)``. For a single baseline run that is exactly
``raw ratio / (Y_now / Y_1)``: a machine 10% slower in everything makes both the case and the
yardstick 10% slower, and the corrected ratio stays 1.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any, Sequence

import numpy as np
import scipy.stats

from fftgauge.harness.stats import LOW_QUANTILE, mann_whitney_p, median_ci, quantile_ci, ratio_ci

#: The statistics a stored record may hold, and the keys of (value, low, high) of each.
STATISTICS = {"median": ("seconds", "seconds_low", "seconds_high"),
              "p10": ("seconds_p10", "seconds_p10_low", "seconds_p10_high"),
              "ratio": ("ratio", "ratio_low", "ratio_high"),
              "ab_ratio": ("ab_ratio", "ab_ratio_low", "ab_ratio_high")}


def stat_triple(record: dict[str, Any], statistic: str) -> tuple[float, float, float] | None:
    """Return ``(value, low, high)`` of ``statistic`` in a stored row or yardstick record, or
    None when the record lacks a positive value of it (a missing bound reads as 0)."""
    keys = STATISTICS[statistic]
    value = record.get(keys[0])
    if not isinstance(value, (int, float)) or isinstance(value, bool) or not value > 0:
        return None
    return float(value), float(record.get(keys[1]) or 0.0), float(record.get(keys[2]) or 0.0)


def common_statistic(records: Sequence[dict[str, Any]]) -> str:
    """Return ``p10`` when every record holds a 10th percentile, else ``median``."""
    return "p10" if records and all(stat_triple(r, "p10") is not None for r in records) else "median"


def sample_statistic(samples: Sequence[float], statistic: str, confidence: float) -> tuple[float, float, float]:
    """Return ``(value, low, high)`` of ``statistic`` over fresh samples (order-statistic intervals).

    Raises
    ------
    ValueError
        When ``samples`` is empty.
    """
    if statistic == "p10":
        return quantile_ci(samples, LOW_QUANTILE, confidence)
    return median_ci(samples, confidence)


@dataclass(frozen=True)
class Estimate:
    """One case's comparison: ``ratio`` = candidate time / baseline time with its interval.

    ``seconds``/``seconds_low``/``seconds_high`` are the candidate's median per-call time and
    its distribution-free interval, in every mode (a stored-mode ratio may compare 10th
    percentiles: the rows carry those in fields of their own); ``baseline_seconds`` the
    baseline's median (raw seconds; NaN where unknown); ``ratio_raw`` the ratio before the
    yardstick correction, in the statistic compared (stored mode), or the plain ratio of the
    two sides' medians (A/B mode: unpaired); ``corrected`` whether the yardstick correction was
    applied; ``method`` how the interval and p-value were formed.
    """

    ratio: float
    ratio_low: float
    ratio_high: float
    p_value: float
    seconds: float
    seconds_low: float
    seconds_high: float
    baseline_seconds: float
    ratio_raw: float
    corrected: bool
    method: str


@dataclass(frozen=True)
class StoredBaseline:
    """One case's baseline summarised from ``runs`` stored runs (:func:`stored_baseline`).

    Attributes
    ----------
    value : the centre, median of the per-run values (yardstick units when ``corrected``).
    raw_seconds : median of the runs' raw values of ``statistic`` (seconds, not yardstick units).
    centre_var : variance of ``log(value)`` (log scale).
    between_var : variance of a new run's log median around the centre beyond its own
        within-run noise (run-to-run variation); 0 for a single run.
    dof : degrees of freedom of the variances estimated from the runs (``runs - 1``), None
        for a single run.
    runs : stored runs that hold the case.
    corrected : values are in yardstick units.
    statistic : what the values are (:data:`STATISTICS`): ``p10``, the 10th percentile of
        the per-call times, when every run holding the case stored it, else ``median``.
    yardstick_statistic : the same for the yardstick records of a corrected baseline.
    median_seconds : median of the runs' median seconds (what the rows' ``baseline_seconds``
        report whatever the statistic compared); None when not given.
    """

    value: float
    raw_seconds: float
    centre_var: float
    between_var: float
    dof: int | None
    runs: int
    corrected: bool
    statistic: str = "median"
    yardstick_statistic: str = "median"
    median_seconds: float | None = None


def _z(confidence: float) -> float:
    return float(scipy.stats.norm.ppf(0.5 + confidence / 2.0))


def log_variance_from_interval(centre: float, low: float, high: float, confidence: float = 0.95) -> float:
    """Return the variance on the log scale that a ``confidence`` interval ``[low, high]`` implies.

    ``se = (ln high - ln low) / (2 z)`` with ``z`` the normal quantile of the interval
    (common practice: a symmetric interval on the log scale, delta method). When ``low`` is
    not positive (a time at the loop's overhead floor) the upper half is used alone.

    Returns
    -------
    float : ``se ** 2`` (0 when the interval has no width).
    """
    z = _z(confidence)
    if not centre > 0 or not high > 0:
        return 0.0
    if low > 0:
        se = (math.log(high) - math.log(low)) / (2 * z)
    else:
        se = (math.log(high) - math.log(centre)) / z
    return max(0.0, se) ** 2


def estimate_ab(old: Sequence[float], new: Sequence[float], confidence: float = 0.95,
                resamples: int = 2000, seed: int | None = None) -> Estimate:
    """Return the A/B estimate: median(new) / median(old), bootstrap interval, Mann-Whitney p.

    Raises
    ------
    ValueError
        When a side has no samples or the old median is not positive.
    """
    ratio, low, high = ratio_ci(old, new, confidence, n_resamples=resamples, rng=seed)
    med, med_low, med_high = median_ci(new, confidence)
    return Estimate(ratio=ratio, ratio_low=low, ratio_high=high, p_value=mann_whitney_p(old, new),
                    seconds=med, seconds_low=med_low, seconds_high=med_high,
                    baseline_seconds=float(np.median(old)), ratio_raw=ratio, corrected=False,
                    method="bootstrap ratio of medians, Mann-Whitney U")


def pair_log_ratios(old: Sequence[float], new: Sequence[float], samples_per_block: int) -> np.ndarray:
    """Return ``d_k = log(median(new block k) / median(old block k))`` for every complete pair of blocks.

    The samples are in the order taken, ``samples_per_block`` per block, block k of one side
    paired with block k of the other.

    Raises
    ------
    ValueError
        When there is no complete pair, or a block median is not positive (at the timing
        loop's overhead floor).
    """
    o = np.asarray(old, dtype=float)
    w = np.asarray(new, dtype=float)
    k = min(o.size, w.size) // samples_per_block
    if k == 0:
        raise ValueError("no complete pair of blocks to compare")
    mo = np.median(o[: k * samples_per_block].reshape(k, samples_per_block), axis=1)
    mw = np.median(w[: k * samples_per_block].reshape(k, samples_per_block), axis=1)
    if not (np.all(mo > 0) and np.all(mw > 0)):
        raise ValueError("a block's median time is at or below the timing loop's overhead floor; "
                         "the case is too fast to compare")
    return np.log(mw) - np.log(mo)


def estimate_paired(old: Sequence[float], new: Sequence[float], samples_per_block: int,
                    confidence: float = 0.95) -> Estimate:
    """Return the paired A/B estimate (see the module docstring): ``exp(median d_k)``, the
    order-statistic interval of that median, and the Wilcoxon signed-rank p-value.

    Sources: Conover, Practical Nonparametric Statistics, 3rd ed. (1999), interval for a
    quantile (via :func:`fftgauge.harness.stats.median_ci`); Wilcoxon, "Individual comparisons by
    ranking methods", Biometrics Bulletin 1 (1945) 80-83, computed with
    scipy.stats.wilcoxon. ``ratio_raw`` is the plain ratio of the two sides' medians.

    Raises
    ------
    ValueError
        As :func:`pair_log_ratios`.
    """
    d = pair_log_ratios(old, new, samples_per_block)
    med_d, low_d, high_d = median_ci(d, confidence)
    if d.size < 2 or np.all(d == 0.0):
        p = 1.0
    else:
        p = float(scipy.stats.wilcoxon(d, alternative="two-sided").pvalue)
    med, med_low, med_high = median_ci(new, confidence)
    base = float(np.median(old))
    return Estimate(ratio=math.exp(med_d), ratio_low=math.exp(low_d), ratio_high=math.exp(high_d), p_value=p,
                    seconds=med, seconds_low=med_low, seconds_high=med_high, baseline_seconds=base,
                    ratio_raw=med / base if base > 0 else float("nan"), corrected=False,
                    method=f"paired blocks ({d.size} pairs): median of per-pair ratios, Wilcoxon signed-rank")


def stored_baseline(values: Sequence[tuple[float, float, float]],
                    yardsticks: Sequence[tuple[float, float, float]] | None = None,
                    confidence: float = 0.95, statistic: str = "median",
                    yardstick_statistic: str = "median",
                    medians: Sequence[float] | None = None) -> StoredBaseline:
    """Return a case's baseline from the stored runs that hold it.

    Parameters
    ----------
    values : per run ``(value, low, high)`` of ``statistic``: its estimate and interval.
    yardsticks : per run ``(value, low, high)`` of the yardstick's ``yardstick_statistic``,
        to put the values in yardstick units, or None for raw seconds.
    confidence : coverage of the stored intervals.
    statistic, yardstick_statistic : recorded in the result (:data:`STATISTICS`).
    medians : per run the median seconds, summarised into ``median_seconds``; default: the
        values themselves when ``statistic`` is ``median``.

    Method (one-way random-effects decomposition on the log scale; common practice): with
    ``l_i = log v_i`` (``v_i`` the run's value, divided by its yardstick when given) and
    ``w_i`` the within-run variance of ``l_i`` (from its interval and its yardstick's,
    :func:`log_variance_from_interval`), the centre is ``median(v_i)``, its variance
    ``s^2 / K`` (``s`` the sample standard deviation of ``l_i``, at least the root-mean
    within-run variance), and the run-to-run variance ``tau^2 = max(0, s^2 - mean(w_i))``.
    A single run gives ``w_1`` as the centre's variance and ``tau^2 = 0``: it cannot show
    how much runs vary from day to day.

    Raises
    ------
    ValueError
        When ``values`` is empty or a value is not positive.
    """
    if not values:
        raise ValueError("a stored baseline needs at least one run")
    raw = np.array([v[0] for v in values], dtype=float)
    if not np.all(raw > 0):
        raise ValueError("stored baseline times must be positive")
    within = np.array([log_variance_from_interval(*v, confidence) for v in values])
    scaled = raw.copy()
    if yardsticks is not None:
        ys = np.array([y[0] for y in yardsticks], dtype=float)
        scaled = raw / ys
        within = within + np.array([log_variance_from_interval(*y, confidence) for y in yardsticks])
    k = len(values)
    if medians is None and statistic == "median":
        medians = raw
    kinds = {"corrected": yardsticks is not None, "statistic": statistic, "yardstick_statistic": yardstick_statistic,
             "median_seconds": None if medians is None or not len(medians) else float(np.median(medians))}
    if k == 1:
        return StoredBaseline(value=float(scaled[0]), raw_seconds=float(raw[0]), centre_var=float(within[0]),
                              between_var=0.0, dof=None, runs=1, **kinds)
    logs = np.log(scaled)
    s2 = max(float(np.var(logs, ddof=1)), float(np.mean(within)))
    return StoredBaseline(value=float(np.median(scaled)), raw_seconds=float(np.median(raw)), centre_var=s2 / k,
                          between_var=max(0.0, s2 - float(np.mean(within))), dof=k - 1, runs=k, **kinds)


def estimate_stored(baseline: StoredBaseline, new: Sequence[float], yardstick_now: dict[str, Any] | None,
                    confidence: float = 0.95) -> Estimate:
    """Return the stored-mode estimate of one case (log scale, delta method).

    ``log ratio = log(m / Y_now) - log(value)`` (``m`` the candidate's ``baseline.statistic``,
    median or 10th percentile, of its samples; ``Y_now`` this run's yardstick in
    ``baseline.yardstick_statistic``, only when ``baseline.corrected``), with variance
    ``var_m + var_Y + centre_var + between_var`` (the candidate's and the yardstick's
    within-run variances from their distribution-free median intervals, the baseline
    centre's, and the run-to-run variance a new run shows even when nothing changed). The
    interval and the two-sided p-value use Student's t with the Welch-Satterthwaite degrees
    of freedom ``V^2 / ((centre_var + between_var)^2 / dof)`` (the within-run terms counted
    as exact), or the normal distribution for a single stored run. Sources: delta method
    and Welch-Satterthwaite approximation (Satterthwaite, Biometrics Bulletin 2 (1946)
    110-114); common practice.

    Raises
    ------
    ValueError
        When ``new`` is empty, its median is not positive, or ``baseline.corrected`` and
        ``yardstick_now`` is None.
    """
    m, low, high = sample_statistic(new, baseline.statistic, confidence)
    if not m > 0:
        raise ValueError(f"the candidate's {baseline.statistic} time is at or below the timing loop's overhead floor")
    value, var = m, log_variance_from_interval(m, low, high, confidence)
    if baseline.corrected:
        yard = None if yardstick_now is None else stat_triple(yardstick_now, baseline.yardstick_statistic)
        if yard is None:
            raise ValueError("a yardstick-corrected baseline needs this run's yardstick")
        value = m / yard[0]
        var += log_variance_from_interval(*yard, confidence)
    ratio, ratio_low, ratio_high, p = against_baseline(value, var, baseline, confidence)
    med, med_low, med_high = median_ci(new, confidence)
    base_median = baseline.median_seconds if baseline.median_seconds is not None else float("nan")
    return Estimate(ratio=ratio, ratio_low=ratio_low, ratio_high=ratio_high, p_value=p, seconds=med,
                    seconds_low=med_low, seconds_high=med_high, baseline_seconds=base_median,
                    ratio_raw=m / baseline.raw_seconds,
                    corrected=baseline.corrected,
                    method=f"{baseline.statistic} times, log-scale interval over {baseline.runs} stored run(s)"
                           + (", yardstick-corrected" if baseline.corrected else ", uncorrected"))


def against_baseline(value: float, log_var: float, baseline: StoredBaseline,
                     confidence: float) -> tuple[float, float, float, float]:
    """Return ``(ratio, low, high, p)`` of a value measured now against a stored baseline.

    ``log ratio = log(value) - log(baseline.value)`` with variance ``log_var`` (this run's,
    on the log scale) ``+ centre_var + between_var``; the interval and the two-sided p-value
    use Student's t with the Welch-Satterthwaite degrees of freedom
    ``V^2 / ((centre_var + between_var)^2 / dof)`` (this run's variance counted as exact), or
    the normal distribution for a single stored run. Sources: delta method and
    Welch-Satterthwaite approximation (Satterthwaite, Biometrics Bulletin 2 (1946) 110-114);
    common practice.
    """
    stored_var = baseline.centre_var + baseline.between_var
    var = log_var + stored_var
    log_ratio = math.log(value) - math.log(baseline.value)
    se = math.sqrt(var)
    if baseline.dof is None or stored_var == 0.0:
        dist = scipy.stats.norm
    else:
        dof = var**2 / (stored_var**2 / baseline.dof)
        dist = scipy.stats.t(dof)
    q = float(dist.ppf(0.5 + confidence / 2.0))
    p = 1.0 if se == 0.0 and log_ratio == 0.0 else (0.0 if se == 0.0 else float(2 * dist.sf(abs(log_ratio) / se)))
    return math.exp(log_ratio), math.exp(log_ratio - q * se), math.exp(log_ratio + q * se), min(1.0, p)


def estimate_referenced(ab: Estimate, baseline: StoredBaseline, confidence: float = 0.95) -> Estimate:
    """Return the referenced-mode estimate: this run's A/B ratio (candidate against a
    reference implementation, measured in pairs) against the stored runs' A/B ratios.

    Whatever slowed the machine in this run slowed the reference in the same moments, so it
    divides out of the A/B ratio; what is left to compare with history is the candidate's
    own change. ``ab`` is :func:`estimate_paired` (or :func:`estimate_ab`) of this run;
    ``baseline`` the :func:`stored_baseline` of the stored ratios. The combination is
    :func:`against_baseline`.
    """
    var = log_variance_from_interval(ab.ratio, ab.ratio_low, ab.ratio_high, confidence)
    ratio, ratio_low, ratio_high, p = against_baseline(ab.ratio, var, baseline, confidence)
    return Estimate(ratio=ratio, ratio_low=ratio_low, ratio_high=ratio_high, p_value=p, seconds=ab.seconds,
                    seconds_low=ab.seconds_low, seconds_high=ab.seconds_high, baseline_seconds=ab.baseline_seconds,
                    ratio_raw=ab.ratio, corrected=False,
                    method=f"this run's A/B ratio ({ab.method}) against the A/B ratios of {baseline.runs} "
                           f"stored run(s), log-scale interval")


def record_estimate(new: Sequence[float], confidence: float = 0.95) -> Estimate:
    """Return a record-mode 'estimate': the candidate's median and interval, no ratio (NaN)."""
    med, low, high = median_ci(new, confidence)
    nan = float("nan")
    return Estimate(ratio=nan, ratio_low=nan, ratio_high=nan, p_value=nan, seconds=med, seconds_low=low,
                    seconds_high=high, baseline_seconds=nan, ratio_raw=nan, corrected=False, method="record only")

