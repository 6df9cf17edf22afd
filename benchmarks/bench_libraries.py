"""GFLOP/s of the CPU FFT libraries people choose between, on this machine, in ONE timing run.

numpy, scipy, pyFFTW, mkl_fft, ducc0 and JAX (CPU), fft and rfft, float32 and float64, at
N = 2^10, 2^16 and 2^20, one thread each, timed by fftgauge's own timing runner
(:func:`fftgauge.harness.timing.runner.run_timing`, what ``fftgauge time`` runs: one worker
process per backend, rounds interleaving the backends, medians with 95% intervals). GFLOP/s
counts 5 N log2 N operations per complex transform and 2.5 N log2 N per real one (the
contract's convention, whatever algorithm runs). Each column's cells are divided by the
column's fastest (1.00x is the fastest at that case).

One thread: ``threads=1`` sets every backend's own thread option and caps the BLAS/OpenMP
pools; XLA's CPU thread pool is fixed when JAX starts, so this script sets ``XLA_FLAGS`` to
one intra-op thread (unless the caller set ``XLA_FLAGS``). JAX runs with x64 on (the
adapter's default), compile time counted as planning, not in the GFLOP/s.

A library that is not installed is named and left out. The load average before and after is
printed: run it on a quiet machine.

Run: ``.venv/bin/python benchmarks/bench_libraries.py [--json PATH] [--samples N] [--budget SECONDS]``
"""

from __future__ import annotations

import argparse
import os
import sys
import time

HERE = os.path.dirname(os.path.abspath(__file__))
sys.path.insert(0, os.path.dirname(HERE))

LIBRARIES = ("numpy", "scipy", "pyfftw", "mkl_fft", "ducc0", "jax")
KINDS, DTYPES, SIZES = ("fft", "rfft"), ("float32", "float64"), (2**10, 2**16, 2**20)
#: One intra-op thread for XLA's CPU backend (read when JAX starts in the worker).
XLA_ONE_THREAD = "--xla_cpu_multi_thread_eigen=false intra_op_parallelism_threads=1"


def available(names: tuple[str, ...]) -> tuple[list[str], list[str]]:
    """Return (the libraries whose backends load here, a line per one that does not)."""
    from fftgauge.backends.registry import load_backend
    from fftgauge.harness.errors import UsageError

    ok, missing = [], []
    for name in names:
        try:
            load_backend(name)
            ok.append(name)
        except UsageError as exc:
            missing.append(f"{name}: {exc}")
    return ok, missing


def column_label(kind: str, dtype: str, n: int) -> str:
    """Return a column heading such as ``rfft f32 2^16``."""
    return f"{kind} {dtype.replace('float', 'f')} 2^{n.bit_length() - 1}"


def gflops_table(rows: list[dict], backends: list[str]) -> str:
    """Return the Markdown table: a row per backend, a column per case, ``GFLOP/s (ratio to the column's fastest)``."""
    columns = [(k, d, n) for k in KINDS for d in DTYPES for n in SIZES]
    rate = {(r["backend"], r["kind"], r["dtype"], r["n"]): r.get("gflops") for r in rows
            if r.get("status", "ok") == "ok" and r.get("gflops")}
    best = {c: max((rate.get((b, *c)) or 0.0) for b in backends) for c in columns}
    lines = ["| backend | " + " | ".join(column_label(*c) for c in columns) + " |",
             "|---|" + "|".join("---:" for _ in columns) + "|"]
    for b in backends:
        cells = []
        for c in columns:
            value = rate.get((b, *c))
            if not value:
                cells.append("-")
                continue
            text = f"{value:.2f} ({value / best[c]:.2f}x)"
            cells.append(f"**{text}**" if value == best[c] else text)
        lines.append(f"| {b} | " + " | ".join(cells) + " |")
    return "\n".join(lines)


def main() -> int:
    """Time the libraries and print the table; return 0 (1 when no library loads)."""
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--json", metavar="PATH", help="also write the fftgauge-time/1 results here")
    parser.add_argument("--samples", type=int, default=100, help="timing samples per case (default 100)")
    parser.add_argument("--budget", type=float, default=1.0, help="sampling seconds per case (default 1)")
    args = parser.parse_args()
    os.environ.setdefault("XLA_FLAGS", XLA_ONE_THREAD)

    from fftgauge.harness.timing.runner import TimingRequest, run_timing

    specs, missing = available(LIBRARIES)
    for line in missing:
        print(f"left out: {line}")
    if not specs:
        return 1
    load_before = os.getloadavg()
    started = time.monotonic()
    doc = run_timing(TimingRequest(specs=tuple(specs), kinds=KINDS, dtypes=DTYPES, sizes=SIZES, threads=1,
                                   samples=args.samples, budget_seconds=args.budget), args.json, quiet=True)
    seconds = time.monotonic() - started
    load_after = os.getloadavg()
    machine = doc.get("machine") or {}
    print(f"{machine.get('cpu', '?')}, {machine.get('cores', '?')} logical CPUs; one run of {seconds:.0f} s; "
          f"load average (1, 5, 15 min) before {', '.join(f'{v:.2f}' for v in load_before)}, after "
          f"{', '.join(f'{v:.2f}' for v in load_after)}; XLA_FLAGS={os.environ['XLA_FLAGS']!r}")
    versions = doc.get("backends") or {}
    print("versions: " + "; ".join(f"{label} {entry.get('version', '?')}" for label, entry in versions.items()))
    print()
    print("GFLOP/s, 1 thread (5 N log2 N per complex transform, 2.5 N log2 N per real one); in brackets the ratio "
          "to the fastest in the column (bold)")
    print(gflops_table(doc["rows"], list(versions) or specs))
    errors = [r for r in doc["rows"] if r.get("status") == "error"]
    for r in errors:
        print(f"error: {r['backend']} {r['kind']} {r['dtype']} n={r['n']}: {r.get('message')}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
