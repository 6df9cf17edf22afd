"""Benchmark: the shaped ground truth of a 4096x4096 complex128 ``fftn`` (target: at most 10 s).

It times :func:`fftgauge.harness.shapes.reference.shaped_reference` (scipy.fft on
clongdouble over both axes, then the split into the hi/lo double-double pair) on a seeded
random input, three times (the first includes scipy's plan caches), and prints each time, the
processor time, the load average, and a 2048x2048 ``rfftn`` and ``irfftn`` for scale.

Run: ``.venv/bin/python benchmarks/bench_shapes_reference.py``
"""

from __future__ import annotations

import os
import time

import numpy as np

from fftgauge.harness.shapes.case import ShapeCase
from fftgauge.harness.shapes.reference import shaped_reference

TARGET_SECONDS = 10.0


def _signal(case: ShapeCase) -> np.ndarray:
    rng = np.random.default_rng(20261203)
    re = rng.standard_normal(case.input_shape)
    if case.base_kind == "rfft":
        return re.astype(case.input_dtype)
    return (re + 1j * rng.standard_normal(case.input_shape)).astype(case.input_dtype)


def _time(case: ShapeCase, repeats: int) -> list[tuple[float, float]]:
    x = _signal(case)
    out = []
    for _ in range(repeats):
        wall, cpu = time.perf_counter(), time.process_time()
        ref = shaped_reference(x, case)
        out.append((time.perf_counter() - wall, time.process_time() - cpu))
        del ref
    return out


def main() -> None:
    print(f"load average before: {os.getloadavg()[0]:.2f}, cores: {os.cpu_count()}")
    case = ShapeCase("fftn", "float64", (4096, 4096), (0, 1))
    runs = _time(case, 3)
    for i, (wall, cpu) in enumerate(runs):
        print(f"{case.label()}: run {i + 1}: {wall:.2f} s wall, {cpu:.2f} s processor")
    best = min(w for w, _ in runs)
    print(f"best {best:.2f} s, target {TARGET_SECONDS:.0f} s: {'met' if best <= TARGET_SECONDS else 'NOT met'}")
    for kind in ("rfftn", "irfftn"):
        other = ShapeCase(kind, "float64", (2048, 2048), (0, 1))
        wall, cpu = _time(other, 1)[0]
        print(f"{other.label()}: {wall:.2f} s wall, {cpu:.2f} s processor")
    print(f"load average after: {os.getloadavg()[0]:.2f}")


if __name__ == "__main__":
    main()
