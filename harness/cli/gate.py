"""``fftgauge gate``: the regression gate for CI.

Three ways to run it (see docs/ci-gate.md for CI jobs that use them):

- ``fftgauge gate --old SPEC --new SPEC [--sizes ...]``: A/B in one run, samples of both
  interleaved in a random order; the mode to use for pull requests.
- ``fftgauge gate --baseline FILE|DIR [--backend SPEC]...``: re-measure the cases stored in a
  ``fftgauge time`` (or ``fftgauge gate``) results file, or the per-case median of the last
  ``--last K`` runs stored in a folder, and compare, corrected by the yardstick.
- ``fftgauge gate --backend SPEC --save DIR``: measure and store only (seeds a history).

``--shapes`` (arrays, batches, N-D transforms) works in every mode and with both metrics: the
cases measured in A/B, referenced and record mode, the stored shaped cases re-measured in
stored mode (see docs/reference.md, Gate).

Exit codes (:func:`fftgauge.harness.gate.decision.exit_code`): 0 pass (and INCONCLUSIVE with
``--inconclusive pass``, the default); 1 a regression, an accuracy regression, a backend
failure, or INCONCLUSIVE with ``--inconclusive fail``; 2 a bad request; 130/143/129 stopped
by SIGINT/SIGTERM/SIGHUP (what finished is written, ``complete: false``). This module only parses the
options, builds the request (:func:`fftgauge.harness.gate.request.build_request`), runs it
(:func:`fftgauge.harness.gate.run.run_and_write`) and prints the summary.
"""

from __future__ import annotations

import argparse
import sys

from fftgauge.harness.cli import add_common_options, default_results_path
from fftgauge.harness.gate.history import DEFAULT_LAST_RUNS
from fftgauge.harness.gate.request import (DEFAULT_BUDGET_SECONDS, DEFAULT_COUNT_REPEATS, DEFAULT_COUNT_THRESHOLD,
                                           DEFAULT_INCONCLUSIVE, DEFAULT_METRIC, DEFAULT_THRESHOLD,
                                           DEFAULT_TIMEOUT_SECONDS, INCONCLUSIVE_POLICIES, METRICS, GateRequest,
                                           build_request)


def add_arguments(parser: argparse.ArgumentParser) -> None:
    """Add this sub-command's options to ``parser``."""
    mode = parser.add_argument_group("what to compare")
    mode.add_argument("--old", metavar="SPEC", help="A/B mode: the baseline implementation (e.g. the installed main "
                                                    "build)")
    mode.add_argument("--new", metavar="SPEC", help="A/B mode: the candidate implementation")
    mode.add_argument("--baseline", metavar="FILE|DIR",
                      help="stored mode: a fftgauge time (or gate) results file, or a folder of stored runs")
    mode.add_argument("--baseline-backend", metavar="LABEL",
                      help="with --baseline and one --backend: compare with the stored rows of this backend label "
                           "(default: the candidate's own label)")
    mode.add_argument("--last", type=int, default=DEFAULT_LAST_RUNS, metavar="K",
                      help=f"with --baseline DIR: the baseline is the per-case median of the last K runs "
                           f"measured on this machine (default {DEFAULT_LAST_RUNS})")
    add_common_options(parser, "backend", "kinds", "dtypes", "sizes", "seed", "json", "csv", "quiet", "threads",
                       "pin")
    from fftgauge.harness.shapes.options import LAYOUTS_HELP, SHAPES_HELP
    parser.add_argument("--shapes", metavar="SHAPES",
                        help=SHAPES_HELP + "; with --baseline and --backend: which stored shaped cases to re-measure")
    parser.add_argument("--layouts", metavar="LIST", help=LAYOUTS_HELP)
    parser.add_argument("--cluster", metavar="ADDRESS|local:N", help=argparse.SUPPRESS)  # refused in run()
    decide = parser.add_argument_group("how to decide")
    decide.add_argument("--metric", choices=METRICS, default=DEFAULT_METRIC,
                        help="what a case's ratio compares: time per call, or instructions per transform counted "
                             "under valgrind's cachegrind (machine load does not move them; needs valgrind) "
                             f"(default {DEFAULT_METRIC})")
    decide.add_argument("--threshold", default=None, metavar="PERCENT",
                        help="smallest slowdown that fails the gate, as 5%% or 0.05 (default "
                             + DEFAULT_THRESHOLD.replace("%", "%%") + " for time, "
                             + DEFAULT_COUNT_THRESHOLD.replace("%", "%%") + " for instructions)")
    decide.add_argument("--count-repeats", type=int, default=DEFAULT_COUNT_REPEATS, metavar="R",
                        help="with --metric instructions: counts per side per case, each from a run of K and one "
                             f"of 2K transforms, so the count's own spread is measured (default {DEFAULT_COUNT_REPEATS})")
    decide.add_argument("--count-transforms", type=int, default=None, metavar="K",
                        help="with --metric instructions: K (default: by size, from 1000 at small n down to 4)")
    decide.add_argument("--cache-sim", action="store_true",
                        help="with --metric instructions: also simulate the caches and report last-level misses "
                             "per transform (slower; the verdict stays on instructions)")
    decide.add_argument("--alpha", type=float, default=0.05, metavar="P",
                        help="family-wise significance level across the cases, Holm-corrected (default 0.05)")
    decide.add_argument("--budget", type=float, default=DEFAULT_BUDGET_SECONDS, metavar="SECONDS",
                        help=f"sampling time after the first round, for all cases together, spent on the "
                             f"inconclusive ones (default {DEFAULT_BUDGET_SECONDS:g})")
    decide.add_argument("--inconclusive", choices=INCONCLUSIVE_POLICIES, default=DEFAULT_INCONCLUSIVE,
                        help="exit code when no case is slower but some could not rule out a slowdown beyond "
                             "--threshold (headline INCONCLUSIVE): pass exits 0, fail exits 1 "
                             f"(default {DEFAULT_INCONCLUSIVE})")
    decide.add_argument("--accuracy", action="store_true",
                        help="also run the correctness battery on every case: a new failure, or an accuracy error "
                             "grown beyond --accuracy-growth times the baseline's, fails the gate")
    decide.add_argument("--accuracy-growth", type=float, default=2.0, metavar="FACTOR",
                        help="with --accuracy: largest tolerated growth of the accuracy error (default 2)")
    decide.add_argument("--allow-other-machine", action="store_true",
                        help="compare with a baseline measured on another machine (warns loudly) instead of "
                             "refusing")
    decide.add_argument("--timeout", type=float, default=DEFAULT_TIMEOUT_SECONDS, metavar="SECONDS",
                        help=f"seconds one job (a block of samples, a plan, a battery case) may take "
                             f"(default {DEFAULT_TIMEOUT_SECONDS:g})")
    out = parser.add_argument_group("outputs")
    out.add_argument("--markdown", metavar="PATH", help="write a Markdown summary (CI job summary, PR comment)")
    out.add_argument("--junit", metavar="PATH", help="write JUnit XML, one test case per case")
    out.add_argument("--save", metavar="DIR", help="append this run to a folder of stored runs (a history that "
                                                   "--baseline DIR and fftgauge report DIR read)")
    out.add_argument("--commit", metavar="ID", help="the commit measured, stored with the run (history plots "
                                                    "name runs by it)")


def request_from_args(args: argparse.Namespace) -> GateRequest:
    """Return the validated request the parsed options describe (:func:`build_request`).

    Raises
    ------
    UsageError
        As :func:`fftgauge.harness.gate.request.build_request`.
    """
    return build_request(old=args.old, new=args.new, backends=args.backend or (), baseline=args.baseline,
                         baseline_backend=args.baseline_backend, last=args.last, kinds=args.kinds,
                         dtypes=args.dtypes, sizes=args.sizes, seed=args.seed, threads=args.threads,
                         pin_cpu=args.pin_cpu, threshold=args.threshold, alpha=args.alpha, budget=args.budget,
                         accuracy=args.accuracy, accuracy_growth=args.accuracy_growth,
                         allow_other_machine=args.allow_other_machine, timeout=args.timeout,
                         inconclusive=args.inconclusive, save=args.save, commit=args.commit,
                         metric=args.metric, count_repeats=args.count_repeats,
                         count_transforms=args.count_transforms, cache_sim=args.cache_sim,
                         shapes=args.shapes, layouts=args.layouts)


def run(args: argparse.Namespace) -> int:
    """Run the gate; print the summary; return the exit code (0 pass, 1 regression or failure).

    Raises
    ------
    UsageError
        For a bad request (exit 2).
    """
    from fftgauge.harness.gate.decision import exit_code
    from fftgauge.harness.gate.outputs import summary_text
    from fftgauge.harness.gate.run import run_and_write

    if getattr(args, "cluster", None) is not None:
        from fftgauge.harness.errors import UsageError
        raise UsageError("gate times its A/B pairs on this machine only (A/B on a cluster is not built); "
                         "leave out --cluster, and run the gate on each host to be gated")

    from fftgauge.harness.results import check_output_path, is_stdout
    from fftgauge.harness.shutdown import stop_on_signals

    req = request_from_args(args)
    for path, option in ((args.json, "--json"), (args.markdown, "--markdown"), (args.junit, "--junit"),
                         (args.csv, "--csv")):
        check_output_path(path, option)
    out = sys.stderr if is_stdout(args.json) else sys.stdout  # --json -: standard output holds the JSON alone
    for warning in req.warnings:
        print(f"fftgauge: WARNING: {warning}", file=sys.stderr)
    with stop_on_signals():
        doc, written, stopped = run_and_write(req, json_path=args.json or default_results_path("gate"),
                                              markdown=args.markdown, junit=args.junit, csv=args.csv,
                                              save=args.save, quiet=args.quiet)
        print(summary_text(doc), file=out)
        print(f"\nwritten to {', '.join(written)}", file=out)
    return exit_code(doc["outcome"], req.settings.inconclusive, stopped)
