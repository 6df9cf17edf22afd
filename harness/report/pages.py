"""The report page: its content as a list of blocks (headings, paragraphs, preformatted text,
tables, images) and those blocks rendered as Markdown or as one HTML page."""

from __future__ import annotations

import datetime as dt
import html
import os
from typing import Any

from fftgauge.harness.report.inputs import ReportInputs, merged_time_rows


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
