"""The timer: planning time, then warm-up, loops per sample, many samples, overhead floor.

How one case is timed (:func:`~fftgauge.harness.timing.case_job.time_case` in a worker, or
:class:`Timer` in-process); the loops, the warm-up, the autorange and the garbage-collection pause are in
:mod:`fftgauge.harness.timing.clock`, which also says why a sample lasts about 1 ms:

1. ``backend.plan(case)`` is timed once: the *planning time* (real work for FFTW-style
   backends, nothing for plain functions).
2. The input is prepared with ``plan.prepare`` outside every timed region.
3. Warm-up: the plan runs for at least one call and :attr:`TimerSettings.warmup_seconds`
   (:func:`~fftgauge.harness.timing.clock.warm_up`).
4. Loops per sample (:func:`~fftgauge.harness.timing.clock.autorange`): starting at 1 and
   doubling until a run of ``loops`` back-to-back calls lasts an eighth of the *target*,
   then scaled so that one sample lasts about the target
   (:attr:`TimerSettings.target_sample_seconds`, 1 ms by default); a single call longer
   than the target gives ``loops = 1``. 25 samples keep a fast case near 0.05 s.
5. Samples: :attr:`TimerSettings.samples` (25 in-process; the timing runner asks for 100)
   samples, fewer (never fewer than :attr:`TimerSettings.min_samples`) when the per-case
   budget runs out. The timing runner
   takes them in rounds with other cases in between (:class:`TimingSession`,
   :func:`~fftgauge.harness.timing.case_job.time_case`; :mod:`fftgauge.harness.timing.runner` says
   why), one untimed call before each round and at least one sample per round. Garbage
   collection is disabled while sampling (as :mod:`timeit` does) and restored after; outputs
   are dropped at once, never kept.
6. Overhead and floor: after every sample, the same number of loop iterations runs empty
   (the loop's own cost per call, ``overhead_seconds``, subtracted from every sample), and
   the null backend's plan (:mod:`fftgauge.backends.null`: ``execute`` returns its input) runs on
   the same input: what it reads after the subtraction is the *floor* (``floor_seconds``),
   the cost of one Python-level call, the smallest time any Python backend can report.
   The call itself is not subtracted: a user calling the FFT pays it too, and a bare
   ``timeit`` loop over the same plan includes it (``benchmarks/bench_timing.py``).
7. The row reports the median per-call time with a distribution-free 95% interval
   (:func:`fftgauge.harness.stats.median_ci`) and the relative IQR (:func:`fftgauge.harness.stats.relative_spread`).

Cold-cache mode (:attr:`TimerSettings.cold_cache`): before each sample a buffer larger than
the last-level cache (:mod:`fftgauge.harness.timing.caches`) is written, outside the timed
region, and every sample is one call (``loops = 1``), so each call starts with its input,
output and tables out of cache.

Threads: :func:`limit_threads` caps BLAS/OpenMP pools with threadpoolctl around the
measurement, so that "1 thread" means one; the backend's own thread option is set by the
registry (``load_backend(spec, threads=N)``).

Every time is read on the timer's clock (:class:`Timer`,
:func:`~fftgauge.harness.timing.case_job.time_case`): tests pass a fake one.
"""

from __future__ import annotations

import math
from contextlib import contextmanager
from dataclasses import dataclass, replace
from typing import Any, Callable, Iterator

import numpy as np

from fftgauge.backends.base import Plan
from fftgauge.backends.null import NullPlan
from fftgauge.harness.timing.caches import evict_caches
from fftgauge.harness.timing.clock import (DEFAULT_CLOCK, DEFAULT_WARMUP_SECONDS, MAX_LOOPS, TARGET_SAMPLE_SECONDS, Clock,
                                           autorange, gc_paused, sample_target_ns, time_empty_loop, time_loops,
                                           warm_up)
from fftgauge.harness.stats import LOW_QUANTILE, median_ci, order_statistic_ranks, quantile_ci, relative_spread


@dataclass(frozen=True)
class TimerSettings:
    """How a case is timed.

    Attributes
    ----------
    samples : samples to take (each of ``loops`` calls).
    min_samples : fewest samples even when the budget runs out.
    target_sample_seconds : minimum duration of one sample (the autorange target).
    budget_seconds : time after which sampling stops once ``min_samples`` are in;
        ``None`` for no budget. Counts the sampling only (all rounds together), not the
        warm-up and the autorange.
    warmup_seconds : warm-up duration (at least one call).
    cold_cache : evict the caches before every sample (then ``loops = 1``).
    eviction_bytes : size of the eviction buffer; ``None`` for
        :func:`fftgauge.harness.timing.caches.eviction_bytes`.
    confidence : coverage of the interval on the median.
    subtract_overhead : subtract the null plan's loop overhead from every sample.
    max_loops : most calls per sample the autorange chooses (a guard against a plan that
        takes no time).
    """

    samples: int = 25
    min_samples: int = 5
    target_sample_seconds: float = TARGET_SAMPLE_SECONDS
    budget_seconds: float | None = 2.0
    warmup_seconds: float = DEFAULT_WARMUP_SECONDS
    cold_cache: bool = False
    eviction_bytes: int | None = None
    confidence: float = 0.95
    subtract_overhead: bool = True
    max_loops: int = MAX_LOOPS


@dataclass(frozen=True)
class Measurement:
    """The timer's result for one plan: per-call times in seconds.

    Attributes
    ----------
    seconds, seconds_low, seconds_high : median per-call time and its confidence interval
        (overhead subtracted when the settings say so).
    samples, loops : samples taken and calls per sample.
    overhead_seconds : the timing loop's own cost per call (median of empty-loop samples),
        subtracted when the settings say so.
    floor_seconds : what a plan that does nothing (the null backend: one Python call that
        returns its input) reads after that subtraction: the smallest time any Python-level
        backend can report; compare small-N readings with it.
    relative_spread : IQR over median of the per-call times; ``None`` when the median is
        not positive.
    coverage : exact coverage of the interval (below ``confidence`` for fewer than 6 samples).
    sample_seconds : every per-call sample time, in the order taken.
    cold_cache : whether the caches were evicted before every sample.
    seconds_p10, seconds_p10_low, seconds_p10_high : the 10th percentile of the per-call
        times (:data:`fftgauge.harness.stats.LOW_QUANTILE`) and its interval
        (:func:`fftgauge.harness.stats.quantile_ci`): what the code takes when the machine leaves it
        alone, far less moved by other load than the median.
    """

    seconds: float
    seconds_low: float
    seconds_high: float
    samples: int
    loops: int
    overhead_seconds: float
    floor_seconds: float
    relative_spread: float | None
    coverage: float
    sample_seconds: tuple[float, ...]
    cold_cache: bool
    seconds_p10: float | None = None
    seconds_p10_low: float | None = None
    seconds_p10_high: float | None = None


@contextmanager
def limit_threads(threads: int | None) -> Iterator[None]:
    """Cap BLAS/OpenMP thread pools at ``threads`` inside the block (no cap for ``None``)."""
    if threads is None:
        yield
        return
    from threadpoolctl import threadpool_limits

    with threadpool_limits(limits=threads):
        yield


class Timer:
    """Times plans with fixed :class:`TimerSettings` (see the module docstring for the method).

    ``clock`` is what every timed loop, the warm-up and the budget read (a callable returning
    nanoseconds, :data:`fftgauge.harness.timing.clock.DEFAULT_CLOCK` by default); tests give a
    fake one.
    """

    def __init__(self, settings: TimerSettings | None = None, clock: Clock | None = None):
        self.settings = settings or TimerSettings()
        self.clock = clock or DEFAULT_CLOCK

    def target_ns(self) -> int:
        """Return the shortest duration of one sample in nanoseconds (:func:`sample_target_ns`)."""
        return sample_target_ns(self.settings.target_sample_seconds)

    def evict_caches(self) -> None:
        """Write the cold-cache eviction buffer of the settings' size (:func:`evict_caches`)."""
        evict_caches(self.settings.eviction_bytes)

    def measure(self, plan: Plan, x: np.ndarray) -> Measurement:
        """Time ``plan.execute`` on ``x`` and return the per-call :class:`Measurement`.

        ``x`` is copied and passed through ``plan.prepare`` outside the timed region, so a
        plan that overwrites its input never changes the caller's array.

        Raises
        ------
        Exception
            Whatever the plan raises.
        """
        session = self.start(plan, x)
        session.take(self.settings.samples)
        return session.result()

    def start(self, plan: Plan, x: np.ndarray) -> "TimingSession":
        """Prepare ``x`` for ``plan``, warm up and choose the loops per sample; return the session
        that takes the samples (:meth:`TimingSession.take`), in one go or in rounds.

        Raises
        ------
        Exception
            Whatever the plan raises.
        """
        x_in = plan.prepare(np.array(x, copy=True))
        session = TimingSession(self, plan.execute, NullPlan(plan.case).execute, x_in)
        with gc_paused():
            warm_up(plan.execute, x_in, self.settings.warmup_seconds, self.clock)
            session.loops = (1 if self.settings.cold_cache
                             else autorange(plan.execute, x_in, self.target_ns(), self.clock, self.settings.max_loops))
        return session


class TimingSession:
    """The samples of one plan, taken in one go or in several rounds with other work between.

    Made by :meth:`Timer.start`. Each :meth:`take` first makes one untimed call (whatever ran
    in between may have evicted the plan's data from the caches), then appends samples; the
    budget of the settings counts the time spent inside :meth:`take` calls only.
    :meth:`result` summarises every sample taken so far.
    """

    def __init__(self, timer: Timer, execute: Callable[[np.ndarray], Any], null_execute: Callable[[np.ndarray], Any],
                 x_in: np.ndarray):
        self.timer = timer
        self.execute = execute
        self.null_execute = null_execute
        self.x_in = x_in
        self.loops = 1
        self.raw_ns: list[int] = []
        self.null_ns: list[int] = []
        self.loop_ns: list[int] = []
        self.spent_ns = 0

    @property
    def spent_seconds(self) -> float:
        """Return the seconds spent inside :meth:`take` so far (what the budget counts)."""
        return self.spent_ns * 1e-9

    def take(self, count: int) -> None:
        """Take up to ``count`` more samples (fewer once the budget is spent and ``min_samples`` are in).

        Raises
        ------
        Exception
            Whatever the plan raises.
        """
        s = self.timer.settings
        execute, null_execute, x_in, loops = self.execute, self.null_execute, self.x_in, self.loops
        clock = self.timer.clock
        budget_ns = None if s.budget_seconds is None else math.ceil(s.budget_seconds * 1e9)
        started = clock()
        goal = len(self.raw_ns) + count
        # a full collection walks every object of the process (10-20 ms with scipy and pyFFTW
        # loaded): once per case, before its first round, not before every round
        with gc_paused(collect=not self.raw_ns):
            if self.raw_ns:
                execute(x_in)
            while len(self.raw_ns) < goal:
                if s.cold_cache:
                    self.timer.evict_caches()
                self.raw_ns.append(time_loops(execute, x_in, loops, clock))
                self.null_ns.append(time_loops(null_execute, x_in, loops, clock))
                self.loop_ns.append(time_empty_loop(loops, clock))
                if (budget_ns is not None and len(self.raw_ns) >= s.min_samples
                        and self.spent_ns + clock() - started >= budget_ns):
                    break
        self.spent_ns += clock() - started

    def result(self) -> Measurement:
        """Return the :class:`Measurement` of every sample taken so far.

        Raises
        ------
        ValueError
            When no sample was taken.
        """
        s = self.timer.settings
        if not self.raw_ns:
            raise ValueError("no sample was taken")
        loops = self.loops
        overhead = float(np.median(self.loop_ns)) / loops * 1e-9
        floor = float(np.median(self.null_ns)) / loops * 1e-9 - overhead
        per_call = np.asarray(self.raw_ns, dtype=float) / loops * 1e-9
        if s.subtract_overhead:
            per_call = per_call - overhead
        return _summarise(per_call, s.confidence, loops=loops, overhead_seconds=overhead, floor_seconds=floor,
                          cold_cache=s.cold_cache)


def _summarise(per_call: np.ndarray, confidence: float, loops: int, overhead_seconds: float,
               floor_seconds: float, cold_cache: bool) -> Measurement:
    """Return the :class:`Measurement` of per-call times: median and 10th percentile with
    their order-statistic intervals, the interval's exact coverage and the relative spread."""
    med, low, high = median_ci(per_call, confidence)
    _, _, coverage = order_statistic_ranks(per_call.size, confidence)
    p10, p10_low, p10_high = quantile_ci(per_call, LOW_QUANTILE, confidence)
    return Measurement(seconds=med, seconds_low=low, seconds_high=high, samples=int(per_call.size), loops=loops,
                       overhead_seconds=overhead_seconds, floor_seconds=floor_seconds,
                       relative_spread=relative_spread(per_call) if med > 0 else None, coverage=coverage,
                       sample_seconds=tuple(float(v) for v in per_call), cold_cache=cold_cache,
                       seconds_p10=p10, seconds_p10_low=p10_low, seconds_p10_high=p10_high)


def measure_self_reported(plan: Plan, x: np.ndarray, settings: TimerSettings,
                          clock: Clock = DEFAULT_CLOCK) -> Measurement | None:
    """Time ``plan`` by the durations the implementation reports itself, one call per sample.

    For backends whose plans expose ``last_self_seconds`` after each ``execute`` (an
    external program behind a pipe or a serial bridge measures its own elapsed time: the
    only meaningful number when the round trip dwarfs the transform). Returns ``None`` when
    a call reports no time, so the caller falls back to wall-clock timing. ``clock`` is read
    for the budget only.
    """
    x_in = plan.prepare(np.array(x, copy=True))
    for _ in range(3):  # warm-up
        plan.execute(x_in)
    budget_ns = None if settings.budget_seconds is None else math.ceil(settings.budget_seconds * 1e9)
    started = clock()
    seconds: list[float] = []
    while len(seconds) < settings.samples:
        plan.execute(x_in)
        own = getattr(plan, "last_self_seconds", None)
        if own is None:
            return None
        seconds.append(float(own))
        if (budget_ns is not None and len(seconds) >= settings.min_samples
                and clock() - started >= budget_ns):
            break
    return _summarise(np.asarray(seconds), settings.confidence, loops=1, overhead_seconds=0.0, floor_seconds=0.0,
                      cold_cache=False)


def measure(plan: Plan, x: np.ndarray, settings: TimerSettings | None = None, **overrides: Any) -> Measurement:
    """Time ``plan`` on ``x`` in this process and return the :class:`Measurement`.

    ``overrides`` replace fields of ``settings`` (e.g. ``samples=9``).

    Raises
    ------
    TypeError
        For an override that is not a :class:`TimerSettings` field.
    """
    base = settings or TimerSettings()
    return Timer(replace(base, **overrides) if overrides else base).measure(plan, x)
