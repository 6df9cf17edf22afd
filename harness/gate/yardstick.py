"""The yardstick: a fixed workload that shares no code with any backend under test.

The gate times it in every run, interleaved with the backends' samples, and records its
median per-call time with the run. When a stored baseline is compared with a fresh run, each
time is first expressed in yardstick units (divided by the yardstick's median time measured
in the same run), so that a machine that got uniformly faster or slower (another clock
speed, a noisier neighbour, a slower day of the same CI runner) does not look like a change
of the backend. :mod:`fftgauge.harness.gate.estimates` applies the correction; this module holds the workload.

Why a pure-Python loop, not a numpy kernel
------------------------------------------
- *It shares no code with the backends.* Every backend fftgauge drives runs through numpy
  (numpy.fft, scipy.fft, pyFFTW's numpy interface, a user's ctypes or C code on numpy
  buffers). A numpy kernel such as a matrix multiply would run numpy's own code and its
  bundled BLAS, so upgrading numpy (a candidate a team may well gate) would change the
  yardstick together with the thing measured, and the correction would hide or invent a
  regression. The loop below runs the interpreter alone.
- *It is pinned by the machine fingerprint.* What it executes depends only on the CPU and
  the Python version, and both are part of the fingerprint the gate compares with the
  baseline's (:func:`fftgauge.harness.results.machine_fingerprint`); the gate refuses (or warns)
  when they differ. So, with a matching fingerprint, a change in the yardstick's time is a
  change of the machine's speed, nothing else.
- *It is single-threaded and small.* Its data (a 256-entry table) stays in the first-level
  cache, so it measures the speed of one core and the share of it the process gets: clock
  frequency, CPU steal on virtual machines, a competing process on the same core.

What it does not see: memory-bandwidth or cache contention, which slow large transforms
more than small ones. A neighbour that thrashes the shared cache is therefore only partly
corrected for; the A/B mode (both sides in one run) is immune to it and is the mode to
prefer.

The workload (:func:`yardstick_kernel`) is a xorshift32 generator (Marsaglia, "Xorshift
RNGs", J. Stat. Softw. 8(14), 2003, shifts 13, 17, 5) driving a table look-up and a
floating-point recurrence: integer, branch-free logic and float work in fixed proportions,
:data:`YARDSTICK_ROUNDS` iterations per call, about 1.2-1.5 ms measured on the project's 2-core test
machine (near the timer's
sample target). The work is fixed, never autoranged, so every run times the same thing;
:data:`YARDSTICK_VERSION` changes whenever the workload does, and runs of different
versions are never compared.
"""

from __future__ import annotations

import time
from typing import Any, Sequence

import numpy as np

from fftgauge.harness.stats import LOW_QUANTILE, median_ci, quantile_ci

#: Version of the workload; runs of different versions are not compared.
YARDSTICK_VERSION = 1
#: Iterations of the loop per call.
YARDSTICK_ROUNDS = 4000
#: Untimed calls at the start of every block (the process may have been idle).
WARMUP_CALLS = 1

_TABLE = tuple(((i * 2654435761) % 1000003) / 1000003.0 for i in range(256))


def yardstick_kernel(rounds: int = YARDSTICK_ROUNDS) -> float:
    """Run the fixed workload for ``rounds`` iterations and return its float state.

    The return value depends on every iteration, so no iteration can be skipped.
    """
    state = 2463534242
    acc = 0.0
    table = _TABLE
    for _ in range(rounds):
        state ^= (state << 13) & 0xFFFFFFFF
        state ^= state >> 17
        state ^= (state << 5) & 0xFFFFFFFF
        acc = acc * 0.5 + table[state & 255]
    return acc


def yardstick_block(backend: Any, count: int) -> list[float]:
    """Worker job: time ``count`` calls of :func:`yardstick_kernel`; return seconds per call.

    ``backend`` is the worker's adapter and is not used (the worker that runs the yardstick
    loads the null backend). Garbage collection is paused while timing.

    Returns
    -------
    list of float
        One per-call time per sample, in the order taken.
    """
    from fftgauge.harness.timing.clock import gc_paused

    clock = time.perf_counter_ns
    out = []
    with gc_paused():
        for _ in range(WARMUP_CALLS):
            yardstick_kernel()
        for _ in range(count):
            start = clock()
            yardstick_kernel()
            out.append((clock() - start) * 1e-9)
    return out


def summarise(samples: Sequence[float], confidence: float = 0.95) -> dict[str, Any]:
    """Return the yardstick record a run stores: median seconds per call, its interval, the count.

    Keys: ``seconds``, ``seconds_low``, ``seconds_high`` (:func:`fftgauge.harness.stats.median_ci`),
    ``seconds_p10``, ``seconds_p10_low``, ``seconds_p10_high`` (:func:`fftgauge.harness.stats.quantile_ci`),
    ``samples``, ``version`` (:data:`YARDSTICK_VERSION`) and ``rounds``
    (:data:`YARDSTICK_ROUNDS`); ``None`` for no samples.

    Raises
    ------
    ValueError
        Never for an empty sequence (returns None); for a bad ``confidence``.
    """
    if len(samples) == 0:
        return None
    values = np.asarray(samples, dtype=float)
    med, low, high = median_ci(values, confidence)
    p10, p10_low, p10_high = quantile_ci(values, LOW_QUANTILE, confidence)
    return {"seconds": med, "seconds_low": low, "seconds_high": high, "seconds_p10": p10,
            "seconds_p10_low": p10_low, "seconds_p10_high": p10_high, "samples": len(samples),
            "version": YARDSTICK_VERSION, "rounds": YARDSTICK_ROUNDS}


def comparable(record: Any) -> bool:
    """Return True when a stored yardstick ``record`` measured this module's workload.

    It must be a mapping with a positive ``seconds`` and the same ``version`` and ``rounds``.
    """
    return (isinstance(record, dict) and record.get("version") == YARDSTICK_VERSION
            and record.get("rounds") == YARDSTICK_ROUNDS
            and isinstance(record.get("seconds"), (int, float)) and record["seconds"] > 0)
