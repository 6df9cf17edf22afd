"""The regression gate's engine: per-case estimates and verdicts from samples, the adaptive
sampling loop that takes more samples where the evidence is inconclusive, and the run that
ties them to the worker processes (:mod:`fftgauge.harness.gate.sampling`).

Modes
-----
- **A/B** (``old`` and ``new`` SPECs): both are measured in this run, block pair by block pair
  in a random order (:class:`fftgauge.harness.gate.sampling.WorkerSampler`). Per case the estimate is
  formed from the pairs (:func:`estimate_paired`, the default): each pair gives the log of
  the ratio of its two block medians, ``d_k = log(median new_k / median old_k)``; the ratio is
  ``exp(median d_k)``, its interval the distribution-free order-statistic interval of that
  median (:func:`fftgauge.harness.stats.median_ci`) and the p-value the two-sided Wilcoxon
  signed-rank test of the ``d_k`` against 0. The two blocks of a pair ran a few
  milliseconds apart on the same machine state, so whatever slows the machine for longer
  than that (another tenant, a frequency change) divides out of ``d_k``; and because the
  order inside each pair is random, ``d_k`` is symmetric about 0 when nothing changed, which
  is what the signed-rank test needs. Blocks, not single samples, are the unit because the
  samples of one block are not independent of each other. The pooled alternative
  (:func:`estimate_ab`: ratio of the medians of all samples, two-sample bootstrap interval
  :func:`fftgauge.harness.stats.ratio_ci`, Mann-Whitney p-value :func:`fftgauge.harness.stats.mann_whitney_p`)
  treats the two sides as independent samples and is available as
  ``GateSettings(analysis="pooled")``; on the project's loaded 2-core machine the halves of
  one 64-pair run of numpy against numpy gave pooled ratios from 0.946 to 1.083 and paired
  ones from 0.988 to 1.022, which is why pairing is the default.
- **Stored** (a ``fftgauge time`` file, or a folder of stored runs): only the candidate is
  measured; the baseline of a case is a per-case summary of the last K stored runs
  (:func:`stored_baseline`) and the estimate is formed on the log scale
  (:func:`estimate_stored`), corrected by the yardstick when every stored run has one.
  The times compared are the 10th percentiles of the per-call samples
  (:data:`fftgauge.harness.stats.LOW_QUANTILE`) whenever every stored run holds them (runs of this
  version do), the medians otherwise: the two sides of a stored comparison ran at different
  moments, under different load from the machine's other tenants, and load only ever adds
  time, which moves the median and leaves the fastest samples mostly alone
  (:func:`fftgauge.harness.stats.quantile_ci`). The A/B mode needs no such help (both sides share
  every moment) and keeps the median of paired blocks.
- **Referenced** (``old`` and ``new`` SPECs and a folder of saved A/B runs): measured exactly as
  A/B, with ``old`` a fixed reference implementation; this run's A/B ratio is then compared
  with the stored runs' A/B ratios of the same pair (:func:`ratio_baseline_for`,
  :func:`estimate_referenced`). A slower machine slows the reference in the same moments,
  so it divides out of both ratios: history without a yardstick that must guess how the
  machine's slowdown affects an FFT.
- **Record** (candidates and a folder to save to, nothing to compare): measures and stores.

The yardstick correction (stored mode)
--------------------------------------
Every run times the yardstick (:mod:`fftgauge.harness.gate.yardstick`) and stores its median seconds per
call ``Y``. When each stored run ``i`` used has a comparable yardstick record ``Y_i`` and
this run measured one, every time is put in yardstick units first: the baseline values are
``v_i = b_i / Y_i`` (``b_i`` the run's median seconds of the case) and the candidate's is
``m / Y_now``; the reported ``ratio`` is ``(m / Y_now) / median_i(v_i)``, and ``ratio_raw``
is the uncorrected ``m / median_i(b_i)``. For a single baseline run that is exactly
``raw ratio / (Y_now / Y_1)``: a machine 10% slower in everything makes both the case and
the yardstick 10% slower, and the corrected ratio stays 1. Without yardstick records (a plain
``fftgauge time`` file) the comparison is uncorrected and the run says so in its notes.

The decision rule
-----------------
With threshold ``t`` (``--threshold``, 5%) and family-wise level ``alpha`` (0.05):

- the p-values of all compared cases go through Holm's step-down procedure
  (:func:`fftgauge.harness.stats.holm_bonferroni`), so the chance that *any* unchanged case is called
  significant is at most ``alpha`` whatever the dependence between cases (a gate over 30
  cases would otherwise flag one by chance in most runs). Holm rather than Bonferroni: the
  same guarantee and never less power. Rather than false-discovery control: a CI gate fails
  the build on a single finding, so the family-wise rate is the one that matters;
- ``slower``: significant after Holm, ratio > 1 + t and the interval's low end > 1;
- ``faster``: significant after Holm, ratio < 1 / (1 + t) and the interval's high end < 1
  (the same distance on the log scale, so x% slower and x% faster are treated alike);
- ``same``: anything else; ``accuracy``: a new battery failure or an error that grew
  (:func:`compare_accuracy`), whatever the timing says.

A case is *conclusive* when its interval does not straddle 1 + t or 1 / (1 + t)
(:func:`is_conclusive`); inconclusive cases get more samples (:func:`collect`) until they
are conclusive, reach :attr:`GateSettings.max_samples`, or the budget is spent. The point
estimate then decides, so a change right at the threshold is called either way about half of
the time per case. Sampling more where the interval straddles a threshold is optional
stopping: it can only move a p-value across ``alpha`` for cases whose ratio is already near
a threshold, which the threshold test (not the p-value) then decides.
"""

from __future__ import annotations

import math
import random
import time
import zlib
from dataclasses import dataclass, field
from typing import Any, Callable, Iterable, Sequence

import numpy as np
import scipy.stats

from fftgauge.harness.battery import bounds
from fftgauge.harness.cases import KINDS, Case
from fftgauge.harness.errors import BackendFailure, UnsupportedCase, UsageError
from fftgauge.harness.stats import LOW_QUANTILE, holm_bonferroni, mann_whitney_p, median_ci, quantile_ci, ratio_ci

GATE_SCHEMA = "fftgauge-gate/1"
VERDICTS = ("slower", "faster", "same", "accuracy")
MODES = ("ab", "referenced", "stored", "record")
#: Machine fingerprint fields that must agree with a stored baseline's (see docs/ci-gate.md).
MACHINE_KEYS = ("cpu", "cores", "caches", "machine", "python")
#: Default number of stored runs whose per-case median forms the baseline.
DEFAULT_LAST_RUNS = 5
#: Block pairs an item takes per turn while the items of a round take turns (:func:`collect`).
PAIRS_PER_VISIT = 2
#: An accuracy error counts as grown only above this many eps (tiny errors vary freely).
ACCURACY_FLOOR_EPS_UNITS = 1.0
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
class GateSettings:
    """How the gate samples and decides.

    Attributes
    ----------
    threshold : smallest relative change that can fail the gate (0.05 = 5%).
    alpha : family-wise significance level across the cases (Holm).
    confidence : coverage of each case's interval.
    budget_seconds : sampling time after the first round, over all cases together.
    samples_per_block : samples in one block (each about 1 ms).
    initial_pairs : block pairs every case gets in the first round.
    max_samples : most samples per side per case (bounds the bootstrap's cost).
    resamples : bootstrap resamples of the final estimates.
    quick_resamples : bootstrap resamples while deciding whether to sample more.
    seed : seeds the block order and the bootstrap.
    analysis : A/B estimate, ``paired`` (:func:`estimate_paired`) or ``pooled`` (:func:`estimate_ab`).
    processes : worker processes per side; blocks are drawn from them in turn
        (:class:`fftgauge.harness.gate.sampling.WorkerSampler` says why).
    """

    threshold: float = 0.05
    alpha: float = 0.05
    confidence: float = 0.95
    budget_seconds: float = 30.0
    samples_per_block: int = 5
    initial_pairs: int = 8
    max_samples: int = 1500
    resamples: int = 2000
    quick_resamples: int = 400
    seed: int = 1234
    analysis: str = "paired"
    processes: int = 3


@dataclass(frozen=True)
class Estimate:
    """One case's comparison: ``ratio`` = candidate time / baseline time with its interval.

    ``seconds``/``seconds_low``/``seconds_high`` are the candidate's median per-call time and
    its distribution-free interval; ``baseline_seconds`` the baseline's median (raw seconds);
    ``ratio_raw`` the plain ratio of the two medians (stored mode: before the yardstick
    correction; A/B mode: unpaired); ``corrected`` whether the yardstick correction was
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
    raw_seconds : median of the runs' raw median seconds.
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


@dataclass(frozen=True)
class StoredRun:
    """A stored results document the gate can take a baseline from (validated at load).

    ``rows`` are the usable rows (a positive ``seconds``); ``backends`` maps a row's backend
    label to the SPEC that produced it; ``yardstick`` is the run's record or None.
    """

    path: str
    created: str
    schema: str
    machine: dict[str, Any]
    yardstick: dict[str, Any] | None
    rows: tuple[dict[str, Any], ...]
    backends: dict[str, str]


@dataclass(frozen=True)
class GateRequest:
    """What the gate is asked: validated at the boundary (:mod:`fftgauge.harness.cli.gate`), trusted here."""

    mode: str
    old_spec: str | None = None
    new_spec: str | None = None
    specs: tuple[str, ...] = ()
    kinds: tuple[str, ...] | None = None
    dtypes: tuple[str, ...] | None = None
    sizes: tuple[int, ...] | None = None
    norms: tuple[str, ...] = ("backward",)
    seed: int = 1234
    threads: int = 1
    settings: GateSettings = GateSettings()
    accuracy: bool = False
    accuracy_growth: float = 2.0
    timeout_seconds: float = 120.0
    stored_runs: tuple[StoredRun, ...] = ()
    baseline_path: str | None = None
    baseline_label: str | None = None
    warnings: tuple[str, ...] = ()
    notes: tuple[str, ...] = ()
    commit: str | None = None
    cpus: tuple[int, ...] | None = None


@dataclass
class GateItem:
    """One case of one candidate as the gate works on it (mutable while the run goes on)."""

    backend: str
    case: Case
    new_key: str
    old_key: str | None = None
    baseline_backend: str | None = None
    baseline: StoredBaseline | None = None
    baseline_raw: StoredBaseline | None = None
    baseline_accuracy: dict[str, Any] | None = None
    old_samples: list[float] = field(default_factory=list)
    new_samples: list[float] = field(default_factory=list)
    status: str = "ok"
    message: str = ""
    pairs_taken: int = 0
    pair_seconds: float = 0.0
    estimate: Estimate | None = None
    conclusive: bool | None = None
    significant: bool | None = None
    p_holm: float | None = None
    timing_verdict: str | None = None
    accuracy: dict[str, Any] | None = None
    plan_seconds: float | None = None
    ab_estimate: Estimate | None = None

    def fail(self, message: str) -> None:
        """Mark the item as failed (an ``error`` row) with ``message``."""
        self.status, self.message = "error", message

    @property
    def verdict(self) -> str | None:
        """The row's verdict: ``accuracy`` over the timing verdict; None when not compared."""
        if self.accuracy is not None and self.accuracy.get("regressed"):
            return "accuracy"
        return self.timing_verdict


# -- estimates ---------------------------------------------------------------------------------
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
                    yardstick_statistic: str = "median") -> StoredBaseline:
    """Return a case's baseline from the stored runs that hold it.

    Parameters
    ----------
    values : per run ``(value, low, high)`` of ``statistic``: its estimate and interval.
    yardsticks : per run ``(value, low, high)`` of the yardstick's ``yardstick_statistic``,
        to put the values in yardstick units, or None for raw seconds.
    confidence : coverage of the stored intervals.
    statistic, yardstick_statistic : recorded in the result (:data:`STATISTICS`).

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
    kinds = {"corrected": yardsticks is not None, "statistic": statistic, "yardstick_statistic": yardstick_statistic}
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
    med, low, high = sample_statistic(new, baseline.statistic, confidence)
    if not med > 0:
        raise ValueError(f"the candidate's {baseline.statistic} time is at or below the timing loop's overhead floor")
    value, var = med, log_variance_from_interval(med, low, high, confidence)
    if baseline.corrected:
        yard = None if yardstick_now is None else stat_triple(yardstick_now, baseline.yardstick_statistic)
        if yard is None:
            raise ValueError("a yardstick-corrected baseline needs this run's yardstick")
        value = med / yard[0]
        var += log_variance_from_interval(*yard, confidence)
    ratio, ratio_low, ratio_high, p = against_baseline(value, var, baseline, confidence)
    return Estimate(ratio=ratio, ratio_low=ratio_low, ratio_high=ratio_high, p_value=p, seconds=med, seconds_low=low,
                    seconds_high=high, baseline_seconds=baseline.raw_seconds, ratio_raw=med / baseline.raw_seconds,
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


def ratio_baseline_for(runs: Sequence[StoredRun], label: str, reference: str, case: Case,
                       confidence: float) -> StoredBaseline | None:
    """Return the stored A/B ratios of ``label`` against ``reference`` for ``case`` as a
    baseline, or None when no stored run holds one.

    A row's ratio is ``ab_ratio``/``ab_ratio_low``/``ab_ratio_high`` (written by A/B and
    referenced runs), or for A/B rows of older files their ``ratio`` fields; only rows whose
    ``baseline_backend`` is ``reference`` count.
    """
    values = []
    for run in runs:
        for row in run.rows:
            if row["backend"] != label or row.get("baseline_backend") != reference or _case_of(row) != case:
                continue
            triple = stat_triple(row, "ab_ratio")
            if triple is None and row.get("baseline_runs") is None:
                triple = stat_triple(row, "ratio")
            if triple is not None:
                values.append(triple)
            break
    if not values:
        return None
    return stored_baseline(values, None, confidence, statistic="ab_ratio")


def record_estimate(new: Sequence[float], confidence: float = 0.95) -> Estimate:
    """Return a record-mode 'estimate': the candidate's median and interval, no ratio (NaN)."""
    med, low, high = median_ci(new, confidence)
    nan = float("nan")
    return Estimate(ratio=nan, ratio_low=nan, ratio_high=nan, p_value=nan, seconds=med, seconds_low=low,
                    seconds_high=high, baseline_seconds=nan, ratio_raw=nan, corrected=False, method="record only")


# -- decisions ---------------------------------------------------------------------------------
def is_conclusive(est: Estimate, threshold: float) -> bool:
    """Return True when the interval straddles neither 1 + threshold nor 1 / (1 + threshold).

    In record mode (no ratio) a case is conclusive when its median's interval is narrower
    than a quarter of the threshold on each side.
    """
    if math.isnan(est.ratio):
        return est.seconds_high <= est.seconds * (1 + threshold / 4) and est.seconds_low >= est.seconds / (1 + threshold / 4)
    up, down = 1.0 + threshold, 1.0 / (1.0 + threshold)
    return not (est.ratio_low < up < est.ratio_high) and not (est.ratio_low < down < est.ratio_high)


def holm_adjusted(p_values: Sequence[float]) -> list[float]:
    """Return Holm's adjusted p-values: ``p~_(i) = max_{j <= i} min(1, (m - j + 1) p_(j))`` on the
    ascending order, so that ``p~_i <= alpha`` exactly when Holm's procedure rejects H_i at ``alpha``.

    Source: Holm, "A simple sequentially rejective multiple test procedure", Scand. J.
    Statist. 6 (1979) 65-70; adjusted p-values as in Wright, "Adjusted p-values for
    simultaneous inference", Biometrics 48 (1992) 1005-1013 (from memory; the tests check the
    equivalence with :func:`fftgauge.harness.stats.holm_bonferroni`).
    """
    p = [float(v) for v in p_values]
    m = len(p)
    order = sorted(range(m), key=lambda i: p[i])
    out = [1.0] * m
    running = 0.0
    for j, i in enumerate(order):
        running = max(running, min(1.0, (m - j) * p[i]))
        out[i] = running
    return out


def timing_verdict(est: Estimate, significant: bool, threshold: float) -> str:
    """Return ``slower``, ``faster`` or ``same`` for one case by the module's decision rule."""
    if significant and est.ratio > 1.0 + threshold and est.ratio_low > 1.0:
        return "slower"
    if significant and est.ratio < 1.0 / (1.0 + threshold) and est.ratio_high < 1.0:
        return "faster"
    return "same"


def decide(estimates: Sequence[Estimate], threshold: float, alpha: float) -> list[tuple[str, bool, float]]:
    """Return per estimate ``(verdict, significant after Holm, Holm-adjusted p)``."""
    if not estimates:
        return []
    p = [e.p_value for e in estimates]
    rejected = holm_bonferroni(p, alpha)
    adjusted = holm_adjusted(p)
    return [(timing_verdict(e, r, threshold), r, a) for e, r, a in zip(estimates, rejected, adjusted)]


def compare_accuracy(case: Case, new_rows: Sequence[dict[str, Any]], old_rows: Sequence[dict[str, Any]] | None,
                     baseline: dict[str, Any] | None, growth: float) -> dict[str, Any]:
    """Return the accuracy comparison of one case.

    Parameters
    ----------
    new_rows : the candidate's battery rows (:func:`fftgauge.harness.battery.checks.run_case_checks`).
    old_rows : the old backend's rows (A/B mode), or None.
    baseline : a stored run's accuracy record (``eps_units``, ``battery_failures``) or None.
    growth : an accuracy error more than ``growth`` times the baseline's (and above
        :data:`ACCURACY_FLOOR_EPS_UNITS` eps) counts as a regression.

    Returns
    -------
    dict
        ``eps_units`` (the accuracy check's error), ``baseline_eps_units``,
        ``bound_eps_units`` (the error bound, :func:`fftgauge.harness.battery.bounds.accuracy_limit`, in eps),
        ``battery_failures`` (checks with status fail or error), ``new_battery_failures``
        (those the baseline did not fail; every failure when the baseline has no battery
        record), ``grew`` and ``regressed`` (a new failure, or ``grew``), ``message``.
    """
    def failures(rows: Iterable[dict[str, Any]]) -> list[str]:
        return sorted({r["check"] for r in rows if r.get("status") in ("fail", "error")})

    def accuracy_eps(rows: Iterable[dict[str, Any]]) -> float | None:
        for r in rows:
            if r.get("check") == "accuracy" and r.get("eps_units") is not None:
                return float(r["eps_units"])
        return None

    now_failing = failures(new_rows)
    if old_rows is not None:
        before, base_eps = set(failures(old_rows)), accuracy_eps(old_rows)
    elif baseline is not None:
        before, base_eps = set(baseline.get("battery_failures") or ()), baseline.get("eps_units")
    else:
        before, base_eps = set(), None
    new_failures = [c for c in now_failing if c not in before]
    eps = accuracy_eps(new_rows)
    bound = float(bounds.eps_units(bounds.accuracy_limit(case), case.dtype))
    grew = (eps is not None and base_eps is not None and eps > ACCURACY_FLOOR_EPS_UNITS
            and eps > growth * float(base_eps))
    parts = []
    if new_failures:
        detail = "; ".join(f"{r['check']}: {r.get('message', '')}" for r in new_rows
                           if r["check"] in new_failures and r.get("status") in ("fail", "error"))
        parts.append(f"new battery failure(s): {detail}")
    if grew:
        parts.append(f"accuracy error grew from {float(base_eps):.3g} to {eps:.3g} eps (more than {growth:g}x)")
    return {"eps_units": eps, "baseline_eps_units": None if base_eps is None else float(base_eps),
            "bound_eps_units": bound, "battery_failures": now_failing, "new_battery_failures": new_failures,
            "grew": bool(grew), "regressed": bool(new_failures or grew), "message": "; ".join(parts)}


# -- the adaptive loop -------------------------------------------------------------------------
def evaluate(item: GateItem, settings: GateSettings, yardstick_now: dict[str, Any] | None,
             resamples: int) -> Estimate:
    """Return the item's estimate from its samples so far (A/B, referenced, stored or record);
    with two sides the A/B estimate is also kept in ``item.ab_estimate``.

    Raises
    ------
    ValueError
        When the samples cannot form a ratio (a median at or below the overhead floor).
    """
    if item.old_key is not None:
        if settings.analysis == "paired":
            ab = estimate_paired(item.old_samples, item.new_samples, settings.samples_per_block, settings.confidence)
        else:
            seed = (settings.seed * 1_000_003 + zlib.crc32(item.case.label().encode())) % 2**32
            ab = estimate_ab(item.old_samples, item.new_samples, settings.confidence, resamples, seed)
        item.ab_estimate = ab
        return ab if item.baseline is None else estimate_referenced(ab, item.baseline, settings.confidence)
    if item.baseline is None:
        return record_estimate(item.new_samples, settings.confidence)
    baseline = item.baseline if (item.baseline.corrected and yardstick_now is not None) else item.baseline_raw
    return estimate_stored(baseline, item.new_samples, yardstick_now if baseline.corrected else None,
                           settings.confidence)


def collect(items: Sequence[GateItem], sampler: Any, settings: GateSettings, yardstick: list[float],
            clock: Callable[[], float] = time.monotonic, on_done: Callable[[GateItem], None] | None = None) -> float:
    """Sample the items until each is conclusive, full, or the budget is spent; return the seconds used.

    Round 1 gives every item :attr:`GateSettings.initial_pairs` block pairs, whatever the
    budget. Within a round the items take turns, :data:`PAIRS_PER_VISIT` pairs at a time, so
    each case's samples are spread over the whole round rather than taken in one burst: a
    slow stretch of the machine (one to several seconds, see :mod:`fftgauge.harness.timing.runner`) then
    lands on every case a little instead of on one case entirely, which matters most in
    stored mode, where nothing measured at the same moment divides it out. Each later round re-evaluates the items (with
    :attr:`GateSettings.quick_resamples`) and gives each inconclusive one as many pairs as it
    has had so far (doubling), at most what keeps it under
    :attr:`GateSettings.max_samples` and its share of the remaining budget (from its
    measured seconds per pair), at least one. A round stops early when the budget is spent.
    The items are visited in a seeded random order in every round.

    ``sampler.sample(item, pairs)`` returns a :class:`~fftgauge.harness.gate.sampling.Draw` and may
    raise :class:`BackendFailure` (the item becomes an error and the others go on);
    yardstick samples are appended to ``yardstick``.
    """
    rng = random.Random(settings.seed)
    start = clock()
    active = [it for it in items if it.status == "ok"]
    pairs = {id(it): settings.initial_pairs for it in active}
    first = True
    while active:
        rng.shuffle(active)
        owed = {id(it): pairs[id(it)] for it in active}
        while any(owed[id(it)] > 0 and it.status == "ok" for it in active):
            if not first and clock() - start >= settings.budget_seconds:
                break
            for it in active:
                if owed[id(it)] <= 0 or it.status != "ok":
                    continue
                if not first and clock() - start >= settings.budget_seconds:
                    break
                n = min(PAIRS_PER_VISIT, owed[id(it)])
                owed[id(it)] -= n
                _take(it, sampler, n, yardstick, clock)
        first = False
        yard_now = _yardstick_summary(yardstick, settings.confidence)
        still = []
        for it in active:
            if it.status != "ok":
                continue
            try:
                est = evaluate(it, settings, yard_now, settings.quick_resamples)
            except ValueError as exc:
                it.fail(str(exc))
                continue
            if not is_conclusive(est, settings.threshold) and len(it.new_samples) < settings.max_samples:
                still.append(it)
            elif on_done is not None:
                on_done(it)
        remaining = settings.budget_seconds - (clock() - start)
        if remaining <= 0 or not still:
            for it in still:
                if on_done is not None:
                    on_done(it)
            break
        share = remaining / len(still)
        for it in still:
            room = max(1, (settings.max_samples - len(it.new_samples)) // settings.samples_per_block)
            afford = int(share / it.pair_seconds) if it.pair_seconds > 0 else it.pairs_taken
            pairs[id(it)] = max(1, min(it.pairs_taken, room, afford))
        active = still
    return clock() - start


def _take(it: GateItem, sampler: Any, n: int, yardstick: list[float], clock: Callable[[], float]) -> None:
    """Take ``n`` block pairs of ``it`` and keep its samples and seconds per pair (a failing
    backend makes the item an error)."""
    t0 = clock()
    try:
        draw = sampler.sample(it, n)
    except BackendFailure as exc:
        it.fail(f"failed while being timed: {exc}")
        return
    spent = clock() - t0
    it.pair_seconds = (it.pair_seconds * it.pairs_taken + spent) / (it.pairs_taken + n)
    it.pairs_taken += n
    it.old_samples.extend(draw.old)
    it.new_samples.extend(draw.new)
    yardstick.extend(draw.yardstick)


def _yardstick_summary(samples: Sequence[float], confidence: float) -> dict[str, Any] | None:
    from fftgauge.harness.gate.yardstick import summarise

    return summarise(samples, confidence) if samples else None


def finalise(items: Sequence[GateItem], settings: GateSettings, yardstick_now: dict[str, Any] | None) -> None:
    """Compute every measured item's final estimate and verdict (Holm across the compared ones), in place."""
    compared = []
    for it in items:
        if it.status != "ok":
            continue
        try:
            it.estimate = evaluate(it, settings, yardstick_now, settings.resamples)
        except ValueError as exc:
            it.fail(str(exc))
            continue
        it.conclusive = is_conclusive(it.estimate, settings.threshold)
        if not math.isnan(it.estimate.ratio):
            compared.append(it)
    for it, (verdict, significant, p_holm) in zip(compared, decide([it.estimate for it in compared],
                                                                   settings.threshold, settings.alpha)):
        it.timing_verdict, it.significant, it.p_holm = verdict, significant, p_holm


# -- building the items ------------------------------------------------------------------------
def request_cases(req: GateRequest) -> list[Case]:
    """Return the A/B or record mode's cases: kinds x dtypes x norms x sizes."""
    kinds = req.kinds or KINDS
    return [Case(k, d, n, norm) for k in kinds for d in (req.dtypes or ("float64",)) for norm in req.norms
            for n in (req.sizes or ())]


def _case_of(row: dict[str, Any]) -> Case:
    return Case(row["kind"], row["dtype"], int(row["n"]), row.get("norm") or "backward")


def stored_cases(runs: Sequence[StoredRun], label: str, req: GateRequest) -> list[Case]:
    """Return the cases the stored runs hold for backend ``label``, filtered by the request's
    kinds, dtypes and sizes when given, in the stored order (kind, dtype, norm, n)."""
    cases = {_case_of(r) for run in runs for r in run.rows if r["backend"] == label}
    if req.kinds:
        cases = {c for c in cases if c.kind in req.kinds}
    if req.dtypes:
        cases = {c for c in cases if c.dtype in req.dtypes}
    if req.sizes:
        cases = {c for c in cases if c.n in req.sizes}
    return sorted(cases, key=lambda c: (KINDS.index(c.kind), c.dtype, c.norm, c.n))


def baseline_for(runs: Sequence[StoredRun], label: str, case: Case,
                 confidence: float) -> tuple[StoredBaseline, StoredBaseline | None, dict[str, Any] | None]:
    """Return the case's (raw baseline, yardstick-corrected baseline or None, newest accuracy record or None).

    The corrected one exists when every run holding the case has a comparable yardstick.
    """
    from fftgauge.harness.gate.yardstick import comparable

    holding = []
    for run in runs:
        for row in run.rows:
            if row["backend"] == label and _case_of(row) == case:
                holding.append((run, row))
                break
    statistic = common_statistic([r for _, r in holding])
    values = [stat_triple(r, statistic) for _, r in holding]
    raw = stored_baseline(values, None, confidence, statistic)
    corrected = None
    if all(comparable(run.yardstick) for run, _ in holding):
        records = [run.yardstick for run, _ in holding]
        yard_statistic = common_statistic(records)
        corrected = stored_baseline(values, [stat_triple(y, yard_statistic) for y in records], confidence,
                                    statistic, yard_statistic)
    accuracy = None
    for run, row in reversed(holding):  # runs are oldest first
        if row.get("battery_failures") is not None:
            accuracy = {"eps_units": row.get("eps_units"), "battery_failures": row.get("battery_failures")}
            break
    return raw, corrected, accuracy


def build_items(req: GateRequest, sampler: Any, doc: dict[str, Any]) -> list[GateItem]:
    """Return the items of the request, skipped ones included, and record the backends in ``doc``.

    Raises
    ------
    UsageError
        When a SPEC cannot be loaded, or (stored mode) a backend has no rows in the baseline.
    """
    if req.mode in ("ab", "referenced"):
        cases = request_cases(req)
        old = sampler.claims("old", cases)
        new = sampler.claims("new", cases)
        doc["old"] = old.record(req.old_spec)
        doc["new"] = new.record(req.new_spec)
        doc["backends"] = {new.label: new.record(req.new_spec)}
        items = []
        for i, case in enumerate(cases):
            it = GateItem(backend=new.label, case=case, new_key="new", old_key="old",
                          baseline_backend=old.label)
            reason = new.reasons[i] or old.reasons[i]
            if reason is not None:
                side = "new" if new.reasons[i] else "old"
                it.status, it.message = "skip", f"{side} backend: {reason}"
            elif req.mode == "referenced":
                stored_label = req.baseline_label or new.label
                it.baseline = ratio_baseline_for(req.stored_runs, stored_label, old.label, case,
                                                 req.settings.confidence)
                if it.baseline is None:
                    it.status, it.message = "skip", (f"no stored A/B ratio of {stored_label} against "
                                                     f"{old['label']} for this case in the baseline")
            items.append(it)
        if req.mode == "referenced" and not any(it.baseline is not None for it in items):
            held = sorted({f"{r['backend']} against {r.get('baseline_backend')}" for run in req.stored_runs
                           for r in run.rows if r.get("baseline_backend")})
            raise UsageError(f"the baseline holds no A/B ratio of {req.baseline_label or new['label']} against "
                             f"{old['label']} for the cases asked (it holds: {', '.join(held) or 'none'}); "
                             f"use the same --old, or --baseline-backend LABEL for the stored candidate's label")
        return items
    items = []
    doc["backends"] = {}
    stored_labels = sorted({r["backend"] for run in req.stored_runs for r in run.rows})
    for spec in req.specs:
        if req.mode == "record":
            cases = request_cases(req)
        else:
            cases = sorted({_case_of(r) for run in req.stored_runs for r in run.rows},
                           key=lambda c: (KINDS.index(c.kind), c.dtype, c.norm, c.n))
        claims = sampler.claims(spec, cases)
        label = claims.label
        doc["backends"][label] = claims.record(spec)
        base_label = req.baseline_label or label
        if req.mode == "stored":
            if base_label not in stored_labels:
                raise UsageError(f"the baseline holds no timed rows of backend {base_label!r} (it holds: "
                                 f"{', '.join(stored_labels) or 'none'}); pass --backend with one of those, or "
                                 f"--baseline-backend LABEL to compare with another one's rows")
            wanted = stored_cases(req.stored_runs, base_label, req)
            if not wanted:
                raise UsageError(f"no stored case of backend {base_label!r} matches --kinds/--dtypes/--sizes; "
                                 f"drop those options to re-measure every stored case")
        else:
            wanted = cases
        reasons = dict(zip(cases, claims.reasons))
        for case in wanted:
            it = GateItem(backend=label, case=case, new_key=spec,
                          baseline_backend=base_label if req.mode == "stored" else None)
            if reasons.get(case) is not None:
                it.status = "skip"
                it.message = (f"in the baseline but no longer supported: {reasons[case]}" if req.mode == "stored"
                              else reasons[case])
            elif req.mode == "stored":
                raw, corrected, acc = baseline_for(req.stored_runs, base_label, case, req.settings.confidence)
                it.baseline_raw, it.baseline, it.baseline_accuracy = raw, corrected or raw, acc
            items.append(it)
    return items


# -- the run -----------------------------------------------------------------------------------
def new_doc(req: GateRequest) -> dict[str, Any]:
    """Return the run's ``fftgauge-gate/1`` envelope with the request recorded and no rows yet."""
    from fftgauge.harness.results import envelope

    s = req.settings
    extra = {
        "mode": req.mode, "regressed": False, "outcome": "incomplete", "complete": False,
        "threshold": s.threshold, "alpha": s.alpha, "confidence": s.confidence, "budget_seconds": s.budget_seconds,
        "threads": req.threads, "pinned_cpus": list(req.cpus) if req.cpus else None,
        "request": {"old": req.old_spec, "new": req.new_spec, "backends": list(req.specs),
                    "kinds": list(req.kinds) if req.kinds else None,
                    "dtypes": list(req.dtypes) if req.dtypes else None,
                    "sizes": list(req.sizes) if req.sizes else None, "norms": list(req.norms),
                    "accuracy": req.accuracy, "accuracy_growth": req.accuracy_growth,
                    "samples_per_block": s.samples_per_block, "initial_pairs": s.initial_pairs,
                    "processes": s.processes,
                    "max_samples": s.max_samples},
        "baseline": None if req.mode not in ("stored", "referenced") else {
            "path": req.baseline_path, "backend": req.baseline_label, "runs": [run.path for run in req.stored_runs],
            "created": [run.created for run in req.stored_runs]},
        "warnings": list(req.warnings), "notes": list(req.notes),
    }
    if req.commit:
        extra["commit"] = req.commit
    return envelope(GATE_SCHEMA, req.seed, extra=extra)


def item_row(it: GateItem, confidence: float = 0.95) -> dict[str, Any]:
    """Return the ``fftgauge-gate/1`` row of an item (contract fields first)."""
    e = it.estimate
    acc = it.accuracy or {}
    row = {
        "backend": it.backend, "kind": it.case.kind, "dtype": it.case.dtype, "n": it.case.n,
        "ratio": None if e is None else e.ratio, "ratio_low": None if e is None else e.ratio_low,
        "ratio_high": None if e is None else e.ratio_high, "p_value": None if e is None else e.p_value,
        "verdict": it.verdict if it.status == "ok" else None,
        "norm": it.case.norm, "status": it.status, "message": it.message or acc.get("message") or "",
        "p_holm": it.p_holm, "significant": it.significant, "conclusive": it.conclusive,
        "timing_verdict": it.timing_verdict,
        "seconds": None if e is None else e.seconds, "seconds_low": None if e is None else e.seconds_low,
        "seconds_high": None if e is None else e.seconds_high,
        "baseline_backend": it.baseline_backend, "baseline_seconds": None if e is None else e.baseline_seconds,
        "ratio_raw": None if e is None else e.ratio_raw, "yardstick_corrected": None if e is None else e.corrected,
        "samples": len(it.new_samples), "baseline_samples": len(it.old_samples) if it.old_key else None,
        "baseline_runs": it.baseline.runs if it.baseline is not None else None,
        "method": None if e is None else e.method,
        **_p10_fields(it.new_samples, it.baseline, confidence),
        **_ab_fields(it),
        "sampling_seconds": it.pair_seconds * it.pairs_taken, "plan_seconds": it.plan_seconds,
    }
    if it.accuracy is not None:
        for key in ("eps_units", "baseline_eps_units", "bound_eps_units", "battery_failures", "new_battery_failures"):
            row[key] = acc.get(key)
    return row


def _p10_fields(samples: Sequence[float], baseline: StoredBaseline | None, confidence: float) -> dict[str, Any]:
    """Return the candidate's 10th-percentile fields of a row (None without samples), and the
    statistic a stored-mode comparison used."""
    out: dict[str, Any] = dict.fromkeys(STATISTICS["p10"])
    if len(samples):
        out.update(zip(STATISTICS["p10"], sample_statistic(samples, "p10", confidence)))
    if baseline is not None:
        out["compared_statistic"] = baseline.statistic
    return out


def _ab_fields(it: GateItem) -> dict[str, Any]:
    """Return the row's ``ab_ratio`` fields: this run's new/old ratio and interval (two-sided
    modes only), which a later referenced run compares with."""
    if it.old_key is None:
        return {}
    ab = it.ab_estimate
    return dict(zip(STATISTICS["ab_ratio"], (None, None, None) if ab is None else (ab.ratio, ab.ratio_low,
                                                                                   ab.ratio_high)))


def outcome_of(rows: Sequence[dict[str, Any]], complete: bool) -> tuple[str, bool]:
    """Return ``(outcome, regressed)``: outcome ``regression`` (a row slower or accuracy),
    ``error`` (a case could not be measured or checked), ``incomplete`` (the run stopped
    early) or ``pass``; ``regressed`` is true for anything but ``pass``."""
    if any(r.get("verdict") in ("slower", "accuracy") for r in rows):
        outcome = "regression"
    elif any(r.get("status") == "error" for r in rows):
        outcome = "error"
    elif not complete:
        outcome = "incomplete"
    else:
        outcome = "pass"
    return outcome, outcome != "pass"


def _worker_sampler(req: GateRequest) -> Any:
    from fftgauge.harness.gate.sampling import WorkerSampler

    sides = ({"old": req.old_spec, "new": req.new_spec} if req.mode in ("ab", "referenced")
             else {s: s for s in req.specs})
    return WorkerSampler(sides, req.threads, req.seed, req.settings.samples_per_block, req.timeout_seconds,
                         processes=req.settings.processes)


def _prepare(items: Sequence[GateItem], sampler: Any) -> None:
    for it in items:
        if it.status != "ok":
            continue
        try:
            info = sampler.prepare(it)
            it.plan_seconds = info.get(it.new_key, {}).get("plan_seconds")
        except UnsupportedCase as exc:
            it.status, it.message = "skip", f"the plan refused the case: {exc}"
        except BackendFailure as exc:
            it.fail(f"failed while planning: {exc}")


def _check_accuracy(items: Sequence[GateItem], sampler: Any, req: GateRequest) -> None:
    for it in items:
        if it.status != "ok":
            continue
        try:
            new_rows = sampler.run_checks(it.new_key, it.case, req.seed)
            old_rows = sampler.run_checks(it.old_key, it.case, req.seed) if it.old_key else None
        except BackendFailure as exc:
            it.fail(f"failed during the battery: {exc}")
            continue
        it.accuracy = compare_accuracy(it.case, new_rows, old_rows, it.baseline_accuracy, req.accuracy_growth)


def run_gate(req: GateRequest, doc: dict[str, Any] | None = None, quiet: bool = True,
             sampler_factory: Callable[[GateRequest], Any] | None = None) -> dict[str, Any]:
    """Run the gate and return its ``fftgauge-gate/1`` document (``doc`` filled in place when given).

    The rows, outcome and yardstick are written into ``doc`` in a ``finally``, so a run
    stopped by a failure or Ctrl-C still leaves a document that says how far it got
    (``complete`` false, undecided rows with status ``incomplete``).

    Raises
    ------
    UsageError
        When a SPEC cannot be loaded or a backend is not in the baseline.
    """
    from fftgauge.harness.timing.affinity import pinned
    from fftgauge.harness.execution.dispatch import Progress

    doc = new_doc(req) if doc is None else doc
    items: list[GateItem] = []
    yardstick: list[float] = []
    sampler = None
    started = time.monotonic()
    try:
        with pinned(req.cpus) as cpus:
            doc["pinned_cpus"] = list(cpus) if cpus else None
            sampler = (sampler_factory or _worker_sampler)(req)
            with sampler:
                items.extend(build_items(req, sampler, doc))
                _prepare(items, sampler)
                progress = Progress(total=sum(it.status == "ok" for it in items), quiet=quiet, desc="gate")
                try:
                    doc["sampling_seconds"] = collect(
                        items, sampler, req.settings, yardstick,
                        on_done=lambda it: (progress.advance(note=it.case.label()), sampler.release(it)))
                finally:
                    progress.close()
                finalise(items, req.settings, _yardstick_summary(yardstick, req.settings.confidence))
                if req.accuracy:
                    _check_accuracy(items, sampler, req)
        doc["complete"] = True
    finally:
        if not doc["complete"]:
            for it in items:
                if it.status == "ok" and it.estimate is None:
                    it.status, it.message = "incomplete", "the run stopped before this case was decided"
        doc["rows"] = [item_row(it, req.settings.confidence) for it in items]
        doc["elapsed_seconds"] = time.monotonic() - started
        _record_yardstick(doc, req, yardstick, getattr(sampler, "yardstick_failure", None))
        doc["outcome"], doc["regressed"] = outcome_of(doc["rows"], doc["complete"])
    return doc


def _record_yardstick(doc: dict[str, Any], req: GateRequest, samples: list[float], failure: str | None) -> None:
    from fftgauge.harness.gate.yardstick import comparable

    record = _yardstick_summary(samples, req.settings.confidence)
    if record is not None and req.mode == "stored":
        records = [run.yardstick for run in req.stored_runs if comparable(run.yardstick)]
        if records:
            # the statistic the correction uses (fftgauge.harness.gate.run.baseline_for), so the ratio shown is the one applied
            statistic = common_statistic(records)
            key = STATISTICS[statistic][0]
            record["ratio_statistic"] = statistic
            record["baseline_seconds"] = float(np.median([r[key] for r in records]))
            record["ratio"] = record[key] / record["baseline_seconds"]
        if len(records) < len(req.stored_runs):
            doc["notes"].append("some stored runs have no yardstick record (plain fftgauge time files): cases they "
                                "hold are compared in raw seconds, without the machine-speed correction")
    if failure:
        doc["warnings"].append(f"the yardstick could not be timed ({failure}); no machine-speed correction")
    doc["yardstick"] = record
