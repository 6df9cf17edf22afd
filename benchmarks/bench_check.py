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

Throughput against an earlier commit (ABAB): ``.venv/bin/python benchmarks/bench_check.py
--before COMMIT --backend numpy --sizes 1..3000 --repeats 2`` runs ``fftgauge check --backend
numpy --sizes 1..3000 --seed 3`` alternately from this checkout and from a checkout of COMMIT
(``git worktree add``, the same virtual environment, ``PYTHONPATH`` at that checkout, whose
``fftgauge/__init__`` maps its own ``harness/`` and ``backends/``), prints every wall and
processor time, the medians and their ratio, and whether the rows of the two are equal field
for field apart from timing fields (a faster battery must give the same rows at a seed).

Where a case's time goes: ``.venv/bin/python benchmarks/bench_check.py --profile --sizes
1..3000 --step 37`` runs the worker's job (``check_case``, every kind, float32 and float64,
seed 3) in this process under cProfile for every 37th size, and prints the seconds per case
spent in the backend's calls on the main thread, in the ``concurrent`` check's threads (the
main thread waits for them), in the ground truth, in the exact convolution's sums, in
drawing inputs, and in each check. ``--before COMMIT --job --sizes 513..4096 --step 61``
compares that job alone (in a child process of each tree, ABAB) instead of the command.
"""

from __future__ import annotations

import argparse
import json
import os
import resource
import statistics
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


def defaults_run() -> int:
    """Time one ``fftgauge check`` with no options; return 0."""
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
    return 0


#: Row fields that hold times (they differ between any two runs).
TIME_FIELDS = ("seconds",)


def _git(*args: str) -> str:
    return subprocess.run(["git", *args], cwd=ROOT, check=True, capture_output=True, text=True).stdout.strip()


def comparable_rows(path: str) -> list[dict]:
    """Return the rows of a results file without their timing fields."""
    rows = json.load(open(path))["rows"]
    return [{k: v for k, v in r.items() if not any(t in k for t in TIME_FIELDS)} for r in rows]


def timed_check(tree: str, args: list[str], out: str) -> tuple[float, float, int]:
    """Return (wall s, processor s of the command and its workers, exit code) of one
    ``fftgauge check ARGS --json OUT`` run from ``tree``."""
    env = dict(os.environ, PYTHONPATH=tree)
    cpu, start = _children_cpu_seconds(), time.perf_counter()
    proc = subprocess.run([sys.executable, "-m", "fftgauge", "check", *args, "--quiet", "--json", out], cwd=tree,
                          env=env, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, text=True)
    return time.perf_counter() - start, _children_cpu_seconds() - cpu, proc.returncode


#: What ``--job`` runs in a child process of each tree: ``check_case`` over every STEP-th size,
#: printing wall and processor milliseconds per case.
JOB_CODE = """
import sys, time
from fftgauge.backends.registry import load_backend
from fftgauge.harness.battery.checks import check_case
from fftgauge.harness.cases import Case
from fftgauge.harness.sizes import parse_sizes
backend = load_backend("numpy")
check_case(backend, Case("fft", "float64", 8), 3)
cases = [Case(k, d, n) for n in parse_sizes(sys.argv[1])[::int(sys.argv[2])] for k in ("fft", "ifft", "rfft", "irfft")
         for d in ("float32", "float64")]
wall, cpu = time.perf_counter(), time.process_time()
for case in cases:
    check_case(backend, case, 3)
print(1000 * (time.perf_counter() - wall) / len(cases), 1000 * (time.process_time() - cpu) / len(cases))
"""


def compare_job(before: str, sizes: str, step: int, repeats: int) -> int:
    """ABAB of the worker's job alone (``JOB_CODE``) from this checkout and from ``before``;
    print milliseconds per case and the ratio of the medians; return 0."""
    commit = _git("rev-parse", before)
    times: dict[str, list[tuple[float, float]]] = {"now": [], "before": []}
    with tempfile.TemporaryDirectory() as tmp:
        old_tree = os.path.join(tmp, "before")
        _git("worktree", "add", "--detach", old_tree, commit)
        try:
            for i in range(repeats):
                for name, tree in ((("before", old_tree), ("now", ROOT)) if i % 2 == 0
                                   else (("now", ROOT), ("before", old_tree))):
                    out = subprocess.run([sys.executable, "-c", JOB_CODE, sizes, str(step)], cwd=tree,
                                         env=dict(os.environ, PYTHONPATH=tree), capture_output=True, text=True,
                                         check=True).stdout.split()
                    times[name].append((float(out[0]), float(out[1])))
                    print(f"run {i + 1} {name:6s}: {times[name][-1][0]:8.2f} ms wall, {times[name][-1][1]:8.2f} ms "
                          f"processor per case", flush=True)
        finally:
            _git("worktree", "remove", "--force", old_tree)
    cpu_now = statistics.median(t[1] for t in times["now"])
    cpu_before = statistics.median(t[1] for t in times["before"])
    print(f"check_case, numpy, sizes {sizes} every {step}th: processor per case now {cpu_now:.2f} ms, before "
          f"({commit[:7]}) {cpu_before:.2f} ms, ratio {cpu_now / cpu_before:.3f}; load average {_load()}")
    return 0


def compare_run(before: str, args: list[str], repeats: int) -> int:
    """Run ``check ARGS`` ABAB from this checkout and from commit ``before``; print the times,
    medians, ratio and whether the rows agree; return 0 when they agree, else 1."""
    commit = _git("rev-parse", before)
    with tempfile.TemporaryDirectory() as tmp:
        old_tree = os.path.join(tmp, "before")
        _git("worktree", "add", "--detach", old_tree, commit)
        try:
            trees = {"now": ROOT, "before": old_tree}
            walls: dict[str, list[float]] = {"now": [], "before": []}
            cpus: dict[str, list[float]] = {"now": [], "before": []}
            load_before = _load()
            for i in range(repeats):
                for name in (("before", "now") if i % 2 == 0 else ("now", "before")):
                    wall, cpu, rc = timed_check(trees[name], args, os.path.join(tmp, f"{name}{i}.json"))
                    walls[name].append(wall)
                    cpus[name].append(cpu)
                    print(f"run {i + 1} {name:6s}: {wall:7.1f} s wall, {cpu:7.1f} s processor, exit {rc}", flush=True)
            same = comparable_rows(os.path.join(tmp, "now0.json")) == comparable_rows(os.path.join(tmp, "before0.json"))
        finally:
            _git("worktree", "remove", "--force", old_tree)
    wall_now, wall_before = statistics.median(walls["now"]), statistics.median(walls["before"])
    cpu_now, cpu_before = statistics.median(cpus["now"]), statistics.median(cpus["before"])
    print(f"fftgauge check {' '.join(args)}: median wall now {wall_now:.1f} s, before ({commit[:7]}) "
          f"{wall_before:.1f} s, ratio {wall_now / wall_before:.3f}; processor now {cpu_now:.1f} s, before "
          f"{cpu_before:.1f} s, ratio {cpu_now / cpu_before:.3f}; {os.cpu_count()} cores, load average "
          f"{load_before} before, {_load()} after; rows equal apart from times: {same}")
    return 0 if same else 1


#: (label, function name as cProfile lists it, file name) of what --profile reports.
PROFILE_PARTS = (
    ("backend calls, main thread (execute_plan)", "execute_plan", "context_base.py"),
    ("concurrent check's threads (ThreadCrew.run)", "run", "thread_crew.py"),
    ("ground truth (reference_transform)", "reference_transform", "reference.py"),
    ("exact convolution sums", "exact_circular_convolution", "exact_checks.py"),
    ("input generators (case_rng)", "case_rng", "inputs.py"),
    ("input draws (random_input)", "random_input", "inputs.py"),
)


def profile_run(sizes: str, step: int) -> int:
    """Profile ``check_case`` in this process over every ``step``-th size of ``sizes``; print
    seconds per case by part and by check; return 0."""
    import cProfile
    import pstats

    sys.path.insert(0, ROOT)
    from fftgauge.backends.registry import load_backend
    from fftgauge.harness.battery.checks import CHECKS, check_case
    from fftgauge.harness.cases import Case
    from fftgauge.harness.sizes import parse_sizes

    backend = load_backend("numpy")
    check_case(backend, Case("fft", "float64", 8), 3)  # imports (scipy.fft) outside the profile
    cases = [Case(k, d, n) for n in parse_sizes(sizes)[::step] for k in ("fft", "ifft", "rfft", "irfft")
             for d in ("float32", "float64")]
    profile = cProfile.Profile()
    started = time.perf_counter()
    profile.enable()
    for case in cases:
        check_case(backend, case, 3)
    profile.disable()
    wall = time.perf_counter() - started
    cum: dict[tuple[str, str], float] = {}
    for (file, _, name), (_, _, _, cumtime, _) in pstats.Stats(profile).stats.items():
        key = (os.path.basename(file), name)
        cum[key] = cum.get(key, 0.0) + cumtime
    print(f"{len(cases)} cases (numpy, sizes {sizes} every {step}th, 4 kinds, float32 and float64) in {wall:.1f} s: "
          f"{1000 * wall / len(cases):.1f} ms per case (load average {_load()})")
    for label, name, file in PROFILE_PARTS:
        seconds = cum.get((file, name), 0.0)
        print(f"  {label:48s} {1000 * seconds / len(cases):7.2f} ms per case  {100 * seconds / wall:5.1f}%")
    for name, fn in CHECKS.items():
        seconds = cum.get((os.path.basename(fn.__code__.co_filename), fn.__name__), 0.0)
        print(f"  check {name:42s} {1000 * seconds / len(cases):7.2f} ms per case  {100 * seconds / wall:5.1f}%")
    return 0


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--before", default=None, help="commit to compare against (ABAB); without it: the defaults run")
    ap.add_argument("--backend", action="append", default=None, help="backend SPEC of the compared runs")
    ap.add_argument("--sizes", default="1..3000", help="sizes of the compared runs (default 1..3000)")
    ap.add_argument("--seed", default="3")
    ap.add_argument("--repeats", type=int, default=2, help="runs of each side (default 2)")
    ap.add_argument("--profile", action="store_true", help="profile check_case in this process instead")
    ap.add_argument("--step", type=int, default=37, help="with --profile or --job: every STEP-th size (default 37)")
    ap.add_argument("--job", action="store_true", help="with --before: compare the worker's job alone (check_case)")
    opts = ap.parse_args()
    if opts.profile:
        return profile_run(opts.sizes, opts.step)
    if opts.job and opts.before:
        return compare_job(opts.before, opts.sizes, opts.step, opts.repeats)
    if opts.before is None:
        return defaults_run()
    args = [a for b in (opts.backend or ["numpy"]) for a in ("--backend", b)]
    return compare_run(opts.before, args + ["--sizes", opts.sizes, "--seed", opts.seed], opts.repeats)


if __name__ == "__main__":
    sys.exit(main())
