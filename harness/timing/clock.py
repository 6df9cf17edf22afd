"""The clock and the timed loops: garbage-collection pause, loops of calls, warm-up, autorange.

Everything here reads time through a *clock*: a callable that takes no argument and returns
an integer count of nanoseconds from a fixed origin (:data:`DEFAULT_CLOCK`,
:func:`time.perf_counter_ns`, unless another is given). Tests pass a fake clock that a fake
plan advances by a known cost, so every function here can be checked exactly, without
sleeping and without asserting a real duration.

Why a sample lasts about 1 ms (:data:`TARGET_SAMPLE_SECONDS`; or :data:`MIN_CLOCK_TICKS` times
the clock's resolution where that is coarser): ``perf_counter`` reads in about 50-100 ns from
Python and resolves 1 ns on Linux, so the two clock reads of a sample are about 0.01% of it;
the per-call loop overhead (tens of ns) is measured with :func:`time_empty_loop` and
subtracted by the timer, not left in; and a sample well below the time slice the scheduler
gives a process when CPUs are shared (about 3-4 ms measured on a loaded 2-core Linux machine)
is rarely cut by another process, so most samples stay clean and the median ignores the
rest. Samples of 2-4 ms were cut almost every time on that machine.
"""

from __future__ import annotations

import gc
import itertools
import math
import time
from contextlib import contextmanager
from typing import Any, Callable, Iterator

#: A clock: no argument, returns nanoseconds (an int) from a fixed origin, never decreasing.
Clock = Callable[[], int]
#: The clock of every timed loop unless another is given.
DEFAULT_CLOCK: Clock = time.perf_counter_ns

#: Duration of one sample (seconds); see the module docstring for why.
TARGET_SAMPLE_SECONDS = 1e-3
#: A sample lasts at least this many clock ticks, whatever the target.
MIN_CLOCK_TICKS = 10_000
#: Most loops per sample :func:`autorange` tries (a guard against a plan that takes no time).
MAX_LOOPS = 2**24
#: Warm-up duration (seconds) when none is given; the warm-up makes at least one call anyway.
DEFAULT_WARMUP_SECONDS = 5e-3


def clock_resolution_seconds() -> float:
    """Return the resolution :func:`time.perf_counter` reports (seconds)."""
    return time.get_clock_info("perf_counter").resolution


def sample_target_ns(target_seconds: float = TARGET_SAMPLE_SECONDS, resolution_seconds: float | None = None) -> int:
    """Return the shortest duration of one sample in nanoseconds.

    That is ``target_seconds``, or :data:`MIN_CLOCK_TICKS` ticks of a clock of
    ``resolution_seconds`` (default: :func:`clock_resolution_seconds`) where that is longer,
    rounded up to a whole nanosecond.
    """
    resolution = clock_resolution_seconds() if resolution_seconds is None else resolution_seconds
    return math.ceil(max(target_seconds, MIN_CLOCK_TICKS * resolution) * 1e9)


@contextmanager
def gc_paused(collect: bool = True) -> Iterator[None]:
    """Disable garbage collection inside the block (after a full collection when ``collect``).

    Collection is enabled again on leaving the block only if it was enabled on entering,
    also when the block raises (as :mod:`timeit` does around its loops).
    """
    was_enabled = gc.isenabled()
    if collect:
        gc.collect()
    gc.disable()
    try:
        yield
    finally:
        if was_enabled:
            gc.enable()


def time_loops(execute: Callable[[Any], Any], x: Any, loops: int, clock: Clock = DEFAULT_CLOCK) -> int:
    """Return the nanoseconds ``loops`` back-to-back calls ``execute(x)`` take on ``clock``.

    Outputs are dropped at once. Raises whatever ``execute`` raises.
    """
    repeat = itertools.repeat(None, loops)
    start = clock()
    for _ in repeat:
        execute(x)
    return clock() - start


def time_empty_loop(loops: int, clock: Clock = DEFAULT_CLOCK) -> int:
    """Return the nanoseconds ``loops`` iterations of :func:`time_loops`'s loop take with no call:
    the loop's own cost, which the timer subtracts."""
    repeat = itertools.repeat(None, loops)
    start = clock()
    for _ in repeat:
        pass
    return clock() - start


def warm_up(execute: Callable[[Any], Any], x: Any, seconds: float = DEFAULT_WARMUP_SECONDS,
            clock: Clock = DEFAULT_CLOCK) -> int:
    """Call ``execute(x)`` once, then again until ``seconds`` have passed on ``clock``.

    Returns the number of calls made (at least 1). Raises whatever ``execute`` raises.
    """
    deadline = clock() + math.ceil(seconds * 1e9)
    execute(x)
    calls = 1
    while clock() < deadline:
        execute(x)
        calls += 1
    return calls


def autorange(execute: Callable[[Any], Any], x: Any, target_ns: int | None = None, clock: Clock = DEFAULT_CLOCK,
              max_loops: int = MAX_LOOPS) -> int:
    """Return the loops per sample that make one sample of ``execute(x)`` last about ``target_ns``.

    Doubling from 1 until a run lasts an eighth of the target, then scaling to the target
    from the shortest of three runs (a run cut by another process is longer, never shorter;
    on a loaded 2-core machine two runs in a row were both cut often enough to matter), so
    samples last about the target rather than up to twice it. A single call at least as
    long as the target gives 1; the result never exceeds ``max_loops``.

    Parameters
    ----------
    target_ns : duration of one sample; default :func:`sample_target_ns` of
        :data:`TARGET_SAMPLE_SECONDS`.

    Raises
    ------
    Exception
        Whatever ``execute`` raises.
    """
    target = sample_target_ns() if target_ns is None else int(target_ns)
    loops = 1
    while True:
        elapsed = time_loops(execute, x, loops, clock)
        if elapsed >= target or loops >= max_loops:
            return loops
        if elapsed >= target // 8:
            break
        loops *= 2
    elapsed = max(1, min(elapsed, time_loops(execute, x, loops, clock), time_loops(execute, x, loops, clock)))
    return min(max_loops, max(loops, math.ceil(loops * target / elapsed)))
