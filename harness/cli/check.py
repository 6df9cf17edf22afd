"""``fftgauge check``: the correctness battery from the command line.

Only the parser is built at import (``fftgauge --help`` imports every command module): the
battery, pandas and the checks are imported inside :func:`run`.
"""

from __future__ import annotations

import argparse
import sys
import time

from fftgauge.harness.battery.request import (DEFAULT_CASE_TIMEOUT_SECONDS, DEFAULT_PURE_PYTHON_MAX_N, BatteryRequest,
                                              build_request)
from fftgauge.harness.cli import add_common_options, default_results_path


def add_arguments(parser: argparse.ArgumentParser) -> None:
    """Add this sub-command's options to ``parser``."""
    add_common_options(parser, "backend", "kinds", "dtypes", "sizes", "seed", "json", "quiet", "threads")
    parser.add_argument("--norms", metavar="LIST", help="comma list of backward, ortho, forward (default backward)")
    parser.add_argument("--checks", metavar="LIST", help="comma list of checks to run (default: all)")
    parser.add_argument("--timeout", type=float, default=DEFAULT_CASE_TIMEOUT_SECONDS, metavar="SECONDS",
                        help=f"seconds one case may take before the backend is killed (default "
                             f"{DEFAULT_CASE_TIMEOUT_SECONDS:g})")
    parser.add_argument("--pure-python-max-n", type=int, default=None, metavar="N",
                        help="largest size given to the pure-Python references (default "
                             f"{DEFAULT_PURE_PYTHON_MAX_N} when --sizes is not given, else no limit; 0: no limit)")


def request_from_args(args: argparse.Namespace) -> BatteryRequest:
    """Return the validated :class:`BatteryRequest` the options describe
    (:func:`~fftgauge.harness.battery.request.build_request`, as the Python API does).

    Raises
    ------
    UsageError
        For any malformed option value (the message names it).
    """
    return build_request(backends=args.backend, sizes=args.sizes, kinds=args.kinds, dtypes=args.dtypes,
                         norms=args.norms, checks=args.checks, seed=args.seed, threads=args.threads,
                         timeout_seconds=args.timeout, pure_python_max_n=args.pure_python_max_n)


def run(args: argparse.Namespace) -> int:
    """Run the battery; print the summary; return 0 (all held), 1 (a check failed or errored)."""
    from fftgauge.harness.battery.run import run_battery
    from fftgauge.harness.report.check_tables import format_summary, rows_frame

    req = request_from_args(args)
    path = args.json or default_results_path("check")
    started = time.perf_counter()
    doc = run_battery(req, json_path=path, quiet=args.quiet)
    elapsed = time.perf_counter() - started
    df = rows_frame(doc["rows"])
    print(format_summary(df))
    refs = ", ".join(f"{method} for {dtype}" for dtype, method in doc["reference"].items())
    print(f"\nreference: {refs}; seed {req.seed}; {len(df)} rows in {elapsed:.1f} s; written to {path}",
          file=sys.stdout)
    bad = df["status"].isin(["fail", "error"]).any() if not df.empty else False
    return 1 if bad else 0
