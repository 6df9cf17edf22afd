"""Benchmark: wall time of `fftgauge check` with no options (numpy, scipy, pyfftw, direct and
the radix-2 references on @default). Target: <= 60 s. With no --sizes, the pure-Python
references are checked up to the sizes whose case is estimated at 0.1 s or less
(harness/battery/budget.py, REFERENCE_CASE_BUDGET_SECONDS: their seconds per call measured on
their smallest sizes, times the calls a case makes); their larger sizes are skip rows giving
the estimate. Every other backend has the default per-case budget of 10 s.

Besides the wall time it prints the processor time the run used (the command and its
worker processes, user + system) and the machine's load average before and after: on a
machine shared with other work the wall time depends on that load, the processor time much
less.

Run: ``.venv/bin/python benchmarks/bench_check.py``
"""

from __future__ import annotations

import json
import os
import resource
import subprocess
import sys
import tempfile
import time

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))


def _children_cpu_seconds() -> float:
    usage = resource.getrusage(resource.RUSAGE_CHILDREN)
    return usage.ru_utime + usage.ru_stime


def _load() -> str:
    try:
        return f"{os.getloadavg()[0]:.2f}"
    except OSError:
        return "n/a"


if __name__ == "__main__":
    with tempfile.TemporaryDirectory() as tmp:
        path = os.path.join(tmp, "check.json")
        load_before = _load()
        cpu_before = _children_cpu_seconds()
        started = time.perf_counter()
        proc = subprocess.run([sys.executable, "-m", "fftgauge", "check", "--quiet", "--json", path],
                              cwd=ROOT, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, text=True)
        seconds = time.perf_counter() - started
        cpu_seconds = _children_cpu_seconds() - cpu_before
        rows = json.load(open(path))["rows"]
    cases = len({(r["backend"], r["kind"], r["dtype"], r["n"]) for r in rows if r["status"] != "skip"})
    bad = sum(r["status"] in ("fail", "error") for r in rows)
    passes = sum(r["status"] == "pass" for r in rows)
    print(f"fftgauge check (defaults): exit {proc.returncode}, {cases} cases checked, {len(rows)} rows "
          f"({passes} pass, {bad} failed/error), {seconds:.1f} s on {os.cpu_count()} cores "
          f"({cpu_seconds:.1f} s of processor time; load average {load_before} before, {_load()} after); "
          f"target <= 60 s: {'meets' if seconds <= 60 else 'MISSES'}")
