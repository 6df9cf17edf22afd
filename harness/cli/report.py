"""``fftgauge report``: stored results into plots (PNG or SVG), a scaling analysis and one
report page (Markdown, HTML).

Inputs are results files of ``fftgauge time`` (timing plots, comparison tables, the scaling
analysis), ``fftgauge check`` (the accuracy plot and the battery summary) and ``fftgauge
pick`` (the ranking, with the battery and timing it holds as evidence); the schema decides
which apply. A folder stands for every results file inside it (``*.json``,
``fftgauge time`` or ``fftgauge gate`` runs): a history, plotted per case over the runs.
Every file written is printed, one path a line. The work is done in
:mod:`fftgauge.harness.report.assemble`; this module parses, builds the request and prints.
"""

from __future__ import annotations

import argparse
import os

from fftgauge.harness.report.inputs import MAX_HISTORY_PLOTS, parse_case

DEFAULT_OUT = os.path.join("results", "report")


def add_arguments(parser: argparse.ArgumentParser) -> None:
    """Add this sub-command's options to ``parser``."""
    parser.add_argument("results", nargs="+", metavar="PATH",
                        help="results files of fftgauge time, check and/or pick (a pick file adds its ranking and "
                             "its battery and timing); a folder means every results file inside (*.json, time or "
                             "gate runs), plotted as a history")
    parser.add_argument("--out", metavar="DIR", default=DEFAULT_OUT,
                        help=f"folder for the plots and scaling.txt (default {DEFAULT_OUT})")
    parser.add_argument("--format", choices=("png", "svg"), default="png", help="plot file format (default png)")
    parser.add_argument("--markdown", metavar="PATH", help="write a Markdown report (tables, scaling, plots) here")
    parser.add_argument("--html", metavar="PATH", help="write the same report as one self-contained HTML page here "
                                                       "(plots inside it, no outside address; for screens, phones "
                                                       "and print)")
    parser.add_argument("--case", action="append", metavar="KIND,DTYPE,N[,NORM]",
                        help="case whose history to plot from a folder, e.g. fft,float64,1024 (repeatable; default: "
                             f"up to {MAX_HISTORY_PLOTS} cases every stored run holds)")
    parser.add_argument("--no-plots", action="store_true", help="tables and scaling text only (needs no matplotlib)")


def run(args: argparse.Namespace) -> int:
    """Write the plots, scaling.txt and the asked-for pages; print the notes and each path written; return 0.

    Raises
    ------
    UsageError
        For a missing, corrupt, hostile or foreign results file, a bad ``--case``, or plots
        asked for without matplotlib installed.
    """
    from fftgauge.harness.report.assemble import ReportRequest, make_report

    request = ReportRequest(results=tuple(args.results), out=args.out, plot_format=args.format,
                            markdown_path=args.markdown, html_path=args.html,
                            cases=tuple(parse_case(text) for text in (args.case or [])), plots=not args.no_plots)
    outcome = make_report(request)
    for note in outcome.notes:
        print(f"note: {note}")
    for path in outcome.written:
        print(path)
    if not outcome.written:
        print("nothing to write: the inputs hold no timing results and plots are off")
    return 0
