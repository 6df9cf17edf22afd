"""Tables of timing rows of shaped cases: one line per shape, axes and layout, one column per backend.

A shaped case is named as ``256x256 axes=0,1 C`` (:func:`fftgauge.harness.shapes.fields.shape_text`);
``batch`` is the transforms one call computes, ``N`` the points of one transform (the product
of the transformed lengths). Cells are the median time of one call (the whole batch); the
fastest backend of a line is marked ``*``, and ``GFLOP/s`` is its rate
(:func:`fftgauge.harness.timing.opcount.shaped_pseudo_flops` over the median).
"""

from __future__ import annotations

from typing import Any, Iterable

from fftgauge.harness.shapes.fields import row_order_key, shape_text

__all__ = ["shaped_blocks", "format_shaped", "markdown_shaped", "shaped_summary"]


def _key(row: dict[str, Any]) -> tuple:
    return (row["kind"], row["dtype"], row.get("norm") or "backward")


def shaped_blocks(rows: Iterable[dict[str, Any]], micro: str = "us") -> list[dict[str, Any]]:
    """Return the shaped rows as text cells, one block per kind x precision x norm.

    Returns
    -------
    list of dict
        Each with ``title`` (``"fftn float64"``, the norm added when not backward), ``header``
        (``["shape", "batch", "N", backend..., "GFLOP/s"]``), ``rows`` (cell texts, ``"-"``
        where a backend has no time, ``skip``/``error`` where it skipped or failed) and
        ``fastest`` (per line, the column index of the fastest backend, or None). A column whose
        times the program measured itself is marked ``(self-timed)`` and is the fastest only on a
        line where no fftgauge-timed column has a time.
    """
    from fftgauge.harness.report.time_tables import SELF_TIMED_MARK, format_seconds

    shaped = sorted((r for r in rows if r.get("shape")), key=row_order_key)
    backends = list(dict.fromkeys(r["backend"] for r in shaped))
    self_timed = {r["backend"] for r in shaped if r.get("timing_source") == "program"}
    blocks: dict[tuple, dict[tuple, dict[str, dict]]] = {}
    for r in shaped:
        line = (tuple(r["shape"]), tuple(r["axes"]), r.get("layout"))
        blocks.setdefault(_key(r), {}).setdefault(line, {})[r["backend"]] = r
    out = []
    for (kind, dtype, norm), lines in blocks.items():
        cells, fastest = [], []
        for by_backend in lines.values():
            first = next(iter(by_backend.values()))
            timed = {b: r for b, r in by_backend.items() if r.get("status", "ok") == "ok" and r.get("seconds")}
            # the fastest among fftgauge-timed columns; self-timed ones only where none has a time
            pool = {b: r for b, r in timed.items() if b not in self_timed} or timed
            best = min(pool, key=lambda b: pool[b]["seconds"]) if pool else None
            texts = []
            for b in backends:
                r = by_backend.get(b)
                if r is None:
                    texts.append("-")
                elif b in timed:
                    texts.append(format_seconds(r["seconds"], micro))
                else:
                    texts.append(r.get("status") or "-")
            rate = f"{timed[best]['gflops']:.2f}" if best is not None and timed[best].get("gflops") else "-"
            cells.append([shape_text(first), str(first.get("batch")), str(first.get("points"))] + texts + [rate])
            fastest.append(3 + backends.index(best) if best is not None and len(pool) > 1 else None)
        title = f"{kind} {dtype}" + ("" if norm == "backward" else f" norm={norm}")
        names = [f"{b} {SELF_TIMED_MARK}" if b in self_timed else b for b in backends]
        out.append({"title": title, "header": ["shape", "batch", "N"] + names + ["GFLOP/s"], "rows": cells,
                    "fastest": fastest})
    return out


def format_shaped(rows: Iterable[dict[str, Any]]) -> str:
    """Return the shaped rows as terminal text: one block per kind x precision, fastest cell marked ``*``."""
    parts = []
    for block in shaped_blocks(rows):
        table = [block["header"]] + [[c + ("*" if block["fastest"][i] == j else "") for j, c in enumerate(line)]
                                     for i, line in enumerate(block["rows"])]
        widths = [max(len(line[j]) for line in table) for j in range(len(block["header"]))]
        text = [block["title"]] + ["  " + "  ".join(c.ljust(w) if j == 0 else c.rjust(w)
                                                    for j, (c, w) in enumerate(zip(line, widths))).rstrip()
                                   for line in table]
        parts.append("\n".join(text))
    return "\n\n".join(parts) or "no shaped rows"


def markdown_shaped(rows: Iterable[dict[str, Any]]) -> str:
    """Return the shaped rows as Markdown tables, one per kind x precision, the fastest cell in bold."""
    parts = []
    for block in shaped_blocks(rows, micro="µs"):
        lines = [f"**{block['title']}**", "", "| " + " | ".join(block["header"]) + " |",
                 "|" + "|".join(["---"] + ["---:"] * (len(block["header"]) - 1)) + "|"]
        for i, line in enumerate(block["rows"]):
            cells = [f"**{c}**" if block["fastest"][i] == j else c for j, c in enumerate(line)]
            lines.append("| " + " | ".join(cells) + " |")
        parts.append("\n".join(lines))
    return "\n\n".join(parts)


def shaped_summary(rows: list[dict[str, Any]]) -> str:
    """Return the terminal report of a shaped timing run: the tables, the longest planning, the errors."""
    from fftgauge.harness.report.time_tables import format_seconds

    parts = [format_shaped(rows)]
    planned = [r for r in rows if r.get("status") == "ok" and (r.get("plan_seconds") or 0) > 1e-4]
    if planned:
        worst = max(planned, key=lambda r: r["plan_seconds"])
        parts.append(f"planning: {len(planned)} case(s) took over 0.1 ms to plan; the longest, {worst['backend']} "
                     f"{worst['kind']} {shape_text(worst)}, took {format_seconds(worst['plan_seconds'])}")
    errors = [r for r in rows if r.get("status") == "error"]
    if errors:
        parts.append("errors:\n" + "\n".join(f"  {r['backend']} {r['kind']} {r['dtype']} {shape_text(r)}: "
                                             f"{r['message']}" for r in errors[:10]))
    return "\n\n".join(parts)
