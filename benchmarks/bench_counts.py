"""The instruction-count gate's detection and false-alarm rates, and its cost per case.

``detect`` (default): ``--trials`` independent gate decisions, each from fresh counts
(:func:`fftgauge.harness.counts.measure.count_sides`, ``--repeats`` per side) of the test
backend ``tests/data/fixed_work_fft.py`` (a fixed amount of extra work, not a sleep or a busy
wait): ``fft`` against itself (0% injected) and ``fft_plus1`` against ``fft`` (1% more numpy
passes: measured 1.0099-1.0101 times the instructions), each decided
by the gate's rule (:func:`fftgauge.harness.gate.decision.decide`) at ``--threshold``. One
trial counts the three sides once, so both comparisons share the old side's counts. With
``--competing`` a pure-Python spin runs on every CPU for the whole benchmark.

``cost``: seconds of wall time of one A/B case (numpy against numpy, the default repeats) at
each of ``--sizes`` (default 1024 and 65536).

Run: ``.venv/bin/python benchmarks/bench_counts.py --trials 20`` (about 10-20 min on 2 cores),
``.venv/bin/python benchmarks/bench_counts.py cost``. Results are printed, and written to
``results/bench-counts-<UTC time>.json``.
"""

from __future__ import annotations

import argparse
import json
import multiprocessing
import os
import sys
import time

HERE = os.path.dirname(os.path.abspath(__file__))
FIXED = os.path.join(HERE, os.pardir, "tests", "data", "fixed_work_fft.py")


def spin() -> None:
    """Burn one CPU until killed."""
    while True:
        pass


def detect(args: argparse.Namespace) -> dict:
    """Return the trials' ratios and verdicts."""
    from fftgauge.harness.cases import Case
    from fftgauge.harness.counts.cachegrind import require_valgrind
    from fftgauge.harness.counts.measure import count_ratio, count_sides
    from fftgauge.harness.gate.counted import count_estimate
    from fftgauge.harness.gate.decision import decide
    from fftgauge.harness.gate.request import DEFAULT_COUNT_THRESHOLD, parse_threshold

    threshold = parse_threshold(args.threshold)
    default = parse_threshold(DEFAULT_COUNT_THRESHOLD)
    specs = {"old": f"{FIXED}:fft", "same": f"{FIXED}:fft", "plus1": f"{FIXED}:fft_plus1"}
    trials = []
    for i in range(args.trials):
        started = time.monotonic()
        got = count_sides(require_valgrind(), specs, Case("fft", "float64", args.n), seed=1234 + i,
                          calls=args.transforms, repeats=args.repeats)
        est = [count_estimate(got[k], got["old"], 0.95) for k in ("same", "plus1")]
        verdicts = [v[0] for v in decide(est, threshold, 0.05)]
        at_default = [v[0] for v in decide(est, default, 0.05)]
        trial = {"ratio_same": est[0].ratio, "ratio_plus1": est[1].ratio, "verdict_same": verdicts[0],
                 "verdict_plus1": verdicts[1], "default_verdict_same": at_default[0],
                 "default_verdict_plus1": at_default[1], "interval_plus1": [est[1].ratio_low, est[1].ratio_high],
                 "spread": max(c.spread for c in got.values()),
                 "instructions": {k: list(c.instructions) for k, c in got.items()}, "seconds": time.monotonic() - started,
                 "load": os.getloadavg()[0]}
        trials.append(trial)
        print(f"trial {i + 1}: 0% {trial['ratio_same']:.5f} {verdicts[0]}; +1% {trial['ratio_plus1']:.5f} "
              f"{verdicts[1]} (at {DEFAULT_COUNT_THRESHOLD}: {at_default[0]}, {at_default[1]}); spread {trial['spread'] * 100:.3f}%; {trial['seconds']:.0f} s; load "
              f"{trial['load']:.1f}", flush=True)
    false_alarms = sum(t["verdict_same"] != "same" for t in trials)
    detected = sum(t["verdict_plus1"] == "slower" for t in trials)
    default_alarms = sum(t["default_verdict_same"] != "same" for t in trials)
    default_detected = sum(t["default_verdict_plus1"] == "slower" for t in trials)
    print(f"threshold {args.threshold}: 0% injected: {false_alarms} of {len(trials)} runs fail; +1% of passes "
          f"injected: {detected} of {len(trials)} detected")
    print(f"at the default threshold {DEFAULT_COUNT_THRESHOLD} (the +1% sits on it): {default_alarms} and "
          f"{default_detected} of {len(trials)}")
    return {"threshold": args.threshold, "repeats": args.repeats, "trials": trials, "false_alarms": false_alarms,
            "detected": detected, "default_threshold": DEFAULT_COUNT_THRESHOLD, "default_false_alarms": default_alarms,
            "default_detected": default_detected}


def cost(args: argparse.Namespace) -> dict:
    """Return the wall seconds of one A/B case per size."""
    from fftgauge.harness.cases import Case
    from fftgauge.harness.counts.cachegrind import default_calls, require_valgrind
    from fftgauge.harness.counts.measure import count_sides
    from fftgauge.harness.gate.request import DEFAULT_COUNT_REPEATS

    out = {}
    for n in (int(v) for v in args.sizes.split(",")):
        started = time.monotonic()
        got = count_sides(require_valgrind(), {"old": "numpy", "new": "numpy"}, Case("fft", "float64", n),
                          seed=1234, calls=default_calls(n), repeats=DEFAULT_COUNT_REPEATS)
        seconds = time.monotonic() - started
        out[n] = {"seconds": seconds, "instructions": got["new"].median, "calls": got["new"].calls,
                  "load": os.getloadavg()[0]}
        print(f"n={n}: {seconds:.0f} s for one A/B case ({DEFAULT_COUNT_REPEATS} repeats, K={got['new'].calls}); "
              f"{got['new'].median:,.0f} instructions per transform; load {os.getloadavg()[0]:.1f}", flush=True)
    return out


def main(argv: list[str]) -> int:
    """Run the benchmark the command line asks for; return 0."""
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("what", nargs="?", choices=("detect", "cost"), default="detect")
    parser.add_argument("--trials", type=int, default=20)
    parser.add_argument("--threshold", default="0.5%",
                        help="the gate's threshold (default 0.5%%: an injected 1%% sits at a 1%% threshold)")
    parser.add_argument("--n", type=int, default=64)
    parser.add_argument("--transforms", type=int, default=10)
    parser.add_argument("--repeats", type=int, default=2)
    parser.add_argument("--sizes", default="1024,65536")
    parser.add_argument("--competing", action="store_true")
    args = parser.parse_args(argv)
    spinners = [multiprocessing.Process(target=spin, daemon=True) for _ in range(os.cpu_count() or 1)] \
        if args.competing else []
    for p in spinners:
        p.start()
    try:
        result = detect(args) if args.what == "detect" else cost(args)
    finally:
        for p in spinners:
            p.kill()
    os.makedirs(os.path.join(HERE, os.pardir, "results"), exist_ok=True)
    path = os.path.join(HERE, os.pardir, "results", f"bench-counts-{time.strftime('%Y%m%d-%H%M%S', time.gmtime())}.json")
    with open(path, "w") as fh:
        json.dump({"what": args.what, "competing": args.competing, "result": result}, fh, indent=1)
    print(f"written to {path}")
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
