"""The report page's content: a list of blocks (headings, paragraphs, preformatted text,
tables, images; :mod:`fftgauge.harness.report.markup` writes them as Markdown or HTML)."""

from __future__ import annotations

import datetime as dt
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
