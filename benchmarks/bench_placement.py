"""How much where a worker process runs moves a timing: the evidence behind CPU pinning and
the gate's several processes per side (harness/affinity.py, harness/gate_sampling.py).

For each size, ``--pairs-of-processes`` times, the script starts a fresh pair of worker
processes running the *same* backend (numpy by default), interleaves ``--blocks`` block
pairs of them exactly as the gate does (:class:`fftgauge.harness.gate.sampling.WorkerSampler` with one
process per side) and prints the paired ratio (:func:`fftgauge.harness.gate.estimates.estimate_paired`). Since
both sides run identical code, every ratio away from 1 is an effect of the processes: the
CPU each was placed on, and where code and data landed in memory. The same is done with the
whole run pinned to one CPU (:func:`fftgauge.harness.timing.affinity.pinned`), alternating the two ways so
that machine drift hits both alike. The spread of the ratios across process pairs is what a
gate built on a single pair of processes would mistake for a change.

Run: ``.venv/bin/python benchmarks/bench_placement.py [--sizes 256,2048,4096] [--pairs-of-processes 6]``
"""

from __future__ import annotations

import argparse
import os
import statistics
import sys

sys.path.insert(0, os.path.dirname(os.path.dirname(os.path.abspath(__file__))))


def one_pair(spec: str, n: int, blocks: int, seed: int) -> float:
    """Return the paired new/old ratio of one fresh pair of processes running ``spec`` at size ``n``."""
    from fftgauge.harness.cases import Case
    from fftgauge.harness.gate.estimates import estimate_paired
    from fftgauge.harness.gate.sampling import WorkerSampler

    class Item:
        case = Case("fft", "float64", n)
        new_key, old_key = "new", "old"

    samples_per_block = 5
    with WorkerSampler({"old": spec, "new": spec}, threads=1, seed=seed, samples_per_block=samples_per_block,
                       timeout_seconds=120, yardstick=False, processes=1) as sampler:
        sampler.prepare(Item)
        draw = sampler.sample(Item, blocks)
    return estimate_paired(draw.old, draw.new, samples_per_block).ratio


def main(argv: list[str] | None = None) -> int:
    """Run the comparison and print one line per size and placement; return 0."""
    from fftgauge.harness.timing.affinity import choose_cpus, pinned

    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--spec", default="numpy", help="backend on both sides (default numpy)")
    parser.add_argument("--sizes", default="256,2048,4096", help="comma list of sizes (default 256,2048,4096)")
    parser.add_argument("--pairs-of-processes", type=int, default=6, help="fresh process pairs per size and "
                                                                         "placement (default 6)")
    parser.add_argument("--blocks", type=int, default=40, help="block pairs per process pair (default 40)")
    args = parser.parse_args(argv)
    cpus = choose_cpus("auto", 1)
    print(f"{args.spec} against itself, {args.blocks} interleaved block pairs per pair of fresh processes; "
          f"pinned = both on CPU {cpus}, free = placed by the OS; load average {os.getloadavg()[0]:.2f}")
    for n in (int(v) for v in args.sizes.split(",")):
        ratios: dict[str, list[float]] = {"free": [], "pinned": []}
        for k in range(args.pairs_of_processes):
            for way in (("free", "pinned") if k % 2 == 0 else ("pinned", "free")):
                with pinned(cpus if way == "pinned" else None):
                    ratios[way].append(one_pair(args.spec, n, args.blocks, seed=1000 * n + k))
        for way, values in ratios.items():
            print(f"  n={n:<6} {way:<7} ratios {' '.join(f'{v:.3f}' for v in values)}   range "
                  f"{min(values):.3f}-{max(values):.3f}, sd {statistics.stdev(values):.3f}", flush=True)
    print(f"  load average after: {os.getloadavg()[0]:.2f}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
