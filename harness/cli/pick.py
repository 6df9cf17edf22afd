"""``fftgauge pick``: which FFT backend to ship for a workload, with the evidence.

Parses the options, builds the :class:`~fftgauge.harness.selection.workload.Workload`, runs
:func:`~fftgauge.harness.selection.run.run_pick` and prints the answer in words and the
ranking table. Exit codes: 0 a backend is recommended, 1 none is (each backend's reasons
printed), 2 a bad request (one line on stderr).
"""

from __future__ import annotations

import argparse
import sys

from fftgauge.harness.cli import EXIT_FAILED, EXIT_OK, add_common_options
from fftgauge.harness.errors import UsageError
from fftgauge.harness.results import check_output_path, dumps, is_stdout, write_output
from fftgauge.harness.selection.workload import DEFAULT_CALLS_PER_PLAN

#: Timer settings of a pick (fewer samples than ``fftgauge time``: a ranking, not a record).
DEFAULT_SAMPLES, DEFAULT_ROUNDS, DEFAULT_BUDGET_SECONDS = 50, 5, 0.5


def add_arguments(parser: argparse.ArgumentParser) -> None:
    """Add pick's options: the workload, the backends, how hard to time, the outputs."""
    parser.add_argument("--backend", action="append", metavar="SPEC",
                        help="backend to weigh, repeatable (default: every available built-in library; not the "
                             "pure-Python references, the synthetic backends or the generic adapters)")
    parser.add_argument("--sizes", metavar="SIZES", help="the workload's sizes (required): N, A..B, 2^A..2^B, "
                                                         "@pow2, ... as for check")
    parser.add_argument("--kinds", metavar="LIST", help="comma list of fft, ifft, rfft, irfft (default fft)")
    add_common_options(parser, "dtypes", "threads", "seed", "json", "quiet", "pin",
                       defaults={"dtypes": "float64", "threads": "1"})
    parser.add_argument("--norm", metavar="NORM", help="backward, ortho or forward (default backward)")
    parser.add_argument("--calls-per-plan", type=int, default=None, metavar="N",
                        help=f"calls each plan will serve: planning is amortised over them (default {DEFAULT_CALLS_PER_PLAN})")
    parser.add_argument("--accuracy", metavar="LIMIT",
                        help="largest relative rms error accepted: eps units (8, 8eps) or a signal-to-error ratio "
                             "in dB (120dB); default: the battery's bounds")
    parser.add_argument("--sqnr", metavar="DB",
                        help="fixed-point workloads (q15, q31): the least SQNR in dB a backend must reach at every "
                             "fixed-point case, on noise at --sqnr-level (e.g. 60); replaces the sqnr check's "
                             "comparison with the textbook radix-2")
    parser.add_argument("--sqnr-level", metavar="DBFS",
                        help="the input level (noise peak, dBFS) --sqnr holds at: 0, -6, -20 or -40 (default 0, "
                             "full scale)")
    parser.add_argument("--samples", type=int, default=DEFAULT_SAMPLES, metavar="N",
                        help=f"timing samples per case (default {DEFAULT_SAMPLES})")
    parser.add_argument("--rounds", type=int, default=DEFAULT_ROUNDS, metavar="R",
                        help=f"rounds the samples are split into (default {DEFAULT_ROUNDS})")
    parser.add_argument("--budget", type=float, default=DEFAULT_BUDGET_SECONDS, metavar="SECONDS",
                        help=f"sampling time per case (default {DEFAULT_BUDGET_SECONDS:g})")


def settings_from_args(args: argparse.Namespace):
    """Return the :class:`~fftgauge.harness.selection.run.PickSettings` of the options.

    Raises
    ------
    UsageError
        For non-positive samples, rounds or budget, or a bad --pin-cpu.
    """
    from fftgauge.harness.selection.run import PickSettings
    from fftgauge.harness.timing.affinity import choose_cpus, parse_pin

    if args.samples < 5:
        raise UsageError(f"--samples must be at least 5 for a meaningful interval, got {args.samples}")
    if args.rounds < 1 or args.rounds > args.samples:
        raise UsageError(f"--rounds must be from 1 to --samples ({args.samples}), got {args.rounds}")
    if not args.budget > 0:
        raise UsageError(f"--budget must be positive seconds, got {args.budget:g}")
    return PickSettings(seed=args.seed, samples=args.samples, rounds=args.rounds, budget_seconds=args.budget,
                        cpus=choose_cpus(parse_pin(args.pin_cpu), args.threads or 1))


def report_text(doc: dict) -> str:
    """Return the terminal answer: the sentences, then the ranking table."""
    from fftgauge.harness.selection.table import candidates_of, ranking_table

    ranked = candidates_of(doc["rows"])
    sentences = "\n".join(f"- {s}." for s in doc["summary"])
    note = (f"(per call: one call of each case of the workload, planning amortised over "
            f"{doc['workload']['calls_per_plan']:,} calls; interval: 95%)")
    return f"{sentences}\n\n{ranking_table(ranked)}\n{note}"


def run(args: argparse.Namespace) -> int:
    """Pick a backend for the workload; print the answer; return 0, or 1 when none is recommended."""
    from fftgauge.harness.selection.run import run_pick
    from fftgauge.harness.selection.workload import build_workload

    workload = build_workload(args.sizes, args.kinds, args.dtypes, args.norm, args.threads, args.calls_per_plan,
                              args.accuracy, args.sqnr, args.sqnr_level)
    settings = settings_from_args(args)
    check_output_path(args.json)
    doc = run_pick(workload, args.backend, settings, quiet=args.quiet)
    out = sys.stderr if is_stdout(args.json) else sys.stdout
    print(report_text(doc), file=out)
    if args.json:
        write_output(args.json, dumps(doc))
        if not is_stdout(args.json):
            print(f"written to {args.json}", file=out)
    return EXIT_OK if doc["recommended"] else EXIT_FAILED
