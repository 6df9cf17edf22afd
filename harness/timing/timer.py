"""The timer: planning time, then warm-up, loops per sample, many samples, overhead floor.

How one case is timed (:func:`time_case`, or :class:`Timer` in-process); the loops, the
warm-up, the autorange and the garbage-collection pause are in
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
   :func:`time_case`; :mod:`fftgauge.harness.timing.runner` says why), one untimed call before each round
   and at least one sample per round. Garbage collection is disabled while sampling (as
   :mod:`timeit` does) and restored after; outputs are dropped at once, never kept.
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

Every time is read on the timer's clock (:class:`Timer`, :func:`time_case`): tests pass a
fake one.
"""

from __future__ import annotations

import math
from contextlib import contextmanager
from dataclasses import dataclass, fields, replace
from typing import Any, Callable, Iterator

import numpy as np

from fftgauge.backends.base import Backend, Plan
from fftgauge.backends.null import NullPlan
from fftgauge.harness.cases import Case
from fftgauge.harness.errors import UnsupportedCase
from fftgauge.harness.battery.conventions import declared_input_plan
from fftgauge.harness.battery.inputs import case_rng, random_input
from fftgauge.harness.timing.caches import evict_caches
from fftgauge.harness.timing.clock import (DEFAULT_CLOCK, DEFAULT_WARMUP_SECONDS, MAX_LOOPS, TARGET_SAMPLE_SECONDS, Clock,
                                           autorange, gc_paused, sample_target_ns, time_empty_loop, time_loops,
                                           warm_up)
from fftgauge.harness.timing.memory import detect_in_place, measure_memory
from fftgauge.harness.timing.opcount import gflops, ns_per_nlogn, pseudo_flops
from fftgauge.harness.rows import TimeRow
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


_SETTING_NAMES = {f.name for f in fields(TimerSettings)}
_CASE_OPTIONS = {"threads", "seed", "measure_memory", "rounds", "round"}


def _split_options(options: dict[str, Any]) -> tuple[TimerSettings, dict[str, Any]]:
    unknown = set(options) - _SETTING_NAMES - _CASE_OPTIONS
    if unknown:
        raise ValueError(f"unknown timing options: {', '.join(sorted(unknown))}; known: "
                         f"{', '.join(sorted(_SETTING_NAMES | _CASE_OPTIONS))}")
    settings = TimerSettings(**{k: v for k, v in options.items() if k in _SETTING_NAMES})
    rest = {"threads": 1, "seed": 0, "measure_memory": True, "rounds": 1, "round": 0}
    rest.update({k: v for k, v in options.items() if k in _CASE_OPTIONS})
    return settings, rest


@dataclass
class _OpenCase:
    """A case being timed over several rounds in this worker: its plan, input and samples so far."""

    plan: Plan
    x: np.ndarray
    session: TimingSession
    plan_seconds: float


#: Cases whose rounds are not all done, in this worker process, by (case fields, seed).
_OPEN_CASES: dict[tuple, _OpenCase] = {}


def planned(backend: Backend, case: Case, clock: Clock) -> tuple[Plan, float]:
    """Return ``backend.plan(case)`` and the seconds it took on ``clock``; the plan prepares
    numpy-convention inputs in the convention the backend declared (a packed irfft half
    spectrum, a bit-reversed ifft spectrum; :func:`~fftgauge.harness.battery.conventions.declared_input_plan`)."""
    start = clock()
    plan = backend.plan(case)
    plan_seconds = (clock() - start) * 1e-9
    return declared_input_plan(backend, plan), plan_seconds


def _open_case(backend: Backend, case: Case, settings: TimerSettings, seed: int, clock: Clock) -> _OpenCase:
    """Plan ``case``, prepare its input and start its timing session (planning timed)."""
    x = random_input(case, case_rng(seed, case, "time"))
    plan, plan_seconds = planned(backend, case, clock)
    try:
        session = Timer(settings, clock).start(plan, x)
    except BaseException:
        plan.close()
        raise
    return _OpenCase(plan, x, session, plan_seconds)


def _samples_this_round(settings: TimerSettings, rounds: int, round_index: int, taken: int) -> int:
    """Return how many samples round ``round_index`` of ``rounds`` takes: an equal share of
    ``settings.samples``, the last round whatever is still missing."""
    if round_index >= rounds - 1:
        return max(0, settings.samples - taken)
    return max(1, math.ceil(settings.samples / rounds))


def time_case(backend: Backend, case_fields: tuple, options: dict, clock: Clock | None = None) -> dict | None:
    """Plan and time one case, or one round of it; the job function the worker process runs.

    With ``rounds`` > 1 the runner calls this once per round, with other cases (and other
    backends' workers) timed in between: round 0 plans the case and starts its timing
    session, every round takes its share of the samples (one untimed call first), and the
    last round measures memory, closes the plan and returns the row over all the samples.
    A worker restarted half-way (after a crash of another case) plans the case again.

    Parameters
    ----------
    backend : the adapter, with its own thread option already set by the registry.
    case_fields : ``(kind, dtype, n, norm)``.
    options : :class:`TimerSettings` fields, plus ``threads`` (recorded in the row and the
        cap :func:`limit_threads` puts on BLAS/OpenMP pools; default 1), ``seed`` (of the
        random input, :func:`fftgauge.harness.battery.inputs.case_rng` with purpose ``"time"``; default 0),
        ``measure_memory`` (default True), ``rounds`` (default 1) and ``round`` (0-based,
        default 0).
    clock : what planning and sampling read (nanoseconds); default
        :data:`fftgauge.harness.timing.clock.DEFAULT_CLOCK`.

    Returns
    -------
    dict or None : :meth:`TimeRow.as_dict` (``memory_method`` None when memory is not
        measured) once the case is finished (the last round, or the only call of a backend
        that reports its own times), None after an earlier round.

    Raises
    ------
    UnsupportedCase
        When the backend does not claim the case.
    ValueError
        For an unknown option key.
    Exception
        Whatever the backend raises while planning or executing.
    """
    case = Case(*case_fields)
    settings, rest = _split_options(options)
    reason = backend.unsupported_reason(case)
    if reason is not None:
        raise UnsupportedCase(reason)
    key = (tuple(case_fields), rest["seed"])
    rounds, round_index = max(1, int(rest["rounds"])), int(rest["round"])
    with limit_threads(rest["threads"]):
        if getattr(backend, "reports_own_timing", False):
            _close_open_case(key)
            return _time_whole(backend, case, settings, rest, clock or DEFAULT_CLOCK)
        if key not in _OPEN_CASES or round_index == 0:
            _close_open_case(key)
            _OPEN_CASES[key] = _open_case(backend, case, settings, rest["seed"], clock or DEFAULT_CLOCK)
        open_case = _OPEN_CASES[key]
        try:
            open_case.session.take(_samples_this_round(settings, rounds, round_index,
                                                       len(open_case.session.raw_ns)))
            if round_index < rounds - 1:
                return None
            m = open_case.session.result()
            mem, in_place = _memory(open_case.plan, open_case.x, rest["measure_memory"])
        except BaseException:
            _close_open_case(key)
            raise
        _close_open_case(key)
    return _row(backend, case, rest["threads"], open_case.plan_seconds, m, mem, in_place, "harness")


def _close_open_case(key: tuple) -> None:
    """Close and forget the open case ``key`` of this worker (nothing when there is none)."""
    open_case = _OPEN_CASES.pop(key, None)
    if open_case is not None:
        open_case.plan.close()


def _memory(plan: Plan, x: np.ndarray, wanted: bool) -> tuple[Any, bool]:
    """Return (the memory measurement or None, whether the plan works in place)."""
    if wanted:
        mem = measure_memory(plan, x)
        return mem, mem.in_place
    return None, any(detect_in_place(plan, x))


def _time_whole(backend: Backend, case: Case, settings: TimerSettings, rest: dict[str, Any], clock: Clock) -> dict:
    """Time a backend that reports its own times in one call (rounds do not apply); return the row."""
    x = random_input(case, case_rng(rest["seed"], case, "time"))
    plan, plan_seconds = planned(backend, case, clock)
    try:
        m = measure_self_reported(plan, x, settings, clock)
        source = "program" if m is not None else "harness"
        if m is None:
            m = Timer(settings, clock).measure(plan, x)
        mem, in_place = _memory(plan, x, rest["measure_memory"])
    finally:
        plan.close()
    return _row(backend, case, rest["threads"], plan_seconds, m, mem, in_place, source)


def _row(backend: Backend, case: Case, threads: int, plan_seconds: float, m: Measurement, mem: Any,
         in_place: bool, source: str) -> dict:
    """Return the ``fftgauge-time/1`` row of a finished case as a dict."""
    flops = pseudo_flops(case.n, case.is_real)
    row = TimeRow(
        backend=backend.label, kind=case.kind, dtype=case.dtype, n=case.n, threads=threads,
        plan_seconds=plan_seconds, seconds=m.seconds, seconds_low=m.seconds_low,
        seconds_high=m.seconds_high, samples=m.samples, loops=m.loops, flops=flops,
        gflops=gflops(flops, m.seconds), ns_per_nlogn=ns_per_nlogn(m.seconds, case.n),
        peak_bytes=None if mem is None else mem.peak_bytes,
        in_place=in_place, norm=case.norm,
        message=("times measured by the program itself (its reported elapsed time per call)" if source == "program"
                 else "" if m.seconds > 0 else "median at or below the timing loop's overhead floor"),
        timing_source=source,
        overhead_seconds=m.overhead_seconds, floor_seconds=m.floor_seconds, relative_spread=m.relative_spread,
        coverage=m.coverage, cold_cache=m.cold_cache, memory_method=None if mem is None else mem.method,
        seconds_p10=m.seconds_p10, seconds_p10_low=m.seconds_p10_low, seconds_p10_high=m.seconds_p10_high,
    )
    return row.as_dict()
