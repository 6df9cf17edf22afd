"""``fftgauge time``: planning and execution times, rates and memory, as comparable tables."""

from __future__ import annotations

import argparse
import sys
import threading
import time

from fftgauge.harness.cases import DTYPES, KINDS, NORMS
from fftgauge.harness.shapes.case import SHAPE_KINDS
from fftgauge.harness.cli import EXIT_USAGE, add_common_options, default_results_path, parse_choice_list
from fftgauge.harness.cluster.target import add_cluster_option, cluster_from_args
from fftgauge.harness.errors import UsageError
from fftgauge.harness.results import ResultsWriteError, check_output_path, is_stdout
from fftgauge.harness.shutdown import stop_on_signals, stop_reason
from fftgauge.harness.timing.runner import (DEFAULT_BUDGET_SECONDS, DEFAULT_CASE_TIMEOUT_SECONDS, DEFAULT_ROUNDS, DEFAULT_SAMPLES,
                            TimingRequest, run_timing)
from fftgauge.harness.sizes import parse_sizes

DEFAULT_SIZES = "2^4..2^16"
#: Size limit applied to the pure-Python references when --sizes is not given.
DEFAULT_PURE_PYTHON_MAX_N = 1024


def add_arguments(parser: argparse.ArgumentParser) -> None:
    """Add this sub-command's options to ``parser``."""
    add_common_options(parser, "backend", "kinds", "dtypes", "sizes", "seed", "json", "csv", "quiet", "threads",
                       "pin")
    parser.add_argument("--norms", metavar="LIST", help="comma list of backward, ortho, forward (default backward)")
    parser.add_argument("--samples", type=int, default=DEFAULT_SAMPLES, metavar="N",
                        help=f"samples per case (default {DEFAULT_SAMPLES}; fewer when the per-case budget runs out)")
    parser.add_argument("--budget", type=float, default=DEFAULT_BUDGET_SECONDS, metavar="SECONDS",
                        help=f"seconds of sampling per case after which it stops once 5 samples are in "
                             f"(default {DEFAULT_BUDGET_SECONDS:g})")
    parser.add_argument("--rounds", type=int, default=DEFAULT_ROUNDS, metavar="R",
                        help=f"split each case's samples into R rounds spread over the run, other cases timed in "
                             f"between, so a slow stretch of the machine cannot hit one case alone "
                             f"(default {DEFAULT_ROUNDS}; 1: each case in one go)")
    parser.add_argument("--cold-cache", action="store_true",
                        help="evict the caches before every sample (one call per sample): first-call cost")
    parser.add_argument("--no-memory", action="store_true", help="do not measure peak extra memory")
    add_cluster_option(parser, "the timing on every host that offers a timing slot (one table, a host column)")
    parser.add_argument("--metric", choices=("time", "instructions"), default="time",
                        help="instructions: after the timing, also count every case's instructions per transform "
                             "under valgrind's cachegrind and show them against the N log2 N model (needs valgrind; "
                             "about 10-30 s per case)")
    parser.add_argument("--timeout", type=float, default=DEFAULT_CASE_TIMEOUT_SECONDS, metavar="SECONDS",
                        help=f"seconds one case may take before the backend is killed "
                             f"(default {DEFAULT_CASE_TIMEOUT_SECONDS:g})")
    parser.add_argument("--pure-python-max-n", type=int, default=None, metavar="N",
                        help=f"largest size given to the pure-Python references (default {DEFAULT_PURE_PYTHON_MAX_N} "
                             f"when --sizes is not given, else no limit; 0: no limit)")
    parser.add_argument("--plot", metavar="PATH",
                        help="also draw the time per point (median time of one transform / N) against N, one "
                             "panel per kind and precision (PNG or SVG by the extension); with --shapes: the "
                             "time per call against the array's points, one line per layout or axis")
    from fftgauge.harness.shapes.options import LAYOUTS_HELP, SHAPES_HELP
    parser.add_argument("--shapes", metavar="SHAPES", help=SHAPES_HELP)
    parser.add_argument("--layouts", metavar="LIST", help=LAYOUTS_HELP)


def request_from_args(args: argparse.Namespace) -> TimingRequest:
    """Return the validated :class:`TimingRequest` the options describe.

    Raises
    ------
    UsageError
        For any malformed option value (the message names it).
    """
    from fftgauge.backends.registry import default_specs
    from fftgauge.harness.timing.affinity import choose_cpus, parse_pin

    for name in ("samples", "budget", "timeout", "rounds"):
        if getattr(args, name) <= 0:
            raise UsageError(f"--{name} must be positive, got {getattr(args, name):g}")
    if args.samples < 5:
        raise UsageError(f"--samples must be at least 5 for a meaningful interval, got {args.samples}")
    if args.threads is not None and args.threads < 1:
        raise UsageError(f"--threads must be a positive integer, got {args.threads}")
    limit = args.pure_python_max_n
    if limit is None:
        limit = DEFAULT_PURE_PYTHON_MAX_N if args.sizes is None else 0
    shaped = shaped_request_cases(args)
    return TimingRequest(
        specs=tuple(args.backend) if args.backend else tuple(default_specs()),
        kinds=parse_choice_list(args.kinds, SHAPE_KINDS if shaped else KINDS, "kind"),
        dtypes=parse_choice_list(args.dtypes, DTYPES, "dtype") or ("float64",),
        sizes=() if shaped else tuple(parse_sizes(args.sizes or DEFAULT_SIZES)),
        norms=parse_choice_list(args.norms, NORMS, "norm") or ("backward",),
        seed=args.seed, threads=args.threads or 1, samples=args.samples, budget_seconds=args.budget,
        cold_cache=args.cold_cache, measure_memory=not args.no_memory, timeout_seconds=args.timeout,
        max_n_pure_python=limit or None, rounds=args.rounds,
        cpus=choose_cpus(parse_pin(args.pin_cpu), args.threads or 1), shape_cases=tuple(shaped),
    )


def shaped_request_cases(args: argparse.Namespace) -> list:
    """Return the shaped cases ``--shapes`` names (empty without it).

    Raises
    ------
    UsageError
        For a malformed ``--shapes``/``--layouts``/``--kinds``, ``--layouts`` without
        ``--shapes``, or ``--shapes`` with ``--sizes``.
    """
    from fftgauge.harness.shapes.options import shaped_cases_from_options

    if getattr(args, "shapes", None) is None:
        if getattr(args, "layouts", None):
            raise UsageError("--layouts goes with --shapes (a 1-D size has one layout)")
        return []
    return shaped_cases_from_options(args.shapes, args.kinds, args.dtypes, args.layouts,
                                     parse_choice_list(args.norms, NORMS, "norm") or ("backward",), args.sizes)


def summary_text(doc: dict) -> str:
    """Return the terminal report of a timing document: the comparison tables, the
    planning times of backends that plan, the scaling analysis and any error rows."""
    from fftgauge.harness.timing.scaling import scaling_report
    from fftgauge.harness.report.time_tables import comparison_table, format_comparison, format_seconds

    rows = doc["rows"]
    if any(r.get("shape") for r in rows):
        from fftgauge.harness.report.shape_tables import shaped_summary

        return shaped_summary(rows)
    parts = [format_comparison(comparison_table(rows))]
    planned = [r for r in rows if r.get("status") == "ok" and (r.get("plan_seconds") or 0) > 1e-4]
    if planned:
        worst = max(planned, key=lambda r: r["plan_seconds"])
        parts.append(f"planning: {len(planned)} case(s) took over 0.1 ms to plan; the longest, "
                     f"{worst['backend']} {worst['kind']} n={worst['n']}, took {format_seconds(worst['plan_seconds'])}")
    parts.append(scaling_report(rows, doc.get("machine")))
    if doc.get("counting"):
        from fftgauge.harness.counts.table import counts_table
        parts.append(counts_table(rows))
    errors = [r for r in rows if r.get("status") == "error"]
    if errors:
        parts.append("errors:\n" + "\n".join(f"  {r['backend']} {r['kind']} {r['dtype']} n={r['n']}: {r['message']}"
                                             for r in errors[:10]))
    return "\n\n".join(parts)


def write_csv(doc: dict, path: str) -> None:
    """Write the rows of a timing document as CSV (one line per backend x case).

    Raises
    ------
    UsageError
        When the path cannot be written.
    """
    import pandas as pd

    from fftgauge.harness.results import write_text_atomic

    write_text_atomic(path, pd.DataFrame(doc["rows"]).to_csv(index=False))


def run(args: argparse.Namespace) -> int:
    """Time the cases; print the tables; return 0, or 1 when a backend errored on a case.

    ``--json -`` writes the JSON to standard output once the run ends, and the tables to
    standard error, so that standard output holds the JSON alone. SIGINT, SIGTERM or SIGHUP
    stop the run: what finished is written (``complete`` false), the summary printed, and
    the exit code is 128 + the signal's number (130, 143, 129).
    """
    req = request_from_args(args)
    counting = getattr(args, "metric", "time") == "instructions"
    cluster = cluster_from_args(args)
    if cluster is not None and counting:
        raise UsageError("--metric instructions counts on this machine only; leave out --cluster")
    if counting:
        from fftgauge.harness.counts.cachegrind import require_valgrind
        require_valgrind()
    if args.plot:
        from fftgauge.harness.report.plots import check_plot_path, require_matplotlib
        check_plot_path(args.plot)
        require_matplotlib()
    to_stdout = is_stdout(args.json)
    path = args.json or default_results_path("time")
    check_output_path(path)
    check_output_path(args.csv, "--csv")
    out = sys.stderr if to_stdout else sys.stdout
    preload_summary_modules()
    started = time.perf_counter()
    doc: dict = {}
    try:
        with stop_on_signals():
            if cluster is not None:
                from fftgauge.harness.cluster.timing import run_timing_on_cluster
                run_timing_on_cluster(req, cluster, pin=args.pin_cpu, json_path=path, quiet=args.quiet, doc=doc)
            else:
                run_timing(req, json_path=None if to_stdout and counting else path, quiet=args.quiet, doc=doc)
            if counting:
                _count(doc, req, path, args.quiet)
    except KeyboardInterrupt as exc:  # StopRequested (SIGTERM, SIGHUP, SIGINT) is one
        return _stopped(doc, args, path, out, exc)
    except ResultsWriteError as exc:
        if doc.get("rows"):
            print(summary_text(doc), file=out)
        print(f"fftgauge: error: {exc}", file=sys.stderr)
        return EXIT_USAGE
    elapsed = time.perf_counter() - started
    if cluster is not None:
        from fftgauge.harness.cluster.timing import per_host_summary
        print(per_host_summary(doc, summary_text), file=out)
    else:
        print(summary_text(doc), file=out)
    written = _write_outputs(doc, args, path)
    if args.plot and any(r.get("shape") for r in doc["rows"]):
        from fftgauge.harness.report.shape_plots import plot_shaped_time
        written.append(plot_shaped_time(doc["rows"], args.plot))
    elif args.plot:
        from fftgauge.harness.report.plots import plot_time
        from fftgauge.harness.cluster.timing import rows_for_plot
        written.append(plot_time(rows_for_plot(doc["rows"]), args.plot))
    print(f"\nthreads {req.threads}; seed {req.seed}; {len(doc['rows'])} rows in {elapsed:.1f} s; "
          f"written to {', '.join(written)}", file=out)
    return 1 if any(r.get("status") == "error" for r in doc["rows"]) else 0


def preload_summary_modules() -> threading.Thread:
    """Start importing, in a background thread, what :func:`summary_text` needs (pandas and
    scipy.stats: about a second on a loaded 2-core machine), so that a run stopped by a
    signal prints its summary without waiting for them; return the thread."""
    def load() -> None:
        import fftgauge.harness.report.time_tables  # noqa: F401  (pandas)
        import fftgauge.harness.timing.scaling  # noqa: F401  (scipy.stats)

    thread = threading.Thread(target=load, name="fftgauge-preload", daemon=True)
    thread.start()
    return thread


def _count(doc: dict, req: TimingRequest, path: str, quiet: bool) -> None:
    """Add the instruction counts to the timed rows (:func:`fftgauge.harness.counts.table.add_counts`)
    and write the JSON again with them."""
    from fftgauge.harness.counts.table import add_counts
    from fftgauge.harness.results import dumps, write_output

    def said(label: str) -> None:
        if not quiet:
            print(f"counted {label}", file=sys.stderr)

    add_counts(doc, threads=req.threads, timeout=max(req.timeout_seconds, DEFAULT_CASE_TIMEOUT_SECONDS),
               seed=req.seed, on_case=said)
    write_output(path, dumps(doc))


def _write_outputs(doc: dict, args: argparse.Namespace, path: str) -> list[str]:
    """Write the CSV when asked (the JSON was written by the run); return what was written."""
    if args.csv:
        write_csv(doc, args.csv)
    return ["standard output" if is_stdout(path) else path] + ([args.csv] if args.csv else [])


def _stopped(doc: dict, args: argparse.Namespace, path: str, out, exc: BaseException) -> int:
    """Print the summary of a run stopped by a signal, write what finished; return 128 + signal."""
    name, code = stop_reason(exc)
    if not doc.get("schema"):
        print(f"fftgauge: stopped by {name} before the first case; nothing written", file=sys.stderr)
        return code
    if doc["rows"]:
        print(summary_text(doc), file=out)
    written = _write_outputs(doc, args, path)
    print(f"\nfftgauge: stopped by {name}: {len(doc['rows'])} rows finished, written to {', '.join(written)} "
          f"(marked complete: false)", file=sys.stderr)
    return code
