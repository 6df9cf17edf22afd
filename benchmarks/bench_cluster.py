"""Benchmark: the battery on a Dask LocalCluster against the local run (issue 17).

Sizes on numpy, ``fft`` float64, the default checks: ``fftgauge check`` locally (its lanes,
one worker process per core) and with ``--cluster local:N`` (default 2 processes), same
seed, in two parts that together stand for every size from 1 to 100000: every size of
``1..--full`` (default 3000), and a systematic sample of the rest (every ``--stride``-th
size, default 997, a prime so the sample mixes every factorisation). Each part runs
cluster, local, cluster, local (ABAB: a load that drifts over the runs weighs on both
alike); the ratio is the sum of the cluster's wall times over the local ones'. Prints:

- the wall time of each and their ratio (target: the cluster run at most 1.2x the local one);
- the per-task overhead measured at start (median round trip of an empty task: scheduling
  plus transfer) against the work per task (median seconds a chunk ran on its worker), the
  overhead's share, and the chunk sizes the rule of harness/cluster/chunks.py chose from them;
- the projection to every size from 1 to 100000: the full part as measured plus the sample's
  work times the stride, on this machine's Dask processes and on a 32-core cluster (the part of a
  run that is no task, start-up and closing, plus the work and the tasks' overheads shared
  by 32);
- the load average before and after every run (the machine may be shared: the figures are
  only as quiet as it was).

Every cluster run is checked to give the local run's rows (apart from ``host``).

Run: ``.venv/bin/python benchmarks/bench_cluster.py`` (about 20 minutes on a quiet 2-core
machine); ``--full 500 --stride 9973`` for a quick look.
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


def run_part(sizes: str, processes: int, tmp: str, loads: list[str]) -> dict:
    """Return the figures of one part run ABAB (cluster, local, cluster, local): wall and
    processor seconds of each, rows equal, and the cluster envelope's chunk record (last run)."""
    part: dict = {"cluster": [], "local": [], "cpu_cluster": 0.0, "cpu_local": 0.0, "same": True}
    local_rows = None
    for turn, cluster in enumerate([f"local:{processes}", None] * 2):
        path = os.path.join(tmp, f"run{turn}.json")
        seconds, code, cpu = run_check(sizes, path, cluster)
        loads.append(load())
        doc = json.load(open(path))
        part["cluster" if cluster else "local"].append(seconds)
        part["cpu_cluster" if cluster else "cpu_local"] += cpu
        if cluster:
            part["doc"] = doc
            part["code_cluster"] = code
        else:
            part["code_local"] = code
            local_rows = doc["rows"]
            part["rows"] = len(local_rows)
            part["cases"] = len({(r["kind"], r["dtype"], r["n"]) for r in local_rows})
            part["same"] = part["same"] and same_rows(local_rows, part["doc"]["rows"])
    chunks = part["doc"]["cluster"]["chunks"]
    part["overhead"] = part["doc"]["cluster"]["task_overhead_seconds"]
    part["chunks"], part["work"], part["tasks"] = chunks, chunks["work_seconds_total"], chunks["tasks"]
    return part


def report_part(name: str, sizes: str, part: dict, processes: int) -> None:
    """Print one part's ratio, processor time and chunking."""
    cluster, local = sum(part["cluster"]), sum(part["local"])
    chunks = part["chunks"]
    print(f"{name} ({sizes if len(sizes) < 40 else sizes[:37] + '...'}): {part['cases']} cases, {part['rows']} rows; "
          f"exits {part['code_local']} local, {part['code_cluster']} cluster; rows equal apart from host: "
          f"{part['same']}")
    print(f"  local ({os.cpu_count()} cores) {' + '.join(f'{s:.1f}' for s in part['local'])} s; local:{processes} "
          f"{' + '.join(f'{s:.1f}' for s in part['cluster'])} s; ratio {cluster / local:.2f} "
          f"(target <= {TARGET_RATIO}: {'meets' if cluster / local <= TARGET_RATIO else 'MISSES'}); processor time "
          f"{part['cpu_local']:.1f} s local, {part['cpu_cluster']:.1f} s cluster")
    print(f"  per-task overhead {part['overhead'] * 1e3:.1f} ms (median empty-task round trip) against "
          f"{chunks['work_seconds_per_task_median'] * 1e3:.0f} ms of work per task (median): overhead share "
          f"{chunks['overhead_share']:.1%}; {part['tasks']} tasks of {chunks['cases_per_task_min']}.."
          f"{chunks['cases_per_task_max']} cases (median {chunks['cases_per_task_median']:g}); work in tasks "
          f"{part['work']:.1f} s")


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--full", type=int, default=3000, help="every size of 1..FULL")
    parser.add_argument("--stride", type=int, default=997, help="then every STRIDE-th size up to 100000")
    parser.add_argument("--top", type=int, default=100000)
    parser.add_argument("--processes", type=int, default=2)
    args = parser.parse_args()
    full = f"1..{args.full}"
    sample = ",".join(str(n) for n in range(args.full + args.stride, args.top + 1, args.stride))
    loads = [load()]
    with tempfile.TemporaryDirectory() as tmp:
        parts = {"full": run_part(full, args.processes, tmp, loads),
                 "sample": run_part(sample, args.processes, tmp, loads)}
    report_part("full", full, parts["full"], args.processes)
    report_part(f"sample, every {args.stride}th", sample, parts["sample"], args.processes)
    cluster = sum(sum(p["cluster"]) for p in parts.values())
    local = sum(sum(p["local"]) for p in parts.values())
    print(f"both parts: ratio {cluster / local:.2f} (cluster {cluster:.1f} s, local {local:.1f} s over two runs each); "
          f"load average {' -> '.join(loads)} (before, then after each run)")
    # projection to 1..top: the full part, plus the sample's per-run figures times the stride
    f, s = parts["full"], parts["sample"]
    fixed = [max(0.0, min(p["cluster"]) - (p["work"] + p["tasks"] * p["overhead"]) / args.processes)
             for p in (f, s)]
    serial = max(fixed)  # one run's start-up and closing
    work = f["work"] + s["work"] * args.stride
    overheads = (f["tasks"] * f["overhead"]) + s["tasks"] * s["overhead"] * args.stride
    cores = f"{PROJECTED_CORES} cores"
    print(f"projected to 1..{args.top}: work in tasks {work:.0f} s; on {args.processes} Dask processes here ~"
          f"{(serial + (work + overheads) / args.processes) / 3600:.1f} h; on {cores} "
          f"{serial + (work + overheads) / PROJECTED_CORES:.0f} s (start-up and closing {serial:.1f} s, "
          f"{overheads:.0f} s of task overhead)")


if __name__ == "__main__":
    main()
