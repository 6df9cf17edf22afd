"""The timer: planning time, then warm-up, loops per sample, many samples, overhead floor.

How one case is timed (:func:`time_case`, or :class:`Timer` in-process):

1. ``backend.plan(case)`` is timed once: the *planning time* (real work for FFTW-style
   backends, nothing for plain functions).
2. The input is prepared with ``plan.prepare`` outside every timed region.
3. Warm-up: the plan runs for at least one call and :attr:`TimerSettings.warmup_seconds`.
4. Loops per sample (an autorange): starting at 1 and doubling until a run of ``loops``
   back-to-back calls lasts an eighth of the *target*, then scaled so that one sample
   lasts about the target (:data:`TARGET_SAMPLE_SECONDS`, 1 ms, or 10 000 times the
   clock's resolution where that is coarser); a single call longer than the target gives
   ``loops = 1``. Why 1 ms: ``perf_counter`` reads in about 50-100 ns from Python and
   resolves 1 ns on Linux, so the two clock reads of a sample are about 0.01% of it; the
   per-call loop overhead (tens of ns) is measured and subtracted (step 6), not left in;
   and a sample well below the time slice the scheduler gives a process when CPUs are
   shared (about 3-4 ms measured on a loaded 2-core Linux machine) is rarely cut by another
   process, so most samples stay clean and the median ignores the rest. Samples of 2-4 ms
   were cut almost every time on that machine. 25 samples keep a fast case near 0.05 s.
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
the last-level cache (:func:`eviction_bytes`) is written, outside the timed region, and
every sample is one call (``loops = 1``), so each call starts with its input, output and
tables out of cache.

Threads: :func:`limit_threads` caps BLAS/OpenMP pools with threadpoolctl around the
measurement, so that "1 thread" means one; the backend's own thread option is set by the
registry (``load_backend(spec, threads=N)``).
"""

from __future__ import annotations

import gc
import glob
import itertools
import math
import os
import time
from contextlib import contextmanager
from dataclasses import dataclass, fields, replace
from functools import lru_cache
from typing import Any, Callable, Iterator

import numpy as np

from fftgauge.backends.base import Backend, Plan
from fftgauge.backends.null import NullPlan
from fftgauge.harness.cases import Case
from fftgauge.harness.errors import UnsupportedCase
from fftgauge.harness.battery.inputs import case_rng, random_input
from fftgauge.harness.timing.memory import detect_in_place, measure_memory
from fftgauge.harness.timing.opcount import pseudo_flops
from fftgauge.harness.rows import TimeRow
from fftgauge.harness.stats import LOW_QUANTILE, median_ci, order_statistic_ranks, quantile_ci, relative_spread

#: Duration of one sample (seconds); see the module docstring for why.
TARGET_SAMPLE_SECONDS = 1e-3
#: A sample lasts at least this many clock ticks, whatever the target.
MIN_CLOCK_TICKS = 10_000
#: Size of the cold-cache eviction buffer when the last-level cache size is unknown.
FALLBACK_EVICTION_BYTES = 64 * 2**20
#: The eviction buffer is this many times the last-level cache.
EVICTION_FACTOR = 1.5
#: Most loops per sample the autorange tries (a guard against a plan that takes no time).
MAX_LOOPS = 2**24


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
    eviction_bytes : size of the eviction buffer; ``None`` for :func:`eviction_bytes`.
    confidence : coverage of the interval on the median.
    subtract_overhead : subtract the null plan's loop overhead from every sample.
    """

    samples: int = 25
    min_samples: int = 5
    target_sample_seconds: float = TARGET_SAMPLE_SECONDS
    budget_seconds: float | None = 2.0
    warmup_seconds: float = 5e-3
    cold_cache: bool = False
    eviction_bytes: int | None = None
    confidence: float = 0.95
    subtract_overhead: bool = True


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


def clock_resolution_seconds() -> float:
    """Return the resolution :func:`time.perf_counter` reports (seconds)."""
    return time.get_clock_info("perf_counter").resolution


def _parse_cache_size(text: str) -> int | None:
    text = text.strip().upper()
    units = {"K": 2**10, "M": 2**20, "G": 2**30}
    try:
        if text and text[-1] in units:
            return int(text[:-1]) * units[text[-1]]
        return int(text)
    except ValueError:
        return None


def last_level_cache_bytes(root: str = "/sys/devices/system/cpu/cpu0/cache") -> int | None:
    """Return the size of the highest-level data or unified cache from sysfs, or ``None``."""
    best: tuple[int, int] | None = None
    for folder in glob.glob(os.path.join(root, "index*")):
        try:
            with open(os.path.join(folder, "level"), encoding="ascii") as fh:
                level = int(fh.read())
            with open(os.path.join(folder, "type"), encoding="ascii") as fh:
                kind = fh.read().strip()
            with open(os.path.join(folder, "size"), encoding="ascii") as fh:
                size = _parse_cache_size(fh.read())
        except (OSError, ValueError):
            continue
        if kind in ("Data", "Unified") and size and (best is None or level > best[0]):
            best = (level, size)
    return None if best is None else best[1]


def eviction_bytes() -> int:
    """Return the cold-cache buffer size: 1.5 x the last-level cache, else 64 MiB."""
    llc = last_level_cache_bytes()
    return FALLBACK_EVICTION_BYTES if llc is None else int(EVICTION_FACTOR * llc)


@contextmanager
def limit_threads(threads: int | None) -> Iterator[None]:
    """Cap BLAS/OpenMP thread pools at ``threads`` inside the block (no cap for ``None``)."""
    if threads is None:
        yield
        return
    from threadpoolctl import threadpool_limits

    with threadpool_limits(limits=threads):
        yield


@contextmanager
def _gc_paused(collect: bool = True) -> Iterator[None]:
    """Disable garbage collection inside the block (after a full collection when ``collect``)."""
    was_enabled = gc.isenabled()
    if collect:
        gc.collect()
    gc.disable()
    try:
        yield
    finally:
        if was_enabled:
            gc.enable()


def _time_loops(execute: Callable[[np.ndarray], Any], x: np.ndarray, loops: int) -> int:
    """Return the nanoseconds ``loops`` back-to-back calls ``execute(x)`` take."""
    repeat = itertools.repeat(None, loops)
    clock = time.perf_counter_ns
    start = clock()
    for _ in repeat:
        execute(x)
    return clock() - start


def _time_empty_loop(loops: int) -> int:
    """Return the nanoseconds ``loops`` iterations of :func:`_time_loops`'s loop take with no call."""
    repeat = itertools.repeat(None, loops)
    clock = time.perf_counter_ns
    start = clock()
    for _ in repeat:
        pass
    return clock() - start


@lru_cache(maxsize=1)
def _eviction_buffer(size: int) -> np.ndarray:
    """Return the cold-cache buffer of ``size`` bytes, kept for the next case of the process."""
    return np.zeros(size, dtype=np.uint8)


class Timer:
    """Times plans with fixed :class:`TimerSettings` (see the module docstring for the method)."""

    def __init__(self, settings: TimerSettings | None = None):
        self.settings = settings or TimerSettings()

    def _target_ns(self) -> int:
        seconds = max(self.settings.target_sample_seconds, MIN_CLOCK_TICKS * clock_resolution_seconds())
        return math.ceil(seconds * 1e9)

    def _evict(self) -> None:
        buffer = _eviction_buffer(self.settings.eviction_bytes or eviction_bytes())
        np.add(buffer, 1, out=buffer)  # read and write every byte: every line is brought in

    def _warm_up(self, execute: Callable, x: np.ndarray) -> None:
        deadline = time.perf_counter() + self.settings.warmup_seconds
        execute(x)
        while time.perf_counter() < deadline:
            execute(x)

    def _autorange(self, execute: Callable, x: np.ndarray) -> int:
        """Return the loops per sample that make one sample last about the target.

        Doubling from 1 until a run lasts an eighth of the target, then scaling to the
        target from the shortest of three runs (a run cut by another process is longer,
        never shorter; on a loaded 2-core machine two runs in a row were both cut often
        enough to matter), so samples last about the target rather than up to twice it.
        """
        target = self._target_ns()
        loops = 1
        while True:
            elapsed = _time_loops(execute, x, loops)
            if elapsed >= target or loops >= MAX_LOOPS:
                return loops
            if elapsed >= target // 8:
                break
            loops *= 2
        elapsed = max(1, min(elapsed, _time_loops(execute, x, loops), _time_loops(execute, x, loops)))
        return min(MAX_LOOPS, max(loops, math.ceil(loops * target / elapsed)))

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
        with _gc_paused():
            self._warm_up(plan.execute, x_in)
            session.loops = 1 if self.settings.cold_cache else self._autorange(plan.execute, x_in)
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
        self.spent_seconds = 0.0

    def take(self, count: int) -> None:
        """Take up to ``count`` more samples (fewer once the budget is spent and ``min_samples`` are in).

        Raises
        ------
        Exception
            Whatever the plan raises.
        """
        s = self.timer.settings
        execute, null_execute, x_in, loops = self.execute, self.null_execute, self.x_in, self.loops
        started = time.perf_counter()
        goal = len(self.raw_ns) + count
        # a full collection walks every object of the process (10-20 ms with scipy and pyFFTW
        # loaded): once per case, before its first round, not before every round
        with _gc_paused(collect=not self.raw_ns):
            if self.raw_ns:
                execute(x_in)
            while len(self.raw_ns) < goal:
                if s.cold_cache:
                    self.timer._evict()
                self.raw_ns.append(_time_loops(execute, x_in, loops))
                self.null_ns.append(_time_loops(null_execute, x_in, loops))
                self.loop_ns.append(_time_empty_loop(loops))
                if (s.budget_seconds is not None and len(self.raw_ns) >= s.min_samples
                        and self.spent_seconds + time.perf_counter() - started >= s.budget_seconds):
                    break
        self.spent_seconds += time.perf_counter() - started

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


def measure_self_reported(plan: Plan, x: np.ndarray, settings: TimerSettings) -> Measurement | None:
    """Time ``plan`` by the durations the implementation reports itself, one call per sample.

    For backends whose plans expose ``last_self_seconds`` after each ``execute`` (an
    external program behind a pipe or a serial bridge measures its own elapsed time: the
    only meaningful number when the round trip dwarfs the transform). Returns ``None`` when
    a call reports no time, so the caller falls back to wall-clock timing.
    """
    x_in = plan.prepare(np.array(x, copy=True))
    for _ in range(3):  # warm-up
        plan.execute(x_in)
    started = time.perf_counter()
    seconds: list[float] = []
    while len(seconds) < settings.samples:
        plan.execute(x_in)
        own = getattr(plan, "last_self_seconds", None)
        if own is None:
            return None
        seconds.append(float(own))
        if (settings.budget_seconds is not None and len(seconds) >= settings.min_samples
                and time.perf_counter() - started >= settings.budget_seconds):
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


def ns_per_nlogn(seconds: float, n: int) -> float | None:
    """Return ``seconds * 1e9 / (n log2 n)``, the time per unit of FFT work; ``None`` for n = 1.

    Common practice: N log2 N is the FFT's asymptotic cost, so this stays flat as n grows
    when a backend scales as it should.
    """
    if n <= 1:
        return None
    return seconds * 1e9 / (n * math.log2(n))


def gflops(flops: float, seconds: float) -> float:
    """Return ``flops / seconds / 1e9`` (GFLOP/s); 0.0 when ``seconds`` is not positive."""
    return flops / seconds / 1e9 if seconds > 0 else 0.0


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


def _open_case(backend: Backend, case: Case, settings: TimerSettings, seed: int) -> _OpenCase:
    """Plan ``case``, prepare its input and start its timing session (planning timed)."""
    x = random_input(case, case_rng(seed, case, "time"))
    start = time.perf_counter()
    plan = backend.plan(case)
    plan_seconds = time.perf_counter() - start
    try:
        session = Timer(settings).start(plan, x)
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


def time_case(backend: Backend, case_fields: tuple, options: dict) -> dict | None:
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
            return _time_whole(backend, case, settings, rest)
        if key not in _OPEN_CASES or round_index == 0:
            _close_open_case(key)
            _OPEN_CASES[key] = _open_case(backend, case, settings, rest["seed"])
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


def _time_whole(backend: Backend, case: Case, settings: TimerSettings, rest: dict[str, Any]) -> dict:
    """Time a backend that reports its own times in one call (rounds do not apply); return the row."""
    x = random_input(case, case_rng(rest["seed"], case, "time"))
    start = time.perf_counter()
    plan = backend.plan(case)
    plan_seconds = time.perf_counter() - start
    try:
        m = measure_self_reported(plan, x, settings)
        source = "program" if m is not None else "harness"
        if m is None:
            m = Timer(settings).measure(plan, x)
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
