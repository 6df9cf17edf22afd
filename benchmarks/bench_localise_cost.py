"""Benchmark: what the localised diagnosis costs `fftgauge check` at the defaults.

Runs ``fftgauge check --backend numpy --backend scipy --backend pyfftw --quiet`` (the
default sizes, kinds and precisions) alternately from this checkout and from a checkout of
the commit before localisation landed (``git worktree add``, run with the same virtual
environment and ``PYTHONPATH`` pointing at that checkout: its ``fftgauge/__init__`` maps its
own ``harness/`` and ``backends/``, which the script verifies in a child process), ``--repeats``
times each, and prints every wall time and processor time (the command and its workers), the
medians and their ratio, and the load average before and after. Localisation runs only on
failures: on these passing libraries the ratio measures the cost of its presence (the size
patterns over the rows, the output-aliasing check, the findings).

Target (issue 19): ratio of the medians <= 1.10.

Run: ``.venv/bin/python benchmarks/bench_localise_cost.py [--before COMMIT] [--repeats 3]``
(COMMIT default: the parent of the first commit that mentions ``size_patterns``).
"""

from __future__ import annotations

import argparse
import os
import resource
import statistics
import subprocess
import sys
import tempfile
import time

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
BACKENDS = ("numpy", "scipy", "pyfftw")


def _git(*args: str) -> str:
    return subprocess.run(["git", *args], cwd=ROOT, check=True, capture_output=True, text=True).stdout.strip()


def before_commit() -> str:
    """Return the parent of the first commit that mentions ``size_patterns`` (the import in
    run.py was committed a little before the module itself)."""
    first = _git("log", "-S", "size_patterns", "--format=%H", "--", "harness").splitlines()[-1]
    return _git("rev-parse", f"{first}^")


def _cpu() -> float:
    usage = resource.getrusage(resource.RUSAGE_CHILDREN)
    return usage.ru_utime + usage.ru_stime


def _load() -> str:
    return f"{os.getloadavg()[0]:.2f}"


def run_check(tree: str, env: dict[str, str], out: str) -> tuple[float, float, int]:
    """Return (wall s, processor s, exit code) of one default check of BACKENDS run in ``tree``."""
    args = [sys.executable, "-m", "fftgauge", "check", "--quiet", "--json", out]
    for b in BACKENDS:
        args += ["--backend", b]
    cpu, start = _cpu(), time.perf_counter()
    proc = subprocess.run(args, cwd=tree, env=env, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, text=True)
    return time.perf_counter() - start, _cpu() - cpu, proc.returncode


def _env_for(tree: str) -> dict[str, str]:
    env = dict(os.environ)
    env["PYTHONPATH"] = tree
    return env


def _imports_from(tree: str, env: dict[str, str]) -> str:
    code = "import fftgauge.harness.battery.run as r; print(r.__file__)"
    return subprocess.run([sys.executable, "-c", code], cwd=tree, env=env, capture_output=True, text=True).stdout.strip()


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--before", default=None, help="commit to compare against")
    ap.add_argument("--repeats", type=int, default=3)
    opts = ap.parse_args()
    commit = opts.before or before_commit()
    with tempfile.TemporaryDirectory() as tmp:
        old_tree = os.path.join(tmp, "before")
        _git("worktree", "add", "--detach", old_tree, commit)
        try:
            trees = {"now": (ROOT, _env_for(ROOT)), "before": (old_tree, _env_for(old_tree))}
            for name, (tree, env) in trees.items():
                where = _imports_from(tree, env)
                if not where.startswith(os.path.realpath(tree)) and not where.startswith(tree):
                    print(f"{name}: imports from {where}, not {tree}", file=sys.stderr)
                    return 1
            times: dict[str, list[float]] = {"now": [], "before": []}
            cpus: dict[str, list[float]] = {"now": [], "before": []}
            load_before = _load()
            for i in range(opts.repeats):
                for name in (("now", "before") if i % 2 == 0 else ("before", "now")):
                    tree, env = trees[name]
                    wall, cpu, rc = run_check(tree, env, os.path.join(tmp, f"{name}{i}.json"))
                    times[name].append(wall)
                    cpus[name].append(cpu)
                    print(f"run {i + 1} {name:6s}: {wall:6.1f} s wall, {cpu:6.1f} s processor, exit {rc}", flush=True)
            now, before = statistics.median(times["now"]), statistics.median(times["before"])
            ratio = now / before
            print(f"median now {now:.1f} s, before ({commit[:7]}) {before:.1f} s: ratio {ratio:.3f} "
                  f"(target <= 1.10: {'meets' if ratio <= 1.10 else 'MISSES'}); {os.cpu_count()} cores, load average "
                  f"{load_before} before, {_load()} after")
            cpu_now, cpu_before = statistics.median(cpus["now"]), statistics.median(cpus["before"])
            print(f"processor time: median now {cpu_now:.1f} s, before {cpu_before:.1f} s: ratio "
                  f"{cpu_now / cpu_before:.3f}")
        finally:
            _git("worktree", "remove", "--force", old_tree)
    return 0


if __name__ == "__main__":
    sys.exit(main())
