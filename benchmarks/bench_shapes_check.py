"""Benchmark: wall time of `fftgauge check --shapes @default` on numpy, scipy and pyfftw (every
shaped kind family, float32 and float64, C layout, every shaped check). Target: <= 60 s.

Besides the wall time it prints the processor time the run used (the command and its worker
processes, user + system) and the machine's load average before and after: on a machine
shared with other work the wall time depends on that load, the processor time much less.

Run: ``.venv/bin/python benchmarks/bench_shapes_check.py``
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
BACKENDS = ("numpy", "scipy", "pyfftw")


def children_cpu_seconds() -> float:
    """Return the user + system seconds of every finished child process so far."""
    usage = resource.getrusage(resource.RUSAGE_CHILDREN)
    return usage.ru_utime + usage.ru_stime


def load_average() -> str:
    """Return the one-minute load average as text ("n/a" where there is none)."""
    try:
        return f"{os.getloadavg()[0]:.2f}"
    except OSError:
        return "n/a"


if __name__ == "__main__":
    with tempfile.TemporaryDirectory() as tmp:
        path = os.path.join(tmp, "check.json")
        command = [sys.executable, "-m", "fftgauge", "check", "--quiet", "--json", path, "--shapes", "@default"]
        for name in BACKENDS:
            command += ["--backend", name]
        load_before = load_average()
        cpu_before = children_cpu_seconds()
        started = time.perf_counter()
        proc = subprocess.run(command, cwd=ROOT, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, text=True)
        seconds = time.perf_counter() - started
        cpu_seconds = children_cpu_seconds() - cpu_before
        if proc.returncode == 2:
            sys.exit(f"fftgauge check failed to start: {proc.stderr.strip()}")
        with open(path, encoding="utf-8") as fh:
            rows = json.load(fh)["rows"]
    cases = len({(r["backend"], r["kind"], r["dtype"], tuple(r["shape"]), tuple(r["axes"]), r["layout"])
                 for r in rows if r["status"] != "skip" or r["check"] != "all"})
    bad = sum(r["status"] in ("fail", "error") for r in rows)
    passes = sum(r["status"] == "pass" for r in rows)
    print(f"fftgauge check --shapes @default ({', '.join(BACKENDS)}): exit {proc.returncode}, {cases} shaped cases, "
          f"{len(rows)} rows ({passes} pass, {bad} failed/error), {seconds:.1f} s on {os.cpu_count()} cores "
          f"({cpu_seconds:.1f} s of processor time; load average {load_before} before, {load_average()} after); "
          f"target <= 60 s: {'meets' if seconds <= 60 else 'MISSES'}")
