"""``fftgauge report``: stored results into plots (PNG or SVG), a scaling analysis and tables
(Markdown, HTML).

Inputs are results files of ``fftgauge time`` (time and rate plots, comparison tables, the
scaling analysis) and ``fftgauge check`` (the accuracy plot and the battery summary); the
schema decides which apply. A folder stands for every results file inside it (``*.json``,
``fftgauge time`` or ``fftgauge gate`` runs): a history, plotted per case over the runs.
Every file written is printed, one path a line.
"""

from __future__ import annotations

import argparse
import datetime as dt
import html
import os
from dataclasses import dataclass, field
from typing import Any

from fftgauge.harness.cases import DTYPES, KINDS, NORMS, Case
from fftgauge.harness.errors import UsageError
from fftgauge.harness.results import load_results, write_text_atomic

TIME_SCHEMA, CHECK_SCHEMA, GATE_SCHEMA = "fftgauge-time/1", "fftgauge-check/1", "fftgauge-gate/1"

#: Most history plots drawn per folder when no ``--case`` is given.
MAX_HISTORY_PLOTS = 6

DEFAULT_OUT = os.path.join("results", "report")

#: Fields every row must have, per schema (validated once, here at the boundary).
_REQUIRED = {
    TIME_SCHEMA: ("backend", "kind", "dtype", "n", "seconds"),
    CHECK_SCHEMA: ("backend", "kind", "dtype", "n", "check", "status"),
    GATE_SCHEMA: ("backend", "kind", "dtype", "n"),
}


def add_arguments(parser: argparse.ArgumentParser) -> None:
    """Add this sub-command's options to ``parser``."""
    parser.add_argument("results", nargs="+", metavar="PATH",
                        help="results files of fftgauge time and/or check; a folder means every results file "
                             "inside (*.json, time or gate runs), plotted as a history")
    parser.add_argument("--out", metavar="DIR", default=DEFAULT_OUT,
                        help=f"folder for the plots and scaling.txt (default {DEFAULT_OUT})")
    parser.add_argument("--format", choices=("png", "svg"), default="png", help="plot file format (default png)")
    parser.add_argument("--markdown", metavar="PATH", help="write a Markdown report (tables, scaling, plots) here")
    parser.add_argument("--html", metavar="PATH", help="write the same report as one HTML page here")
    parser.add_argument("--case", action="append", metavar="KIND,DTYPE,N[,NORM]",
                        help="case whose history to plot from a folder, e.g. fft,float64,1024 (repeatable; default: "
                             f"up to {MAX_HISTORY_PLOTS} cases every stored run holds)")
    parser.add_argument("--no-plots", action="store_true", help="tables and scaling text only (needs no matplotlib)")


# --------------------------------------------------------------------------- inputs

@dataclass
class ReportInputs:
    """What the command was given, loaded and checked: (path, document) pairs per schema and
    (folder, documents) histories."""

    time: list[tuple[str, dict[str, Any]]] = field(default_factory=list)
    check: list[tuple[str, dict[str, Any]]] = field(default_factory=list)
    histories: list[tuple[str, list[dict[str, Any]]]] = field(default_factory=list)


def _check_rows(path: str, doc: dict[str, Any]) -> None:
    """Raise UsageError naming ``path`` when a row lacks a field or holds an impossible case."""
    for i, row in enumerate(doc["rows"]):
        if not isinstance(row, dict):
            raise UsageError(f"results file {path!r}: row {i} is not an object; the file is corrupt")
        missing = [f for f in _REQUIRED[doc["schema"]] if f not in row]
        if missing:
            raise UsageError(f"results file {path!r}: row {i} lacks {', '.join(missing)}; the file is corrupt or "
                             f"was edited")
        n = row["n"]
        if row["kind"] not in KINDS or row["dtype"] not in DTYPES or not isinstance(n, int) or n < 1:
            raise UsageError(f"results file {path!r}: row {i} has an impossible case ({row['kind']!r}, "
                             f"{row['dtype']!r}, n={n!r})")
        if row.get("norm", "backward") not in NORMS:
            raise UsageError(f"results file {path!r}: row {i} has an unknown normalisation {row.get('norm')!r}")
        seconds = row.get("seconds")
        if seconds is not None and not isinstance(seconds, (int, float)):
            raise UsageError(f"results file {path!r}: row {i} has a non-numeric time {seconds!r}")


def _load(path: str, schemas: tuple[str, ...]) -> dict[str, Any]:
    doc = load_results(path, schemas)
    _check_rows(path, doc)
    return doc


def load_inputs(paths: list[str]) -> ReportInputs:
    """Return the loaded inputs of ``paths`` (files or folders).

    Raises
    ------
    UsageError
        For a missing, corrupt or foreign file (naming it), a gate file given on its own
        (gate runs are a history: pass their folder), or a folder without results files.
    """
    inputs = ReportInputs()
    for path in paths:
        if os.path.isdir(path):
            names = sorted(f for f in os.listdir(path) if f.endswith(".json"))
            if not names:
                raise UsageError(f"folder {path!r} holds no results files (*.json); pass results files or a "
                                 f"folder of stored runs")
            docs = [_load(os.path.join(path, name), (TIME_SCHEMA, GATE_SCHEMA)) for name in names]
            inputs.histories.append((path, docs))
            continue
        doc = _load(path, (TIME_SCHEMA, CHECK_SCHEMA, GATE_SCHEMA))
        if doc["schema"] == GATE_SCHEMA:
            raise UsageError(f"results file {path!r} is a gate run: gate runs are plotted as a history; pass the "
                             f"folder that holds them")
        (inputs.time if doc["schema"] == TIME_SCHEMA else inputs.check).append((path, doc))
    return inputs


def parse_case(text: str) -> Case:
    """Return the case written as ``KIND,DTYPE,N`` or ``KIND,DTYPE,N,NORM``.

    Raises
    ------
    UsageError
        When the text is not of that form or names an unknown kind, precision or norm.
    """
    parts = [p.strip() for p in text.split(",")]
    if len(parts) not in (3, 4) or not parts[2].isdigit():
        raise UsageError(f"--case {text!r}: write KIND,DTYPE,N[,NORM], e.g. fft,float64,1024")
    try:
        return Case(parts[0], parts[1], int(parts[2]), *(parts[3:] or ["backward"]))
    except ValueError as exc:
        raise UsageError(f"--case {text!r}: {exc}") from None


def _stem(path: str) -> str:
    return os.path.splitext(os.path.basename(os.path.normpath(path)))[0] or "results"


def merged_time_rows(time_docs: list[tuple[str, dict[str, Any]]]) -> list[dict[str, Any]]:
    """Return the rows of every time file together; when two files time the same backend and
    case, each row's backend becomes ``backend [file stem]`` so that the runs stay apart."""
    keys: dict[tuple, str] = {}
    clash = False
    for path, doc in time_docs:
        for row in doc["rows"]:
            key = (row["backend"], row["kind"], row["dtype"], row["n"], row.get("threads"), row.get("norm"))
            if keys.setdefault(key, path) != path:
                clash = True
    rows = []
    for path, doc in time_docs:
        for row in doc["rows"]:
            rows.append({**row, "backend": f"{row['backend']} [{_stem(path)}]"} if clash else dict(row))
    return rows


def history_cases(docs: list[dict[str, Any]], limit: int = MAX_HISTORY_PLOTS) -> tuple[list[Case], int]:
    """Return up to ``limit`` cases held by every run (else by the newest), spread evenly, and how many there were."""
    def cases_of(doc: dict[str, Any]) -> set[Case]:
        return {Case(r["kind"], r["dtype"], r["n"], r.get("norm", "backward")) for r in doc["rows"]}

    common = set.intersection(*(cases_of(d) for d in docs)) if docs else set()
    if not common and docs:
        common = cases_of(max(docs, key=lambda d: str(d.get("created") or "")))
    ordered = sorted(common)
    if len(ordered) <= limit:
        return ordered, len(ordered)
    step = (len(ordered) - 1) / (limit - 1)
    return [ordered[round(i * step)] for i in range(limit)], len(ordered)


# --------------------------------------------------------------------------- the report's content

def _machine_line(doc: dict[str, Any]) -> str:
    machine = doc.get("machine") or {}
    caches = ", ".join(f"{k} {v}" for k, v in (machine.get("caches") or {}).items())
    return (f"measured {doc.get('created', '?')} on {machine.get('cpu', 'an unknown CPU')}, "
            f"{machine.get('cores', '?')} cores" + (f" (caches: {caches})" if caches else "")
            + (f"; note: {doc['note']}" if doc.get("note") else ""))


def build_blocks(inputs: ReportInputs, images: dict[str, list[str]]) -> list[tuple]:
    """Return the report as a list of blocks: ("h", level, text), ("p", text), ("pre", text),
    ("table", header, rows, bold cells as (row, col) set), ("img", path, caption)."""
    from fftgauge.harness.report.check_tables import rows_frame, summary_frame
    from fftgauge.harness.timing.scaling import scaling_report
    from fftgauge.harness.report.time_tables import comparison_blocks, comparison_table

    blocks: list[tuple] = [("h", 1, "fftgauge report"),
                           ("p", "Generated " + dt.datetime.now(dt.timezone.utc).strftime("%Y-%m-%d %H:%M UTC")
                            + " from " + ", ".join([p for p, _ in inputs.time + inputs.check]
                                                   + [f"{p} (stored runs)" for p, _ in inputs.histories]) + ".")]
    if inputs.time:
        blocks.append(("h", 2, "Timing"))
        blocks += [("p", f"{path}: {_machine_line(doc)}") for path, doc in inputs.time]
        for block in comparison_blocks(comparison_table(merged_time_rows(inputs.time)), "µs"):
            blocks.append(("h", 3, f"{block['kind']} {block['dtype']}: median time per transform (fastest in bold)"))
            bold = {(i, j) for i, j in enumerate(block["fastest"]) if j is not None}
            blocks.append(("table", block["header"], block["rows"], bold))
        blocks.append(("h", 3, "Scaling"))
        for path, doc in inputs.time:
            blocks.append(("pre", f"{path}\n" + scaling_report(doc["rows"], doc.get("machine"))))
        blocks += [("img", p, c) for p, c in images.get("time", [])]
    if inputs.check:
        blocks.append(("h", 2, "Correctness"))
        for path, doc in inputs.check:
            blocks.append(("p", f"{path}: {_machine_line(doc)}"))
            summary = summary_frame(rows_frame(doc["rows"]))
            if summary.empty:
                blocks.append(("p", "no cases were run"))
                continue
            summary["worst_eps_units"] = summary["worst_eps_units"].map(
                lambda v: "" if v is None or v != v else f"{v:.3g}")
            header = [c.replace("_", " ") for c in summary.columns]
            blocks.append(("table", header, [[str(v) for v in row] for row in summary.itertuples(index=False)],
                           set()))
        blocks += [("img", p, c) for p, c in images.get("check", [])]
    if inputs.histories:
        blocks.append(("h", 2, "History"))
        for folder, docs in inputs.histories:
            blocks.append(("p", f"{folder}: {len(docs)} stored runs"))
        blocks += [("img", p, c) for p, c in images.get("history", [])]
    return blocks


def render_markdown(blocks: list[tuple], md_path: str) -> str:
    """Return the blocks as Markdown; image links are relative to ``md_path``'s folder."""
    from fftgauge.harness.report.time_tables import markdown_table

    base = os.path.dirname(os.path.abspath(md_path))
    out = []
    for block in blocks:
        tag = block[0]
        if tag == "h":
            out.append(f"{'#' * block[1]} {block[2]}")
        elif tag == "p":
            out.append(block[1])
        elif tag == "pre":
            out.append("```text\n" + block[1] + "\n```")
        elif tag == "table":
            _, header, rows, bold = block
            rows = [[f"**{c}**" if (i, j) in bold else c for j, c in enumerate(row)] for i, row in enumerate(rows)]
            out.append(markdown_table(header, rows))
        elif tag == "img":
            rel = os.path.relpath(os.path.abspath(block[1]), base).replace(os.sep, "/")
            out.append(f"![{block[2]}]({rel})")
    return "\n\n".join(out) + "\n"


def render_html(blocks: list[tuple], html_path: str) -> str:
    """Return the blocks as one HTML page; image sources are relative to ``html_path``'s folder."""
    base = os.path.dirname(os.path.abspath(html_path))
    esc = html.escape
    body = []
    for block in blocks:
        tag = block[0]
        if tag == "h":
            body.append(f"<h{block[1]}>{esc(block[2])}</h{block[1]}>")
        elif tag == "p":
            body.append(f"<p>{esc(block[1])}</p>")
        elif tag == "pre":
            body.append(f"<pre>{esc(block[1])}</pre>")
        elif tag == "table":
            _, header, rows, bold = block
            head = "".join(f"<th>{esc(h)}</th>" for h in header)
            lines = ["<tr>" + "".join(f"<td><strong>{esc(c)}</strong></td>" if (i, j) in bold else f"<td>{esc(c)}</td>"
                                      for j, c in enumerate(row)) + "</tr>" for i, row in enumerate(rows)]
            body.append(f"<table>\n<thead><tr>{head}</tr></thead>\n<tbody>\n" + "\n".join(lines) + "\n</tbody>\n</table>")
        elif tag == "img":
            rel = os.path.relpath(os.path.abspath(block[1]), base).replace(os.sep, "/")
            body.append(f'<figure><img src="{esc(rel)}" alt="{esc(block[2])}"/><figcaption>{esc(block[2])}'
                        f"</figcaption></figure>")
    style = ("body{font-family:sans-serif;max-width:80em;margin:2em auto;padding:0 1em}"
             "table{border-collapse:collapse;margin:1em 0}td,th{border:1px solid #ccc;padding:.25em .6em;"
             "text-align:right}th{background:#f3f3f3}pre{background:#f7f7f7;padding:1em;overflow-x:auto}"
             "img{max-width:100%}")
    return ("<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\"/>\n<title>fftgauge report</title>\n"
            f"<style>{style}</style>\n</head>\n<body>\n" + "\n".join(body) + "\n</body>\n</html>\n")


# --------------------------------------------------------------------------- plots

def draw_plots(inputs: ReportInputs, out: str, fmt: str, cases: list[Case] | None) -> tuple[dict[str, list], list[str]]:
    """Draw every plot that applies; return ({section: [(path, caption)]}, notes for the user)."""
    from fftgauge.harness.report import plots

    images: dict[str, list] = {"time": [], "check": [], "history": []}
    notes: list[str] = []
    if inputs.time:
        rows = merged_time_rows(inputs.time)
        images["time"].append((plots.plot_time(rows, os.path.join(out, f"time.{fmt}")),
                               "time per transform against N, with the N log2 N and N^2 model lines"))
        images["time"].append((plots.plot_rate(rows, os.path.join(out, f"rate.{fmt}")),
                               "GFLOP/s against N (5 N log2 N convention, 2.5 N log2 N for real transforms)"))
    for path, doc in inputs.check:
        if any(r.get("check") == "accuracy" and (r.get("eps_units") or 0) > 0 for r in doc["rows"]):
            name = "accuracy" if len(inputs.check) == 1 else f"accuracy-{_stem(path)}"
            images["check"].append((plots.plot_accuracy(doc["rows"], os.path.join(out, f"{name}.{fmt}")),
                                    "accuracy against N, with the error bound"))
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
            name = f"history-{_stem(folder)}-{case.kind}-{case.dtype}-{case.n}"
            if case.norm != "backward":
                name += f"-{case.norm}"
            images["history"].append((plots.plot_history(docs, case, os.path.join(out, f"{name}.{fmt}")),
                                      f"history of {case.label()} over {len(docs)} stored runs"))
    return images, notes


def run(args: argparse.Namespace) -> int:
    """Write the plots, scaling.txt and the asked-for tables; print each path written; return 0.

    Raises
    ------
    UsageError
        For a missing, corrupt or foreign results file, a bad ``--case``, or plots asked
        for without matplotlib installed.
    """
    from fftgauge.harness.timing.scaling import scaling_report

    inputs = load_inputs(args.results)
    cases = [parse_case(text) for text in (args.case or [])]
    if cases and not inputs.histories:
        raise UsageError("--case chooses the cases of history plots: pass a folder of stored runs too")
    written: list[str] = []
    images: dict[str, list] = {}
    notes: list[str] = []
    if not args.no_plots:
        from fftgauge.harness.report.plots import require_matplotlib

        require_matplotlib()
        images, notes = draw_plots(inputs, args.out, args.format, cases or None)
        written += [p for section in images.values() for p, _ in section]
    if inputs.time:
        text = "\n\n".join(f"{path}\n" + scaling_report(doc["rows"], doc.get("machine")) for path, doc in inputs.time)
        scaling_path = os.path.join(args.out, "scaling.txt")
        write_text_atomic(scaling_path, text + "\n")
        written.append(scaling_path)
    if args.markdown or args.html:
        blocks = build_blocks(inputs, images)
        if args.markdown:
            write_text_atomic(args.markdown, render_markdown(blocks, args.markdown))
            written.append(args.markdown)
        if args.html:
            write_text_atomic(args.html, render_html(blocks, args.html))
            written.append(args.html)
    for note in notes:
        print(f"note: {note}")
    for path in written:
        print(path)
    if not written:
        print("nothing to write: the inputs hold no timing results and plots are off")
    return 0
