"""Benchmark: what a worker process costs. For each start method, the seconds to start a
worker on the numpy backend, run its first job and close it (median of 5), and the
milliseconds per small job (an 8-point FFT, median of 5 runs of 300 calls), which include
the pipe round trip, the CPU-time limit and the look for processes the job left running.

Run: ``.venv/bin/python benchmarks/bench_worker.py``
"""

from __future__ import annotations

import os
import statistics
import time

import numpy as np

from fftgauge.harness.cases import Case
from fftgauge.harness.execution import jobs
from fftgauge.harness.execution.launch import start_methods
from fftgauge.harness.execution.worker import Worker

#: Workers started per start method, and small jobs per worker.
STARTS = 5
CALLS = 300


def measure(method: str) -> tuple[float, float]:
    """Return (median seconds to start, serve one job and close; median ms per small job)."""
    case, x = Case("fft", "float64", 8), np.ones(8, complex)
    starts, per_call = [], []
    for _ in range(STARTS):
        t0 = time.perf_counter()
        with Worker("numpy", start_method=method) as worker:
            worker.call(jobs.plan_and_execute, case, x, timeout_seconds=60)
            t1 = time.perf_counter()
            for _ in range(CALLS):
                worker.call(jobs.plan_and_execute, case, x, timeout_seconds=60)
            per_call.append((time.perf_counter() - t1) / CALLS * 1e3)
            t2 = time.perf_counter()
        starts.append(t1 - t0 + time.perf_counter() - t2)
    return statistics.median(starts), statistics.median(per_call)


def main() -> None:
    print(f"load average before: {os.getloadavg()[0]:.2f}")
    for method in [m for m in ("subprocess", "spawn", "forkserver") if m in start_methods()]:
        start_s, call_ms = measure(method)
        print(f"{method:>10}: start + first job + close {start_s:.3f} s, per small job {call_ms:.3f} ms")
    print(f"load average after: {os.getloadavg()[0]:.2f}")


if __name__ == "__main__":
    main()
