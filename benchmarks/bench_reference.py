"""Time the ground-truth transform (fftgauge.harness.battery.reference) and print the figures.

Run from the repository root:

    .venv/bin/python benchmarks/bench_reference.py            # default sizes
    .venv/bin/python benchmarks/bench_reference.py --repeats 5

Target: a 2^20-point float64 ``fft`` reference in at most 2 s (default method). The
double-double fallback (the default where long double is no wider than double) is timed at
2^16 .. 2^20 and at two primes (Bluestein path).
"""

from __future__ import annotations

import argparse
import os
import platform
import statistics
import time

import numpy as np

from fftgauge.harness.cases import Case
from fftgauge.harness.battery.inputs import case_rng, random_input
from fftgauge.harness.battery.reference import reference_method, reference_transform

TARGET_SECONDS = 2.0


def time_reference(case: Case, method: str, repeats: int) -> tuple[float, float, str]:
    """Return (median seconds, min seconds, method name) of ``repeats`` reference computations."""
    x = random_input(case, case_rng(0, case, "bench"))
    seconds = []
    name = ""
    for _ in range(repeats):
        start = time.perf_counter()
        r = reference_transform(x, case, method=method)
        seconds.append(time.perf_counter() - start)
        name = r.method
    return statistics.median(seconds), min(seconds), name


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeats", type=int, default=3, help="timed repetitions per row (median reported)")
    args = parser.parse_args()
    print(f"machine: {platform.processor() or platform.machine()}, {os.cpu_count()} CPUs, "
          f"numpy {np.__version__}, long double eps {np.finfo(np.longdouble).eps:.3g}")
    print(f"default method for float64 cases: {reference_method()}")
    rows = [
        (Case("fft", "float64", 2**20), "auto"),
        (Case("rfft", "float64", 2**20), "auto"),
        (Case("irfft", "float64", 2**20), "auto"),
        (Case("fft", "float64", 65537), "auto"),
        (Case("fft", "float64", 2**16), "double-double"),
        (Case("fft", "float64", 2**18), "double-double"),
        (Case("fft", "float64", 2**20), "double-double"),
        (Case("fft", "float64", 9973), "double-double"),
        (Case("fft", "float64", 65537), "double-double"),
        (Case("fft", "longdouble", 2**16), "auto"),
    ]
    print(f"{'case':32} {'method':24} {'median_seconds':>15} {'min_seconds':>12}")
    for case, method in rows:
        repeats = 1 if (method == "double-double" and case.n > 2**18) else args.repeats
        median_s, min_s, name = time_reference(case, method, repeats)
        print(f"{case.label():32} {name:24} {median_s:15.3f} {min_s:12.3f}")
        if case.n == 2**20 and case.kind == "fft" and method == "auto":
            verdict = "meets" if median_s <= TARGET_SECONDS else "MISSES"
            print(f"  -> {verdict} the {TARGET_SECONDS:.0f} s target for a 2^20-point reference")


if __name__ == "__main__":
    main()
