"""Making a report: the request (inputs, output folder, plot format, pages asked for), the
plots that apply to the inputs, and every file written."""

from __future__ import annotations

import os
from dataclasses import dataclass, field

from fftgauge.harness.cases import Case
from fftgauge.harness.report.inputs import ReportInputs, file_stem, history_cases, merged_time_rows
from fftgauge.harness.results import write_text_atomic


#: What the time-per-point plot shows, every mark and band explained.
TIME_CAPTION = (
    "Time per point: the median time of one transform divided by N, against N (both axes logarithmic; lower is "
    "faster). Lines join the powers of two; hollow diamonds are the other sizes (primes, smooth and odd sizes), "
    "left off the line so that a slow prime stands out. The shaded band around a line is the 95% confidence "
    "interval of its median. The grey lines are cost models drawn through the fastest time at a mid-range power of "
    "two (the grey ring): dashed, proportional to N log2 N (an FFT's cost; a backend running parallel to it scales like an FFT), "
    "dotted, proportional to N^2 (a direct DFT's cost). Backends are named at their lines' ends, or in the legend "
    "where those names would overlap.")

#: What the relative-speed plot shows.
RELATIVE_CAPTION = (
    "Speed relative to the fastest: each backend's median time divided by the fastest backend's median time at the "
    "same N (logarithmic; 1× is the fastest at that size, 2× twice as slow). Only sizes timed by two or more "
    "backends are shown. Lines join the powers of two; hollow diamonds are the other sizes; the dashed line marks 1×.")

#: What the accuracy plot shows.
ACCURACY_CAPTION = (
    "Accuracy: the relative rms error of each case in units of its precision's machine epsilon (2^-23 for float32, "
    "2^-52 for float64), against N (both axes logarithmic; lower is better). Lines join the powers of two; hollow "
    "diamonds are the other sizes. The dashed black line is the error bound each case is checked against (at each "
    "N the largest limit there); red crosses are cases that fail the accuracy check. Exact results (0 eps) cannot "
    "be drawn on a logarithmic axis: a panel's title counts them.")


def history_caption(case: Case, runs: int) -> str:
    """Return the caption of one case's history plot over ``runs`` stored runs."""
    return (f"History of {case.label()} over {runs} stored runs, oldest first (named by commit where the run "
            f"recorded one, else by its time in UTC). One panel per backend, each on its own scale of at least "
            f"±10% of its median; error bars are the 95% interval of each run's median; the dashed line is the "
            f"median over the runs. Gate runs add a panel of candidate/baseline time ratios (dashed: 1, no change).")


def draw_plots(inputs: ReportInputs, out: str, fmt: str, cases: list[Case] | None) -> tuple[dict[str, list], list[str]]:
    """Draw every plot that applies; return ({section: [(path, caption)]}, notes for the user).

    Timing files give the time-per-point plot and, where two or more backends timed a size,
    the relative-speed plot; check files the accuracy plot; folders a history per case.
    """
    from fftgauge.harness.report import plots
    from fftgauge.harness.report.time_plots import relative_rows
    from fftgauge.harness.report.figures import timed_rows

    images: dict[str, list] = {"time": [], "check": [], "history": []}
    notes: list[str] = []
    if inputs.time:
        rows = merged_time_rows(inputs.time)
        if any(r.get("shape") for r in rows):  # shaped cases: their own plot (harness/report/shape_plots.py)
            from fftgauge.harness.report.shape_plots import SHAPED_CAPTION, plot_shaped_time
            images["time"].append((plot_shaped_time(rows, os.path.join(out, f"time-per-call-shaped.{fmt}")),
                                   SHAPED_CAPTION))
            rows = [r for r in rows if not r.get("shape")]
    if inputs.time and rows:
        if relative_rows(timed_rows(rows)):
            images["time"].append((plots.plot_relative(rows, os.path.join(out, f"relative-speed.{fmt}")),
                                   RELATIVE_CAPTION))
        images["time"].append((plots.plot_time(rows, os.path.join(out, f"time-per-point.{fmt}")), TIME_CAPTION))
    for path, doc in inputs.check:
        if any(r.get("check") == "accuracy" and (r.get("eps_units") or 0) > 0 for r in doc["rows"]):
            name = "accuracy" if len(inputs.check) == 1 else f"accuracy-{file_stem(path)}"
            images["check"].append((plots.plot_accuracy(doc["rows"], os.path.join(out, f"{name}.{fmt}")),
                                    ACCURACY_CAPTION))
        else:
            notes.append(f"{path} holds no accuracy results above zero: no accuracy plot")
    for folder, docs in inputs.histories:
        if cases:
            chosen = cases
        else:
            chosen, available = history_cases(docs)
            if available > len(chosen):
                notes.append(f"{folder}: {available} cases in every run; plotted {len(chosen)} (choose with --case)")
        for case in chosen:
            name = f"history-{file_stem(folder)}-{case.kind}-{case.dtype}-{case.n}"
            if case.norm != "backward":
                name += f"-{case.norm}"
            images["history"].append((plots.plot_history(docs, case, os.path.join(out, f"{name}.{fmt}")),
                                      history_caption(case, len(docs))))
    return images, notes


@dataclass(frozen=True)
class ReportRequest:
    """What a report is made from and where it goes.

    ``results`` are paths of results files or folders of stored runs; ``out`` the folder of
    the plots and ``scaling.txt``; ``plot_format`` ``png`` or ``svg``; ``markdown_path`` and
    ``html_path`` the pages asked for (None: not written); ``cases`` the cases of history
    plots (empty: chosen from the runs); ``plots`` False for tables and text only.
    """

    results: tuple[str, ...]
    out: str
    plot_format: str = "png"
    markdown_path: str | None = None
    html_path: str | None = None
    cases: tuple[Case, ...] = ()
    plots: bool = True


@dataclass
class ReportOutcome:
    """What making a report did: ``written`` (every path, in order) and ``notes`` for the user."""

    written: list[str] = field(default_factory=list)
    notes: list[str] = field(default_factory=list)


def make_report(request: ReportRequest) -> ReportOutcome:
    """Load the inputs, draw the plots that apply, write scaling.txt and the pages asked for.

    Returns
    -------
    ReportOutcome
        The paths written and the notes to show (plots left out, incomplete runs).

    Raises
    ------
    UsageError
        For a missing, corrupt, hostile or foreign results file, cases chosen without a
        folder of stored runs, or plots asked for without matplotlib installed.
    """
    from fftgauge.harness.errors import UsageError
    from fftgauge.harness.report.inputs import load_inputs
    from fftgauge.harness.report.markup import render_html, render_markdown
    from fftgauge.harness.report.pages import build_blocks
    from fftgauge.harness.timing.scaling import scaling_report

    inputs = load_inputs(list(request.results))
    if request.cases and not inputs.histories:
        raise UsageError("--case chooses the cases of history plots: pass a folder of stored runs too")
    outcome = ReportOutcome(notes=list(inputs.incomplete))
    images: dict[str, list] = {}
    if request.plots:
        from fftgauge.harness.report.figures import require_matplotlib

        require_matplotlib()
        images, notes = draw_plots(inputs, request.out, request.plot_format, list(request.cases) or None)
        outcome.notes += notes
        outcome.written += [p for section in images.values() for p, _ in section]
    if inputs.time:
        text = "\n\n".join(f"{path}\n" + scaling_report([r for r in doc["rows"] if not r.get("shape")],  # 1-D only
                                                        doc.get("machine")) for path, doc in inputs.time)
        scaling_path = os.path.join(request.out, "scaling.txt")
        write_text_atomic(scaling_path, text + "\n")
        outcome.written.append(scaling_path)
    if request.markdown_path or request.html_path:
        blocks = build_blocks(inputs, images)
        if request.markdown_path:
            write_text_atomic(request.markdown_path, render_markdown(blocks, request.markdown_path))
            outcome.written.append(request.markdown_path)
        if request.html_path:
            write_text_atomic(request.html_path, render_html(blocks, request.html_path))
            outcome.written.append(request.html_path)
    return outcome
