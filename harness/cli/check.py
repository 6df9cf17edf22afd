"""``fftgauge check``: the correctness battery from the command line.

Only the parser is built at import (``fftgauge --help`` imports every command module): the
battery, pandas and the checks are imported inside :func:`run`.
"""

from __future__ import annotations

import argparse
import sys
import time
from typing import Any

from fftgauge.harness.battery.budget import DEFAULT_CASE_BUDGET_SECONDS, REFERENCE_CASE_BUDGET_SECONDS
from fftgauge.harness.battery.request import (DEFAULT_CASE_TIMEOUT_SECONDS, DEFAULT_DTYPES, DEFAULT_SIZES, BatteryRequest,
                                              build_request)
from fftgauge.harness.cli import add_common_options, default_results_path
from fftgauge.harness.cluster.target import add_cluster_option, cluster_from_args


def add_arguments(parser: argparse.ArgumentParser) -> None:
    """Add this sub-command's options to ``parser``."""
    from fftgauge.harness.battery.checks import CHECKS  # names only: no pandas, no scipy

    add_common_options(parser, "backend", "kinds", "dtypes", "sizes", "seed", "json", "quiet", "threads",
                       defaults={"sizes": DEFAULT_SIZES, "dtypes": ",".join(DEFAULT_DTYPES),
                                 "json": "results/check-YYYYmmdd-HHMMSS.json, UTC; - for standard output"})
    add_criteria_and_outputs(parser)
    add_cluster_option(parser, "the battery's cases")
    parser.add_argument("--norms", metavar="LIST", help="comma list of backward, ortho, forward (default backward)")
    parser.add_argument("--shapes", metavar="SHAPES",
                        help="shaped cases (batched and N-D transforms): e.g. 256x256, 12^3, 1000x64 along -1, "
                             "16x12x10 over 1+2, @default, @deep; alone they replace the 1-D sizes, with --sizes "
                             "both run (one results file)")
    parser.add_argument("--layouts", metavar="LIST", help="with --shapes: comma list of C, F, strided, reversed "
                                                          "(default C; the layout check compares every one with C)")
    parser.add_argument("--checks", metavar="LIST", help=f"comma list of checks to run (default: all): {', '.join(CHECKS)}")
    parser.add_argument("--timeout", type=float, default=DEFAULT_CASE_TIMEOUT_SECONDS, metavar="SECONDS",
                        help=f"seconds one case may take before the backend is killed (default "
                             f"{DEFAULT_CASE_TIMEOUT_SECONDS:g})")
    parser.add_argument("--pure-python-max-n", type=int, default=None, metavar="N",
                        help="largest size given to the pure-Python references (default: no size limit; without "
                             f"--sizes they get a budget of {REFERENCE_CASE_BUDGET_SECONDS:g} s per case instead)")
    parser.add_argument("--case-budget", type=float, default=DEFAULT_CASE_BUDGET_SECONDS, metavar="SECONDS",
                        help="skip, as 'skipped for time', the cases whose estimated duration (each backend's "
                             "seconds per call, measured on its smallest sizes) exceeds this "
                             f"(default {DEFAULT_CASE_BUDGET_SECONDS:g}; 0: no budget)")


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
                         timeout_seconds=args.timeout, pure_python_max_n=args.pure_python_max_n,
                         limits=args.limit, limits_file=args.limits, case_budget_seconds=args.case_budget,
                         shapes=getattr(args, "shapes", None), layouts=getattr(args, "layouts", None))


def run(args: argparse.Namespace) -> int:
    """Run the battery; print the summary; return 0 (all held), 1 (a check failed or errored)."""
    from fftgauge.harness.shapes.battery import run_check_request
    from fftgauge.harness.errors import RunStopped
    from fftgauge.harness.results import ResultsWriteError
    from fftgauge.harness.shutdown import stop_on_signals, stop_reason
    from fftgauge.harness.battery.unclaimed import not_run_lines
    from fftgauge.harness.report.check_tables import format_summary, rows_frame

    from fftgauge.harness.battery.criteria import limit_notes
    from fftgauge.harness.report.check_outputs import validate_outputs, write_check_outputs

    req = request_from_args(args)
    cluster = cluster_from_args(args)
    out = sys.stderr if validate_outputs(output_paths(args)) else sys.stdout
    path = args.json or default_results_path("check")
    started = time.perf_counter()
    stopped = write_error = None
    try:
        with stop_on_signals():
            if cluster is not None:
                from fftgauge.harness.cluster.battery import run_battery_on_cluster
                doc = run_battery_on_cluster(req, cluster, json_path=path, quiet=args.quiet)
            else:
                doc = run_check_request(req, json_path=path, quiet=args.quiet)  # 1-D sizes and/or shapes
    except RunStopped as exc:
        stopped, doc = exc, exc.doc
    except ResultsWriteError as exc:
        write_error, doc = exc, exc.doc
    except KeyboardInterrupt as exc:  # before the first case (while the backends describe themselves)
        name, code = stop_reason(exc)
        print(f"stopped by {name} before any case ran; nothing was written", file=out)
        return code
    elapsed = time.perf_counter() - started
    if stopped is not None or write_error is not None:
        code = report_cut_short(doc, stopped, write_error, out, elapsed)
        written = write_check_outputs(doc, junit=args.junit, markdown=args.markdown, csv=args.csv)
        if written:
            print(f"written from what finished: {', '.join(written)}", file=out)
        return code
    df = rows_frame(doc["rows"])
    from fftgauge.harness.shapes.summary import check_summary
    print(check_summary(doc, format_summary), file=out)  # 1-D rows as before, shaped rows by shape
    not_run = not_run_lines([r for r in doc["rows"] if not r.get("shape")])
    if not_run:
        print("\nnot run (sizes not claimed, or skipped for time; one line per reason):", file=out)
        print("\n".join(not_run), file=out)
    for note in limit_notes(doc["rows"], doc["request"].get("limits")):
        print(f"note: {note}", file=out)
    written = ["standard output" if path == "-" else path] + write_check_outputs(
        doc, junit=args.junit, markdown=args.markdown, csv=args.csv)
    refs = ", ".join(f"{method} for {dtype}" for dtype, method in doc["reference"].items())
    print(f"\nreference: {refs}; seed {req.seed}; {len(df)} rows in {elapsed:.1f} s; written to {', '.join(written)}",
          file=out)
    bad = df["status"].isin(["fail", "error"]).any() if not df.empty else False
    return 1 if bad else 0


def report_cut_short(doc: dict, stopped: Any, write_error: Any, out: Any, elapsed: float) -> int:
    """Print the summary of what finished in a run that a signal stopped or whose results file
    could not be written, and return the exit code: the signal's (130, 143, 129), or 2 for a
    results file that could not be written (the message names the fallback file)."""
    from fftgauge.harness.report.check_tables import format_summary, rows_frame

    df = rows_frame(doc["rows"])
    if not df.empty:
        print(format_summary(df, doc.get("backends")), file=out)
    if stopped is not None:
        finished = len({(r["backend"], r["kind"], r["dtype"], r["norm"], r["n"]) for r in doc["rows"]
                        if r["check"] != "all"})
        print(f"\nstopped by {stopped.signal_name} after {elapsed:.1f} s: {finished} case(s) finished; the results "
              f"file is marked incomplete (\"complete\": false)", file=out)
    if write_error is not None:
        print(f"fftgauge: error: {write_error}", file=sys.stderr)
        return 2
    return stopped.exit_code


def add_criteria_and_outputs(parser: argparse.ArgumentParser) -> None:
    """Add the user's pass criteria (``--limit``, ``--limits``) and the CI outputs (``--junit``,
    ``--markdown``, ``--csv``) to ``parser``."""
    parser.add_argument("--limit", action="append", metavar="[CHECK=]LIMIT",
                        help="your pass criterion instead of the built-in bound, repeatable: CHECK=8eps, "
                             "CHECK=1e-3rel, CHECK=-90dB, accuracy=1e-6abs@RMS (absolute rms error for an input of "
                             "rms RMS); CHECK all or left out: every value check")
    parser.add_argument("--limits", metavar="FILE", help='TOML file of criteria: a [limits] table of CHECK = "8 eps" '
                                                         "(--limit entries win)")
    parser.add_argument("--junit", metavar="PATH", help="write a JUnit XML report (one test case per backend x kind "
                                                        "x precision x check; - for standard output)")
    parser.add_argument("--markdown", metavar="PATH", help="write a Markdown summary for a pull-request comment "
                                                           "(- for standard output)")
    parser.add_argument("--csv", metavar="PATH", help="write every row as CSV (- for standard output)")


def output_paths(args: argparse.Namespace) -> dict[str, str | None]:
    """Return the outputs asked for: option name -> path (None when not asked)."""
    return {"json": args.json, "junit": args.junit, "markdown": args.markdown, "csv": args.csv}
