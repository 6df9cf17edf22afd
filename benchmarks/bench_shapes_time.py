"""Benchmark: wall time of the shaped timing runner and the shaped A/B gate.

1. ``fftgauge time --shapes @default`` on numpy, scipy and pyfftw (every shaped kind family,
   float64, C layout, the runner's default samples and rounds);
2. ``fftgauge gate --old numpy --new scipy --shapes '256x256, 1000x64 along -1, 64x1000 along 0'
   --kinds fft --layouts C,F`` (six cases, the default 30 s budget).

Each line gives the wall time, the processor time of the command and its workers, and the
load average before and after (on a shared machine the wall time follows the load).

Run: ``.venv/bin/python benchmarks/bench_shapes_time.py``
"""

from __future__ import annotations

import json
import os
import subprocess
import sys
import tempfile
import time

from bench_shapes_check import children_cpu_seconds, load_average

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
BACKENDS = ("numpy", "scipy", "pyfftw")
GATE_SHAPES = "256x256, 1000x64 along -1, 64x1000 along 0"


def run(command: list[str], path: str) -> tuple[int, float, float, str, dict]:
    """Run ``command``; return (exit code, wall seconds, processor seconds, load before, document)."""
    load_before, cpu_before = load_average(), children_cpu_seconds()
    started = time.perf_counter()
    proc = subprocess.run(command, cwd=ROOT, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, text=True)
    seconds = time.perf_counter() - started
    if proc.returncode == 2:
        sys.exit(f"{' '.join(command[2:5])} failed to start: {proc.stderr.strip()}")
    with open(path, encoding="utf-8") as fh:
        doc = json.load(fh)
    return proc.returncode, seconds, children_cpu_seconds() - cpu_before, load_before, doc


if __name__ == "__main__":
    with tempfile.TemporaryDirectory() as tmp:
        path = os.path.join(tmp, "time.json")
        command = [sys.executable, "-m", "fftgauge", "time", "--quiet", "--json", path, "--shapes", "@default"]
        for name in BACKENDS:
            command += ["--backend", name]
        code, seconds, cpu, load, doc = run(command, path)
        ok = sum(r["status"] == "ok" for r in doc["rows"])
        print(f"fftgauge time --shapes @default ({', '.join(BACKENDS)}): exit {code}, {len(doc['rows'])} rows "
              f"({ok} timed), {seconds:.1f} s wall, {cpu:.1f} s processor, load {load} before, "
              f"{load_average()} after")
        path = os.path.join(tmp, "gate.json")
        command = [sys.executable, "-m", "fftgauge", "gate", "--quiet", "--json", path, "--old", "numpy", "--new",
                   "scipy", "--shapes", GATE_SHAPES, "--kinds", "fft", "--layouts", "C,F"]
        code, seconds, cpu, load, doc = run(command, path)
        verdicts = ", ".join(f"{r['kind']} {'x'.join(map(str, r['shape']))} {r['layout']}: {r['verdict']}"
                             for r in doc["rows"])
        print(f"fftgauge gate --old numpy --new scipy --shapes '{GATE_SHAPES}' --layouts C,F: exit {code}, "
              f"{seconds:.1f} s wall, {cpu:.1f} s processor, load {load} before, {load_average()} after; {verdicts}")
