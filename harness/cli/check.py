"""``fftgauge check``: the correctness battery from the command line."""

from __future__ import annotations

import argparse
import sys
import time

from fftgauge.harness.battery.run import DEFAULT_CASE_TIMEOUT_SECONDS, BatteryRequest, run_battery
from fftgauge.harness.cases import DTYPES, KINDS, NORMS
from fftgauge.harness.report.check_tables import format_summary, rows_frame
from fftgauge.harness.cli import add_common_options, default_results_path, parse_choice_list
from fftgauge.harness.errors import UsageError
from fftgauge.harness.sizes import parse_sizes

#: Size limit applied to the pure-Python references in a run that does not name sizes.
DEFAULT_PURE_PYTHON_MAX_N = 512


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
    """Return the validated :class:`BatteryRequest` the options describe.

    Raises
    ------
    UsageError
        For any malformed option value (the message names it).
    """
    from fftgauge.backends.registry import default_specs
    from fftgauge.harness.battery.checks import CHECKS

    if args.timeout <= 0:
        raise UsageError(f"--timeout must be positive seconds, got {args.timeout:g}")
    sizes = parse_sizes(args.sizes) if args.sizes is not None else parse_sizes("@default")
    limit = args.pure_python_max_n
    if limit is None:
        limit = DEFAULT_PURE_PYTHON_MAX_N if args.sizes is None else 0
    return BatteryRequest(
        specs=tuple(args.backend) if args.backend else tuple(default_specs()),
        kinds=parse_choice_list(args.kinds, KINDS, "kind"),
        dtypes=parse_choice_list(args.dtypes, DTYPES, "dtype") or ("float32", "float64"),
        sizes=tuple(sizes),
        norms=parse_choice_list(args.norms, NORMS, "norm") or ("backward",),
        checks=parse_choice_list(args.checks, tuple(CHECKS), "check"),
        seed=args.seed,
        threads=args.threads,
        timeout_seconds=args.timeout,
        max_n_pure_python=limit or None,
    )


def run(args: argparse.Namespace) -> int:
    """Run the battery; print the summary; return 0 (all held), 1 (a check failed or errored)."""
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
