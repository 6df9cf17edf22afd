"""``fftgauge gate``: the regression gate for CI.

Three ways to run it (see docs/ci-gate.md for CI jobs that use them):

- ``fftgauge gate --old SPEC --new SPEC [--sizes ...]``: A/B in one run, samples of both
  interleaved in a random order; the mode to use for pull requests.
- ``fftgauge gate --baseline FILE|DIR [--backend SPEC]...``: re-measure the cases stored in a
  ``fftgauge time`` (or ``fftgauge gate``) results file, or the per-case median of the last
  ``--last K`` runs stored in a folder, and compare, corrected by the yardstick.
- ``fftgauge gate --backend SPEC --save DIR``: measure and store only (seeds a history).

Exit codes: 0 no regression; 1 a regression, an accuracy regression or a backend failure the
gate must report; 2 a bad request (one line on stderr). The Markdown, JUnit XML, JSON and CSV
outputs are written in a ``finally``, so a run that stops half-way still leaves them.

This module is the boundary: it validates the options and loads and checks the baseline
files (schema, rows, machine fingerprint); :mod:`fftgauge.harness.gate.run` trusts what it is given.
"""

from __future__ import annotations

import argparse
import datetime as dt
import os
import sys
from collections import Counter
from typing import Any

from fftgauge.harness.cases import DTYPES, KINDS, NORMS
from fftgauge.harness.cli import add_common_options, default_results_path, parse_choice_list
from fftgauge.harness.errors import UsageError
from fftgauge.harness.gate.run import (DEFAULT_LAST_RUNS, GATE_SCHEMA, MACHINE_KEYS, GateRequest, GateSettings, StoredRun,
                          new_doc, run_gate)

TIME_SCHEMA = "fftgauge-time/1"
#: Sizes of the A/B and record modes when --sizes is not given: a handful, about 10-20 s.
DEFAULT_SIZES = "256,1000,1024,4096,65536"
DEFAULT_THRESHOLD = "5%"
DEFAULT_BUDGET_SECONDS = 30.0
DEFAULT_TIMEOUT_SECONDS = 120.0


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
    decide = parser.add_argument_group("how to decide")
    decide.add_argument("--threshold", default=DEFAULT_THRESHOLD, metavar="PERCENT",
                        help="smallest slowdown that fails the gate, as 5%% or 0.05 (default " + DEFAULT_THRESHOLD.replace("%", "%%") + ")")
    decide.add_argument("--alpha", type=float, default=0.05, metavar="P",
                        help="family-wise significance level across the cases, Holm-corrected (default 0.05)")
    decide.add_argument("--budget", type=float, default=DEFAULT_BUDGET_SECONDS, metavar="SECONDS",
                        help=f"sampling time after the first round, for all cases together, spent on the "
                             f"inconclusive ones (default {DEFAULT_BUDGET_SECONDS:g})")
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


# -- option parsing ----------------------------------------------------------------------------
def parse_threshold(text: str) -> float:
    """Return the threshold ``5%`` or ``0.05`` as a fraction.

    Raises
    ------
    UsageError
        For anything that is not a percentage or a fraction in (0, 1).
    """
    raw = str(text).strip()
    try:
        value = float(raw[:-1]) / 100.0 if raw.endswith("%") else float(raw)
    except ValueError:
        raise UsageError(f"--threshold {text!r}: write a percentage such as 5% or a fraction such as 0.05") from None
    if not raw.endswith("%") and value >= 1.0:
        raise UsageError(f"--threshold {text!r} reads as a fraction of {value:g}; write {value:g}% for a percentage")
    if not 0.0 < value < 1.0:
        raise UsageError(f"--threshold {text!r} must be between 0% and 100% (exclusive)")
    return value


def _check_numbers(args: argparse.Namespace) -> None:
    if not args.budget > 0:
        raise UsageError(f"--budget must be positive, got {args.budget:g}")
    if not args.timeout > 0:
        raise UsageError(f"--timeout must be positive, got {args.timeout:g}")
    if not 0.0 < args.alpha < 1.0:
        raise UsageError(f"--alpha must be between 0 and 1, got {args.alpha:g}")
    if args.last < 1:
        raise UsageError(f"--last must be at least 1, got {args.last}")
    if not args.accuracy_growth >= 1.0:
        raise UsageError(f"--accuracy-growth must be at least 1, got {args.accuracy_growth:g}")
    if args.threads is not None and args.threads < 1:
        raise UsageError(f"--threads must be a positive integer, got {args.threads}")
    if args.save and os.path.exists(args.save) and not os.path.isdir(args.save):
        raise UsageError(f"--save {args.save!r} is a file; give a folder to append runs to")


def _mode(args: argparse.Namespace) -> str:
    from fftgauge.backends.registry import parse_spec

    if bool(args.old) != bool(args.new):
        raise UsageError("A/B mode needs both --old SPEC and --new SPEC")
    if args.old:
        if args.backend:
            raise UsageError("--backend is for --baseline mode; in A/B mode name the two sides with --old and --new")
        if args.baseline_backend and not args.baseline:
            raise UsageError("--baseline-backend goes with --baseline")
        parse_spec(args.old)
        parse_spec(args.new)
        return "referenced" if args.baseline else "ab"
    for spec in args.backend or ():
        parse_spec(spec)
    if args.baseline_backend and not args.baseline:
        raise UsageError("--baseline-backend goes with --baseline")
    if args.baseline:
        if args.baseline_backend and len(args.backend or ()) != 1:
            raise UsageError("--baseline-backend needs exactly one --backend SPEC (the candidate)")
        return "stored"
    if args.backend and args.save:
        return "record"
    raise UsageError("nothing to compare: give --old SPEC --new SPEC, or --baseline FILE|DIR "
                     "(or --backend SPEC --save DIR to record a first baseline)")


def request_from_args(args: argparse.Namespace) -> GateRequest:
    """Return the validated :class:`GateRequest` the options describe, stored runs loaded.

    Raises
    ------
    UsageError
        For a malformed option, an impossible combination, or a missing, corrupt, foreign or
        other-machine baseline (the message names it).
    """
    from fftgauge.harness.sizes import parse_sizes

    _check_numbers(args)
    mode = _mode(args)
    threshold = parse_threshold(args.threshold)
    kinds = parse_choice_list(args.kinds, KINDS, "kind")
    dtypes = parse_choice_list(args.dtypes, DTYPES, "dtype")
    sizes = tuple(parse_sizes(args.sizes)) if args.sizes else None
    runs: tuple[StoredRun, ...] = ()
    warnings: list[str] = []
    notes: list[str] = []
    specs: tuple[str, ...] = tuple(args.backend or ())
    threads = args.threads
    if mode == "stored":
        runs, warnings, notes = load_stored_runs(args.baseline, args.last, args.allow_other_machine)
        if not specs:
            specs = default_specs_of(runs)
        if threads is None:
            threads = stored_threads(runs)
    elif mode == "referenced":
        runs, warnings, notes = load_stored_runs(args.baseline, args.last, args.allow_other_machine)
        if not any(r.get("ab_ratio") or (r.get("ratio") and r.get("baseline_runs") is None)
                   for run in runs for r in run.rows):
            raise UsageError(f"the baseline {args.baseline!r} holds no A/B ratios; with --old/--new, --baseline "
                             f"takes a folder of saved A/B gate runs (seed it with fftgauge gate --old REF "
                             f"--new SPEC --save DIR)")
        sizes = sizes or tuple(parse_sizes(DEFAULT_SIZES))
        dtypes = dtypes or ("float64",)
    else:
        sizes = sizes or tuple(parse_sizes(DEFAULT_SIZES))
        dtypes = dtypes or ("float64",)
    from fftgauge.harness.timing.affinity import choose_cpus, parse_pin

    cpus = choose_cpus(parse_pin(args.pin_cpu), threads or 1)
    settings = GateSettings(threshold=threshold, alpha=args.alpha, budget_seconds=args.budget, seed=args.seed)
    return GateRequest(mode=mode, old_spec=args.old, new_spec=args.new, specs=specs, kinds=kinds, dtypes=dtypes,
                       sizes=sizes, seed=args.seed, threads=threads or 1, settings=settings,
                       accuracy=args.accuracy, accuracy_growth=args.accuracy_growth, timeout_seconds=args.timeout,
                       stored_runs=runs, baseline_path=args.baseline, baseline_label=args.baseline_backend,
                       warnings=tuple(warnings), notes=tuple(notes),
                       commit=args.commit, cpus=cpus)


# -- stored runs -------------------------------------------------------------------------------
def machine_differences(stored: Any, current: dict[str, Any]) -> list[str]:
    """Return ``"key: stored -> current"`` for each :data:`fftgauge.harness.gate.run.MACHINE_KEYS` field that differs."""
    stored = stored if isinstance(stored, dict) else {}
    return [f"{key}: {stored.get(key)!r} -> {current.get(key)!r}" for key in MACHINE_KEYS
            if stored.get(key) != current.get(key)]


def _number(value: Any) -> bool:
    return isinstance(value, (int, float)) and not isinstance(value, bool)


def _usable_rows(path: str, doc: dict[str, Any]) -> list[dict[str, Any]]:
    """Return the rows of a stored doc that hold a time, after checking their fields.

    Raises
    ------
    UsageError
        For a row that is not an object or holds an impossible case or time.
    """
    rows = []
    for i, row in enumerate(doc["rows"]):
        if not isinstance(row, dict):
            raise UsageError(f"baseline {path!r}: row {i} is not an object; the file is corrupt")
        if row.get("status", "ok") != "ok" or row.get("seconds") is None:
            continue
        missing = [k for k in ("backend", "kind", "dtype", "n") if k not in row]
        if missing:
            raise UsageError(f"baseline {path!r}: row {i} lacks {', '.join(missing)}; the file is corrupt or was edited")
        n = row["n"]
        if (not isinstance(row["backend"], str) or row["kind"] not in KINDS or row["dtype"] not in DTYPES
                or (row.get("norm") or "backward") not in NORMS or not isinstance(n, int) or isinstance(n, bool)
                or n < 1):
            raise UsageError(f"baseline {path!r}: row {i} holds an impossible case ({row.get('backend')!r}, "
                             f"{row.get('kind')!r}, {row.get('dtype')!r}, n={n!r}); the file is corrupt")
        if not _number(row["seconds"]) or any(row.get(k) is not None and not _number(row.get(k))
                                              for k in ("seconds_low", "seconds_high", "seconds_p10",
                                                        "seconds_p10_low", "seconds_p10_high")):
            raise UsageError(f"baseline {path!r}: row {i} has a non-numeric time; the file is corrupt")
        if row["seconds"] > 0:
            rows.append(row)
    return rows


def _stored_run(path: str) -> StoredRun:
    """Load and check one stored results file.

    Raises
    ------
    UsageError
        When it is missing, unreadable, not JSON, of another schema, or has corrupt rows.
    """
    from fftgauge.harness.results import load_results

    doc = load_results(path, (TIME_SCHEMA, GATE_SCHEMA))
    rows = _usable_rows(path, doc)
    backends = {}
    for label, info in (doc.get("backends") or {}).items():
        if isinstance(info, dict) and isinstance(info.get("spec"), str):
            backends[label] = info["spec"]
    yardstick = doc.get("yardstick") if isinstance(doc.get("yardstick"), dict) else None
    return StoredRun(path=path, created=str(doc.get("created") or ""), schema=doc["schema"],
                     machine=doc.get("machine") if isinstance(doc.get("machine"), dict) else {},
                     yardstick=yardstick, rows=tuple(rows), backends=backends)


def load_stored_runs(path: str, last_k: int, allow_other_machine: bool) -> tuple[tuple[StoredRun, ...], list[str], list[str]]:
    """Return the stored runs a baseline is formed from, with warnings and notes for the report.

    A file is one run. A folder's runs are its ``*.json`` files (``fftgauge time`` or
    ``fftgauge gate`` results); those measured on this machine (:data:`MACHINE_KEYS` of the
    fingerprint) are kept, the last ``last_k`` by creation time are used, oldest first.

    Raises
    ------
    UsageError
        For a missing path, a corrupt or foreign file, no timed rows, or a baseline of
        another machine without ``allow_other_machine``.
    """
    from fftgauge.harness.results import machine_fingerprint

    here = machine_fingerprint()
    warnings: list[str] = []
    notes: list[str] = []
    if os.path.isdir(path):
        names = sorted(f for f in os.listdir(path) if f.endswith(".json"))
        if not names:
            raise UsageError(f"baseline folder {path!r} holds no stored runs (*.json); seed it with "
                             f"fftgauge gate --backend SPEC --save {path}")
        runs = [_stored_run(os.path.join(path, name)) for name in names]
        timed = [r for r in runs if r.rows]
        if not timed:
            raise UsageError(f"baseline folder {path!r} holds no timed rows; seed it with "
                             f"fftgauge gate --backend SPEC --save {path}")
        timed.sort(key=lambda r: (r.created, r.path))
        same = [r for r in timed if not machine_differences(r.machine, here)]
        if not same:
            diff = "; ".join(machine_differences(timed[-1].machine, here))
            if not allow_other_machine:
                raise UsageError(f"none of the {len(timed)} stored runs in {path!r} was measured on this machine "
                                 f"({diff}); record a baseline here, or pass --allow-other-machine")
            warnings.append(f"the baseline was measured on ANOTHER MACHINE ({diff}): timing differences may be "
                            f"the machine's, not the code's")
            same = timed
        elif len(same) < len(timed):
            notes.append(f"{len(timed) - len(same)} stored run(s) of other machines in {path!r} ignored")
        used = same[-last_k:]
        if len(used) < 3:
            notes.append(f"the baseline has {len(used)} stored run(s): with fewer than 3 the run-to-run variation "
                         f"cannot be estimated and only the yardstick guards against it")
        return tuple(used), warnings, notes
    if not os.path.exists(path):
        raise UsageError(f"baseline {path!r} does not exist; give a fftgauge time results file or a folder of "
                         f"stored runs")
    run = _stored_run(path)
    if not run.rows:
        raise UsageError(f"baseline {path!r} holds no timed rows (every row is an error or a skip)")
    diff = machine_differences(run.machine, here)
    if diff:
        if not allow_other_machine:
            raise UsageError(f"baseline {path!r} was measured on another machine ({'; '.join(diff)}); "
                             f"measure a baseline here, or pass --allow-other-machine")
        warnings.append(f"the baseline was measured on ANOTHER MACHINE ({'; '.join(diff)}): timing differences "
                        f"may be the machine's, not the code's")
    notes.append("a single baseline file cannot show run-to-run variation; a folder of stored runs "
                 "(--save DIR, --baseline DIR) makes the comparison sturdier")
    return (run,), warnings, notes


def default_specs_of(runs: tuple[StoredRun, ...]) -> tuple[str, ...]:
    """Return the SPECs of the backends the stored runs name (their label when no SPEC was stored)."""
    labels = sorted({r["backend"] for run in runs for r in run.rows})
    specs = {}
    for label in labels:
        for run in reversed(runs):
            if label in run.backends:
                specs[label] = run.backends[label]
                break
        specs.setdefault(label, label)
    return tuple(dict.fromkeys(specs[label] for label in labels))


def stored_threads(runs: tuple[StoredRun, ...]) -> int:
    """Return the thread count most stored rows were measured with (1 when none says)."""
    threads = Counter(r.get("threads") for run in runs for r in run.rows if isinstance(r.get("threads"), int))
    return threads.most_common(1)[0][0] if threads else 1


# -- saving ------------------------------------------------------------------------------------
def save_run(doc: dict[str, Any], folder: str) -> str:
    """Write ``doc`` into ``folder`` as ``gate-<UTC time with microseconds>.json``; return the path.

    Raises
    ------
    UsageError
        When the folder cannot be written.
    """
    from fftgauge.harness.results import dumps, write_text_atomic

    stamp = dt.datetime.now(dt.timezone.utc).strftime("%Y%m%d-%H%M%S-%f")
    path = os.path.join(folder, f"gate-{stamp}.json")
    write_text_atomic(path, dumps(doc))
    return path


# -- the command -------------------------------------------------------------------------------
def run(args: argparse.Namespace) -> int:
    """Run the gate; print the summary; return 0 (pass), 1 (regression or failure) or raise UsageError."""
    from fftgauge.harness.gate.outputs import summary_text, write_outputs

    req = request_from_args(args)
    for warning in req.warnings:
        print(f"fftgauge: WARNING: {warning}", file=sys.stderr)
    json_path = args.json or default_results_path("gate")
    doc = new_doc(req)
    written: list[str] = []
    try:
        run_gate(req, doc, quiet=args.quiet)
    except UsageError as exc:
        doc["error"] = str(exc)
        raise
    finally:
        written = write_outputs(doc, markdown=args.markdown, junit=args.junit, json_path=json_path, csv=args.csv)
        if args.save:
            if doc.get("complete"):
                written.append(save_run(doc, args.save))
            else:
                print(f"fftgauge: the run did not complete; not saved to {args.save}", file=sys.stderr)
    print(summary_text(doc))
    print(f"\nwritten to {', '.join(written)}")
    return 1 if doc["regressed"] else 0
