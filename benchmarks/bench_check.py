"""Benchmark: wall time of `fftgauge check` with no options (numpy, scipy, pyfftw, direct and
the radix-2 references on @default; the references limited to n <= 512). Target: <= 60 s.

Run: ``.venv/bin/python benchmarks/bench_check.py``
"""

from __future__ import annotations

import json
import os
import subprocess
import sys
import tempfile
import time

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))

if __name__ == "__main__":
    with tempfile.TemporaryDirectory() as tmp:
        path = os.path.join(tmp, "check.json")
        started = time.perf_counter()
        proc = subprocess.run([sys.executable, "-m", "harness.cli", "check", "--quiet", "--json", path],
                              cwd=ROOT, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, text=True)
        seconds = time.perf_counter() - started
        rows = json.load(open(path))["rows"]
    cases = len({(r["backend"], r["kind"], r["dtype"], r["n"]) for r in rows if r["status"] != "skip"})
    bad = sum(r["status"] in ("fail", "error") for r in rows)
    print(f"fftgauge check (defaults): exit {proc.returncode}, {cases} cases checked, {len(rows)} rows, "
          f"{bad} failed/error rows, {seconds:.1f} s on {os.cpu_count()} cores; target <= 60 s: "
          f"{'meets' if seconds <= 60 else 'MISSES'}")
