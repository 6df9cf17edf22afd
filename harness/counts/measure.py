"""A case's instruction count per transform, repeated, for one or two sides (:func:`count_sides`),
and the ratio of two sides' counts with its interval (:func:`count_ratio`).

Every repeat of a side is a pair of fresh runs (``K`` and ``2K`` transforms,
:func:`fftgauge.harness.counts.cachegrind.per_transform`). Counts do not depend on the
machine's load, so the runs of a case go to :data:`os.cpu_count` processes at once. The first
run is made alone and timed: when a run of ``2K`` would go past the timeout the case is
refused with the figure, before the other runs start.
"""

from __future__ import annotations

import math
import os
import tempfile
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass
from typing import Mapping

import numpy as np

from fftgauge.harness.cases import Case
from fftgauge.harness.counts.cachegrind import RunCount, count_run, ll_misses, per_transform, prime
from fftgauge.harness.errors import BackendFailure
from fftgauge.harness.shapes.case import ShapeCase

#: Smallest relative spread (standard deviation of log counts) the interval assumes: identical
#: runs differ by a few thousand instructions at start-up, about 1e-5 of a counted run's work
#: at the automatic K (:func:`fftgauge.harness.counts.cachegrind.default_calls`), so a measured
#: spread of 0 still gives an interval of honest width.
SPREAD_FLOOR = 1e-5


@dataclass(frozen=True)
class CaseCount:
    """One side's counts of one case: ``instructions`` per transform per repeat, ``ll_misses``
    per transform per repeat (None without cache simulation), ``calls`` (K), ``seconds`` of
    wall time of its runs."""

    calls: int
    instructions: tuple[float, ...]
    ll_misses: tuple[float, ...] | None
    seconds: float

    @property
    def median(self) -> float:
        """The median instructions per transform over the repeats."""
        return float(np.median(self.instructions))

    @property
    def spread(self) -> float:
        """The repeats' relative spread: (largest - smallest) / median (0 for one repeat)."""
        return (max(self.instructions) - min(self.instructions)) / self.median

    @property
    def ll_median(self) -> float | None:
        """The median simulated last-level misses per transform, or None."""
        return None if self.ll_misses is None else float(np.median(self.ll_misses))


def misses_per_transform(short: RunCount, long: RunCount) -> float:
    """Return the simulated last-level misses per transform: the misses of the run of 2K
    transforms less those of the run of K, over K, and 0 where that difference is negative.

    The start-up of two runs does not miss the same number of times (where the interpreter's
    memory lands in the simulated cache differs between runs), so when the transforms
    themselves hardly miss, the difference is start-up noise and can fall below zero (seen:
    -25.6 per transform with K = 10 for n = 64); a count of misses is not negative, so such a
    difference reads as none measured."""
    return max(0.0, (ll_misses(long.counts) - ll_misses(short.counts)) / (long.calls - short.calls))


def _side_count(pairs: list[tuple[RunCount, RunCount]], calls: int) -> CaseCount:
    instr = tuple(per_transform(a, b) for a, b in pairs)
    misses = None
    if all(ll_misses(a.counts) is not None for a, _ in pairs):
        misses = tuple(misses_per_transform(a, b) for a, b in pairs)
    return CaseCount(calls, instr, misses, sum(a.seconds + b.seconds for a, b in pairs))


def count_sides(valgrind: str, specs: Mapping[str, str], case: Case | ShapeCase, *, seed: int, calls: int,
                repeats: int, threads: int = 1, cache_sim: bool = False, timeout: float = 120.0,
                workers: int | None = None,
                caches: dict[str, tuple[int, int, int]] | None = None) -> dict[str, CaseCount]:
    """Return each side's :class:`CaseCount` of ``case``, 1-D or shaped (``specs`` maps a side's
    key to its SPEC; ``caches``: simulated cache levels in place of
    :data:`~fftgauge.harness.counts.cachegrind.SIMULATED_CACHES`, with ``cache_sim``).

    Raises
    ------
    BackendFailure
        When a run fails (the message names the SPEC), or when the first run says that a run
        of ``2 * calls`` transforms would take longer than ``timeout`` (with the estimate).
    """
    with tempfile.TemporaryDirectory(prefix="fftgauge-pycache-") as pycache:
        return _count_sides(valgrind, specs, case, seed, calls, repeats, threads, cache_sim, timeout, workers,
                            pycache, caches)


def _count_sides(valgrind: str, specs: Mapping[str, str], case: Case | ShapeCase, seed: int, calls: int,
                 repeats: int, threads: int, cache_sim: bool, timeout: float, workers: int | None,
                 pycache: str, caches: dict[str, tuple[int, int, int]] | None = None) -> dict[str, CaseCount]:
    keys = list(specs)

    def one(key: str, n_calls: int) -> RunCount:
        try:
            return count_run(valgrind, specs[key], case, seed, n_calls, threads, cache_sim, timeout, pycache, caches)
        except BackendFailure as exc:
            raise BackendFailure(f"{specs[key]}: {exc}") from None

    for key in keys:
        try:
            prime(specs[key], case, seed, threads, timeout, pycache)
        except BackendFailure as exc:
            raise BackendFailure(f"{specs[key]}: {exc}") from None
    first = one(keys[0], calls)
    estimate = 2.0 * first.seconds
    if estimate > timeout:
        raise BackendFailure(f"too slow to count: a run of {calls} transform(s) took {first.seconds:.1f} s under "
                             f"valgrind, so one of {2 * calls} would take about {estimate:.0f} s, above --timeout "
                             f"{timeout:g} s; count fewer transforms or raise --timeout")
    jobs = [(k, r, c) for k in keys for r in range(repeats) for c in (calls, 2 * calls)][1:]
    with ThreadPoolExecutor(max_workers=workers or os.cpu_count() or 1) as pool:
        futures = {job: pool.submit(one, job[0], job[2]) for job in jobs}
        runs = {job: f.result() for job, f in futures.items()}
    runs[(keys[0], 0, calls)] = first
    return {k: _side_count([(runs[(k, r, calls)], runs[(k, r, 2 * calls)]) for r in range(repeats)], calls)
            for k in keys}


@dataclass(frozen=True)
class CountRatio:
    """``ratio`` = new / old median count with its ``confidence`` interval and two-sided ``p_value``."""

    ratio: float
    ratio_low: float
    ratio_high: float
    p_value: float


def count_ratio(new: CaseCount, old: CaseCount, confidence: float = 0.95) -> CountRatio:
    """Return the ratio of two sides' counts with a Welch t interval on the log scale.

    The log counts' standard deviation of each side is at least :data:`SPREAD_FLOOR` (a
    spread of 0, common for counts, would give a zero-width interval and a p-value of 0 for
    any difference at all). The t quantile's degrees of freedom are Welch-Satterthwaite's
    (Welch, Biometrika 34 (1947) 28-35), at least 1.
    """
    from scipy import stats

    def sd(values: tuple[float, ...]) -> float:
        logs = np.log(values)
        return max(float(np.std(logs, ddof=1)) if len(logs) > 1 else 0.0, SPREAD_FLOOR)

    vn, vo = sd(new.instructions) ** 2 / len(new.instructions), sd(old.instructions) ** 2 / len(old.instructions)
    se = math.sqrt(vn + vo)
    dof_n, dof_o = max(len(new.instructions) - 1, 1), max(len(old.instructions) - 1, 1)
    dof = max(1.0, (vn + vo) ** 2 / (vn ** 2 / dof_n + vo ** 2 / dof_o))
    log_ratio = math.log(new.median / old.median)
    half = float(stats.t.ppf(0.5 + confidence / 2, dof)) * se
    p = float(2.0 * stats.t.sf(abs(log_ratio) / se, dof))
    return CountRatio(math.exp(log_ratio), math.exp(log_ratio - half), math.exp(log_ratio + half), p)
