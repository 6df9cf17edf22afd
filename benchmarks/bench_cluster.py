"""Benchmark: the battery on a Dask LocalCluster against the local run (issue 17).

Every size of ``--sizes`` (default 1..100000) on numpy, ``fft`` float64, the default checks:
``fftgauge check`` locally (its lanes, one worker process per core) and with ``--cluster
local:N`` (default 2 processes), same seed. Prints:

- the wall time of each and their ratio (target: the cluster run at most 1.2x the local one);
- the per-task overhead measured at start (median round trip of an empty task: scheduling
  plus transfer) against the work per task (median seconds a chunk ran on its worker), the
  overhead's share, and the chunk sizes the rule of harness/cluster/chunks.py chose from them;
- the projected wall time on a 32-core cluster: the part of the run that is no task
  (start-up, describing, the client's writing: the cluster run's wall time less its task
  time over N) plus the work and the tasks' overheads shared by 32.

Both runs are checked to give the same rows (apart from ``host``).

Run: ``.venv/bin/python benchmarks/bench_cluster.py --sizes 1..5000`` (a few minutes), or
with no option for the full range (hours on a 2-core machine).
"""

from __future__ import annotations

import argparse
import json
import os
import resource
import subprocess
import sys
import tempfile
import time

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
PROJECTED_CORES = 32
TARGET_RATIO = 1.2


def children_cpu_seconds() -> float:
    """Return the processor seconds (user + system) of every finished descendant so far."""
    usage = resource.getrusage(resource.RUSAGE_CHILDREN)
    return usage.ru_utime + usage.ru_stime


def load() -> str:
    """Return the one-minute load average as text."""
    return f"{os.getloadavg()[0]:.2f}"


def run_check(sizes: str, path: str, cluster: str | None) -> tuple[float, int, float]:
    """Return (wall seconds, exit code, processor seconds of the command and every process it
    started: its worker processes, and for ``local:N`` the Dask processes and theirs) of one
    ``fftgauge check`` run written to ``path``."""
    cmd = [sys.executable, "-m", "fftgauge", "check", "--backend", "numpy", "--kinds", "fft", "--dtypes", "float64",
           "--sizes", sizes, "--quiet", "--json", path] + (["--cluster", cluster] if cluster else [])
    cpu_before = children_cpu_seconds()
    started = time.perf_counter()
    proc = subprocess.run(cmd, cwd=ROOT, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, text=True)
    seconds = time.perf_counter() - started
    if proc.returncode not in (0, 1):
        sys.exit(f"bench_cluster: {' '.join(cmd)} exited {proc.returncode}: {proc.stderr.strip()[-500:]}")
    return seconds, proc.returncode, children_cpu_seconds() - cpu_before


def same_rows(local: list[dict], cluster: list[dict]) -> bool:
    """Return True when the cluster's rows, ``host`` left out, equal the local run's."""
    return [{k: v for k, v in r.items() if k != "host"} for r in cluster] == local


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sizes", default="1..100000")
    parser.add_argument("--processes", type=int, default=2)
    args = parser.parse_args()
    with tempfile.TemporaryDirectory() as tmp:
        local_path, cluster_path = os.path.join(tmp, "local.json"), os.path.join(tmp, "cluster.json")
        # the cluster first, then locally: a load that falls over the run does not favour the cluster
        loads = [load()]
        cluster_seconds, cluster_code, cluster_cpu = run_check(args.sizes, cluster_path, f"local:{args.processes}")
        loads.append(load())
        local_seconds, local_code, local_cpu = run_check(args.sizes, local_path, None)
        loads.append(load())
        local, cluster = json.load(open(local_path)), json.load(open(cluster_path))
    record, chunks = cluster["cluster"], cluster["cluster"]["chunks"]
    overhead, tasks = record["task_overhead_seconds"], chunks["tasks"]
    work = chunks["work_seconds_total"]
    task_seconds = work + tasks * overhead
    serial = max(0.0, cluster_seconds - task_seconds / args.processes)
    projected = serial + task_seconds / PROJECTED_CORES
    ratio = cluster_seconds / local_seconds
    cases = len({(r["kind"], r["dtype"], r["n"]) for r in local["rows"]})
    print(f"sizes {args.sizes} on numpy fft float64, default checks: {cases} cases, {len(local['rows'])} rows; "
          f"exits {local_code} local, {cluster_code} cluster; rows equal apart from host: "
          f"{same_rows(local['rows'], cluster['rows'])}")
    print(f"local ({os.cpu_count()} cores): {local_seconds:.1f} s; local:{args.processes}: {cluster_seconds:.1f} s; "
          f"ratio {ratio:.2f} (target <= {TARGET_RATIO}: {'meets' if ratio <= TARGET_RATIO else 'MISSES'}); "
          f"processor time {local_cpu:.1f} s local, {cluster_cpu:.1f} s cluster (ratio {cluster_cpu / local_cpu:.2f}); "
          f"load average {' -> '.join(loads)} (before, between, after)")
    print(f"per-task overhead {overhead * 1e3:.1f} ms (median empty-task round trip) against "
          f"{chunks['work_seconds_per_task_median'] * 1e3:.0f} ms of work per task (median): overhead share "
          f"{chunks['overhead_share']:.1%}; {tasks} tasks of {chunks['cases_per_task_min']}.."
          f"{chunks['cases_per_task_max']} cases (median {chunks['cases_per_task_median']:g})")
    print(f"work in tasks {work:.1f} s, not in tasks {serial:.1f} s; projected on {PROJECTED_CORES} cores: "
          f"{projected:.1f} s ({local_seconds / projected:.1f}x faster than local)")


if __name__ == "__main__":
    main()
