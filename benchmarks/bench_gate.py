"""Performance of the gate itself: false-alarm and detection rates on a slowed numpy.fft.

The test backend :mod:`fftgauge.backends.slowed` wraps numpy.fft and adds x% of each call's measured
duration as a busy-wait. For each configuration the script runs N consecutive gate runs
(default 20) and counts the runs whose gate fails:

- ``A/B x%``: ``--old slowed[percent=0] --new slowed[percent=x]`` (the same wrapper on both
  sides, so only the injected cost differs), x in ``--percents`` (default 0, 5, 10);
- ``stored x%``: a folder of stored runs is first seeded with ``--last`` record-only runs of
  ``slowed[percent=0]``, then each gate run compares ``slowed[percent=x]`` against the
  per-case median of the last K stored runs and, at 0%, appends itself (``--save``), as a
  CI job on the main branch would; x in ``--stored-percents`` (default 0);
- ``referenced x%``: a folder is first seeded with ``--last`` saved A/B runs of
  ``--old numpy --new slowed[percent=0]``; each gate run then measures
  ``--old numpy --new slowed[percent=x]`` in pairs and compares this run's ratio with the
  stored ratios (``--baseline-backend slowed``), appending itself at 0%, as a main-branch
  job with a fixed reference implementation would; x in ``--referenced-percents`` (0, 10);
- with ``--competing``, the 0% configurations again with a busy process (a pure-Python
  spin) on the machine for the whole configuration.

Targets (issue 5): 0% -> no false alarm in 20 runs (both modes); 10% -> detected in at
least 19 of 20; 5% -> at least 16 of 20 in A/B mode. The script prints a table of rates,
which targets held, and writes everything (every run's ratios, the load average, the
machine) to ``results/bench-gate-<UTC time>.json``.

Run: ``.venv/bin/python benchmarks/bench_gate.py`` (the full version takes about an hour on
a 2-core machine), or shorter: ``--runs 3 --sizes 1024,16384``. ``--signals TRIES`` measures
instead the seconds from SIGINT, SIGTERM and SIGHUP to the exit of ``fftgauge gate`` on a slow
backend (goal: under 2 s), the outputs written. ``--smallest`` finds instead the smallest of
``--percents`` that the A/B mode detects in 19 of 20 runs (for example ``--smallest --percents
5,6,7,8 --budget 30``), printing the seconds each run took.
"""

from __future__ import annotations

import argparse
import datetime as dt
import os
import subprocess
import sys
import tempfile
import time
from typing import Any

sys.path.insert(0, os.path.dirname(os.path.dirname(os.path.abspath(__file__))))

DEFAULT_SIZES = "256,1024,4096,16384,65536"
TARGETS = {("ab", 0.0): ("false alarms", 0), ("stored", 0.0): ("false alarms", 0),
           ("referenced", 0.0): ("false alarms", 0),
           ("ab", 10.0): ("detections", 19), ("ab", 5.0): ("detections", 16)}
MODE_LABELS = {"ab": "A/B", "stored": "stored", "referenced": "referenced"}


def gate_request(mode: str, percent: float, args: argparse.Namespace, folder: str | None, seed: int):
    """Return the GateRequest of one gate run of a configuration."""
    from fftgauge.harness.timing.affinity import choose_cpus, parse_pin
    from fftgauge.harness.gate.history import load_stored_runs
    from fftgauge.harness.gate.request import GateRequest, GateSettings
    from fftgauge.harness.sizes import parse_sizes

    settings = GateSettings(budget_seconds=args.budget if mode != "record" else min(args.budget, 10.0), seed=seed,
                            analysis=args.analysis, processes=args.processes)
    cpus = choose_cpus(parse_pin(args.pin_cpu), 1)
    sizes = tuple(parse_sizes(args.sizes))
    candidate = f"slowed[percent={percent:g}]"
    if mode == "ab":
        return GateRequest(mode="ab", old_spec="slowed[percent=0]", new_spec=candidate, kinds=(args.kind,),
                           dtypes=("float64",), sizes=sizes, seed=seed, settings=settings, cpus=cpus)
    if mode == "record":
        return GateRequest(mode="record", specs=("slowed[percent=0]",), kinds=(args.kind,), dtypes=("float64",),
                           sizes=sizes, seed=seed, settings=settings, cpus=cpus)
    if mode == "record-ab":
        return GateRequest(mode="ab", old_spec="numpy", new_spec="slowed[percent=0]", kinds=(args.kind,),
                           dtypes=("float64",), sizes=sizes, seed=seed, settings=settings, cpus=cpus)
    runs, warnings, notes = load_stored_runs(folder, args.last, False)
    if mode == "referenced":
        return GateRequest(mode="referenced", old_spec="numpy", new_spec=candidate, kinds=(args.kind,),
                           dtypes=("float64",), sizes=sizes, seed=seed, settings=settings, stored_runs=runs,
                           baseline_path=folder, baseline_label="slowed", warnings=tuple(warnings),
                           notes=tuple(notes), cpus=cpus)
    return GateRequest(mode="stored", specs=(candidate,), kinds=(args.kind,), dtypes=("float64",), sizes=sizes,
                       seed=seed, settings=settings, stored_runs=runs, baseline_path=folder, baseline_label="slowed",
                       warnings=tuple(warnings), notes=tuple(notes), cpus=cpus)


def one_run(req: Any, save_to: str | None) -> dict[str, Any]:
    """Run one gate; return what the benchmark keeps of it."""
    from fftgauge.harness.gate.history import save_run
    from fftgauge.harness.gate.run import run_gate

    started = time.monotonic()
    doc = run_gate(req)
    if save_to and doc.get("complete"):
        save_run(doc, save_to)
    return {"outcome": doc["outcome"], "regressed": doc["regressed"],
            "slower": sum(r.get("verdict") == "slower" for r in doc["rows"]),
            "errors": sum(r.get("status") == "error" for r in doc["rows"]),
            "wall_seconds": time.monotonic() - started, "sampling_seconds": doc.get("sampling_seconds"),
            "yardstick_ratio": (doc.get("yardstick") or {}).get("ratio"),
            "cases": [{"n": r["n"], "ratio": r.get("ratio"), "ratio_low": r.get("ratio_low"),
                       "ratio_high": r.get("ratio_high"), "p_holm": r.get("p_holm"), "verdict": r.get("verdict"),
                       "samples": r.get("samples"), "conclusive": r.get("conclusive")} for r in doc["rows"]]}


def start_competitor() -> subprocess.Popen:
    """Start a busy pure-Python process (the competing load); return it."""
    return subprocess.Popen([sys.executable, "-c", "while True: pass"])


def stop_competitor(proc: subprocess.Popen) -> None:
    """Stop the competing process started by :func:`start_competitor`."""
    proc.terminate()
    try:
        proc.wait(5)
    except subprocess.TimeoutExpired:
        proc.kill()
        proc.wait()


def run_configuration(mode: str, percent: float, args: argparse.Namespace, competing: bool) -> dict[str, Any]:
    """Run ``args.runs`` gate runs of one configuration; return its record."""
    label = f"{MODE_LABELS[mode]} {percent:g}%" + (" + busy process" if competing else "")
    folder = None
    runs = []
    proc = start_competitor() if competing else None
    load_before = os.getloadavg()
    started = time.monotonic()
    try:
        if mode in ("stored", "referenced"):
            folder = tempfile.mkdtemp(prefix="fftgauge-bench-gate-")
            seeding = "record" if mode == "stored" else "record-ab"
            for k in range(args.last):
                one_run(gate_request(seeding, 0.0, args, None, args.seed + 1000 + k), folder)
        for i in range(args.runs):
            req = gate_request(mode, percent, args, folder, args.seed + i)
            # like a main-branch job, a run without injected cost joins the history; a slowed
            # candidate is a pull request's run and does not
            result = one_run(req, folder if mode in ("stored", "referenced") and percent == 0 else None)
            runs.append(result)
            if not args.quiet:
                ratios = " ".join(f"{c['ratio']:.3f}" if c["ratio"] is not None else "-" for c in result["cases"])
                print(f"  {label:<26} run {i + 1:>2}/{args.runs}: {result['outcome']:<10} ratios {ratios} "
                      f"({result['wall_seconds']:.0f} s)", flush=True)
    finally:
        if proc is not None:
            stop_competitor(proc)
    failing = sum(r["regressed"] for r in runs)
    return {"label": label, "mode": mode, "percent": percent, "competing": competing, "runs": runs,
            "failing_runs": failing, "detections": sum(r["slower"] > 0 for r in runs),
            "false_alarms": sum(r["slower"] > 0 for r in runs) if percent == 0 else None,
            "error_runs": sum(r["errors"] > 0 for r in runs), "seconds": time.monotonic() - started,
            "load_before": load_before, "load_after": os.getloadavg()}


def smallest_detected(args: argparse.Namespace) -> dict[str, Any]:
    """Return the A/B runs of ``--percents`` taken in ascending order, stopping at the first
    percent detected in at least ``ceil(0.95 * --runs)`` runs (19 of 20).

    A percent's runs stop early once so many have missed that the target cannot be reached
    (the rest could not change the answer); the percent that reaches it runs all ``--runs``.
    Each run's record keeps the seconds it took (``wall_seconds``, and ``sampling_seconds``:
    the part of the ``--budget`` spent sampling). ``smallest`` is None when no percent held.
    """
    import math

    need = math.ceil(0.95 * args.runs)
    tried = []
    smallest = None
    for percent in sorted(float(p) for p in args.percents.split(",") if p.strip()):
        label = f"A/B {percent:g}%"
        runs: list[dict[str, Any]] = []
        load_before = os.getloadavg()
        for i in range(args.runs):
            result = one_run(gate_request("ab", percent, args, None, args.seed + i), None)
            result["load"] = os.getloadavg()
            runs.append(result)
            hits = sum(r["slower"] > 0 for r in runs)
            misses = len(runs) - hits
            ratios = " ".join(f"{c['ratio']:.3f}" if c["ratio"] is not None else "-" for c in result["cases"])
            print(f"  {label:<10} run {i + 1:>2}/{args.runs}: {result['outcome']:<10} ratios {ratios} "
                  f"(wall {result['wall_seconds']:.1f} s, sampling {result['sampling_seconds'] or 0:.1f} s of "
                  f"--budget {args.budget:g}; load {result['load'][0]:.1f})", flush=True)
            if misses > args.runs - need:
                break
        hits = sum(r["slower"] > 0 for r in runs)
        held = hits >= need
        tried.append({"label": label, "percent": percent, "runs": runs, "detections": hits, "held": held,
                      "stopped_early": len(runs) < args.runs, "load_before": load_before,
                      "load_after": os.getloadavg()})
        print(f"{label}: detected in {hits} of {len(runs)} runs"
              + (" (stopped: the target can no longer be reached)" if len(runs) < args.runs else "")
              + f"; target {need} of {args.runs}: {'held' if held else 'missed'}", flush=True)
        if held:
            smallest = percent
            break
    return {"need": need, "tried": tried, "smallest": smallest}


def smallest_table(found: dict[str, Any], args: argparse.Namespace) -> str:
    """Return the lines summing up :func:`smallest_detected`: per percent, detections and the
    wall and sampling seconds of its runs (min / median / max)."""
    import numpy as np

    lines = []
    for t in found["tried"]:
        wall = [r["wall_seconds"] for r in t["runs"]]
        samp = [r["sampling_seconds"] or 0.0 for r in t["runs"]]
        lines.append(f"{t['label']}: {t['detections']} of {len(t['runs'])} detected; wall s {min(wall):.1f} / "
                     f"{np.median(wall):.1f} / {max(wall):.1f}, sampling s {min(samp):.1f} / {np.median(samp):.1f} / "
                     f"{max(samp):.1f} (min / median / max)")
    if found["smallest"] is None:
        lines.append(f"no percent of {args.percents} was detected in {found['need']} of {args.runs} runs")
    else:
        lines.append(f"smallest injected slowdown detected in >= {found['need']} of {args.runs} runs: "
                     f"{found['smallest']:g}% (--budget {args.budget:g})")
    return "\n".join(lines)


def _median_ratio(config: dict[str, Any]) -> float | None:
    import numpy as np

    values = [c["ratio"] for r in config["runs"] for c in r["cases"] if c["ratio"] is not None]
    return float(np.median(values)) if values else None


def report(configs: list[dict[str, Any]], runs: int) -> tuple[str, list[str]]:
    """Return the table of rates and the target lines."""
    lines = [f"{'configuration':<28} {'runs failing the gate':>22} {'median ratio':>13} {'max wall s':>11}"]
    for c in configs:
        med = _median_ratio(c)
        wall = max((r["wall_seconds"] for r in c["runs"]), default=0.0)
        lines.append(f"{c['label']:<28} {c['detections']:>10d} / {len(c['runs']):<9d} "
                     f"{med if med is not None else float('nan'):>13.4f} {wall:>11.1f}")
    targets = []
    for c in configs:
        key = (c["mode"], c["percent"])
        if key not in TARGETS or c["competing"]:
            continue
        what, need = TARGETS[key]
        n = len(c["runs"])
        if what == "false alarms":
            held = c["detections"] == 0
            targets.append(f"{c['label']}: {c['detections']} false alarm(s) in {n} runs (target 0 in 20): "
                           f"{'held' if held else 'MISSED'}")
        else:
            scaled = need * n / 20
            held = c["detections"] >= scaled
            targets.append(f"{c['label']}: detected in {c['detections']} of {n} runs (target {need} of 20"
                           + (f", i.e. {scaled:.1f} of {n}" if n != 20 else "") + f"): {'held' if held else 'MISSED'}")
    return "\n".join(lines), targets


def signal_exit_seconds(signal_name: str, tries: int) -> list[float]:
    """Return the seconds from ``signal_name`` to the exit of ``fftgauge gate`` on a slow
    backend (``busywait``, 10 ms a call), sent once its seven workers are up, ``tries`` times.

    Raises
    ------
    RuntimeError
        When the gate does not start its workers, or exits with another code than 128 + the signal.
    """
    import signal

    import psutil

    number = getattr(signal, signal_name)
    seconds = []
    with tempfile.TemporaryDirectory() as folder:
        for _ in range(tries):
            outs = [f"--{k}={os.path.join(folder, 'g.' + e)}" for k, e in (("json", "json"), ("markdown", "md"),
                                                                            ("junit", "xml"), ("csv", "csv"))]
            proc = subprocess.Popen([sys.executable, "-m", "fftgauge", "gate", "--old", "busywait[seconds=0.01]",
                                     "--new", "busywait[seconds=0.01]", "--sizes", "64,128,256,512", "--kinds", "fft",
                                     "--budget", "60", "--quiet", *outs],
                                    stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
            deadline = time.monotonic() + 120
            while len(psutil.Process(proc.pid).children()) < 7:
                if proc.poll() is not None or time.monotonic() > deadline:
                    raise RuntimeError("the gate did not start its workers")
                time.sleep(0.05)
            time.sleep(1.0)
            sent = time.monotonic()
            proc.send_signal(number)
            code = proc.wait(60)
            seconds.append(time.monotonic() - sent)
            if code != 128 + number:
                raise RuntimeError(f"{signal_name}: exit {code}, expected {128 + number}")
    return seconds


def signals_table(tries: int) -> str:
    """Return the table of seconds from each stop signal to the gate's exit (goal: under 2 s)."""
    lines = ["| signal | exit code | seconds to exit (min / median / max) |", "|---|---:|---|"]
    for name, code in (("SIGINT", 130), ("SIGTERM", 143), ("SIGHUP", 129)):
        s = sorted(signal_exit_seconds(name, tries))
        lines.append(f"| {name} | {code} | {s[0]:.2f} / {s[len(s) // 2]:.2f} / {s[-1]:.2f} |")
    return "\n".join(lines)


def main(argv: list[str] | None = None) -> int:
    """Run the benchmark; return 0."""
    from fftgauge.harness.results import dumps, machine_fingerprint, write_text_atomic

    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--runs", type=int, default=20, help="gate runs per configuration (default 20)")
    parser.add_argument("--sizes", default=DEFAULT_SIZES, help=f"sizes of every gate run (default {DEFAULT_SIZES})")
    parser.add_argument("--kind", default="fft", help="transform kind (default fft)")
    parser.add_argument("--budget", type=float, default=30.0, help="gate --budget in seconds (default 30)")
    parser.add_argument("--percents", default="0,5,10", help="A/B injected slowdowns in %% (default 0,5,10)")
    parser.add_argument("--stored-percents", default="0", help="stored-mode injected slowdowns in %% (default 0; "
                                                               "empty for none)")
    parser.add_argument("--referenced-percents", default="0,10", help="referenced-mode injected slowdowns in %% "
                                                                      "(default 0,10; empty for none)")
    parser.add_argument("--last", type=int, default=5, help="stored runs in the baseline (default 5)")
    parser.add_argument("--competing", action="store_true", help="also run the 0%% configurations with a busy process")
    parser.add_argument("--competing-modes", default="ab,stored,referenced",
                        help="with --competing: the modes to run so (default ab,stored,referenced)")
    parser.add_argument("--analysis", choices=("paired", "pooled"), default="paired",
                        help="A/B estimate (default paired; pooled: bootstrap ratio of medians and Mann-Whitney)")
    parser.add_argument("--processes", type=int, default=3, help="worker processes per side (default 3)")
    parser.add_argument("--pin-cpu", default="auto", help="as fftgauge gate --pin-cpu (default auto)")
    parser.add_argument("--seed", type=int, default=1234)
    parser.add_argument("--out", default=None, help="JSON output (default results/bench-gate-<UTC time>.json)")
    parser.add_argument("--quiet", action="store_true", help="print only the table")
    parser.add_argument("--signals", type=int, metavar="TRIES", default=0,
                        help="only measure the seconds from SIGINT, SIGTERM and SIGHUP to the gate's exit, TRIES "
                             "times each, and print them")
    parser.add_argument("--smallest", action="store_true",
                        help="only find the smallest of --percents (ascending) detected in 19 of 20 A/B runs "
                             "(ceil(0.95 * --runs)), printing each run's seconds")
    args = parser.parse_args(argv)
    if args.signals:
        print(signals_table(args.signals))
        return 0
    if args.smallest:
        found = smallest_detected(args)
        table = smallest_table(found, args)
        print()
        print(table)
        out = args.out or os.path.join("results", "bench-gate-smallest-" + dt.datetime.now(dt.timezone.utc).strftime(
            "%Y%m%d-%H%M%S") + ".json")
        command = "python benchmarks/bench_gate.py " + " ".join(argv if argv is not None else sys.argv[1:])
        write_text_atomic(out, dumps({"schema": "fftgauge-bench-gate-smallest/1", "command": command.strip(),
                                      "created": dt.datetime.now(dt.timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ"),
                                      "machine": machine_fingerprint(), "settings": vars(args), "result": found,
                                      "table": table}))
        print(f"\nwritten to {out}")
        return 0
    plan = [("ab", float(p), False) for p in args.percents.split(",") if p.strip()]
    plan += [("stored", float(p), False) for p in args.stored_percents.split(",") if p.strip()]
    plan += [("referenced", float(p), False) for p in args.referenced_percents.split(",") if p.strip()]
    if args.competing:
        plan += [(mode.strip(), 0.0, True) for mode in args.competing_modes.split(",") if mode.strip()]
    configs = []
    for mode, percent, competing in plan:
        if not args.quiet:
            print(f"{mode} {percent:g}%{' + busy process' if competing else ''}:", flush=True)
        configs.append(run_configuration(mode, percent, args, competing))
    table, targets = report(configs, args.runs)
    command = "python benchmarks/bench_gate.py " + " ".join(argv if argv is not None else sys.argv[1:])
    print()
    print(table)
    print()
    print("\n".join(targets))
    out = args.out or os.path.join("results", "bench-gate-" + dt.datetime.now(dt.timezone.utc).strftime(
        "%Y%m%d-%H%M%S") + ".json")
    write_text_atomic(out, dumps({"schema": "fftgauge-bench-gate/1", "command": command.strip(),
                                  "created": dt.datetime.now(dt.timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ"),
                                  "machine": machine_fingerprint(), "settings": vars(args), "configurations": configs,
                                  "targets": targets, "table": table}))
    print(f"\nwritten to {out}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
