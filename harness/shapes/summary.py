"""The terminal summary of a battery run with shaped cases: the 1-D rows as the 1-D battery
prints them, the shaped rows by shape.

The shaped part has a verdict line, one table line per backend x kind x precision (cases
passed, failed, errors, skipped; worst accuracy in eps with its limit; the failing shapes;
the diagnoses), one finding per backend and diagnosis (the checks that saw it, the shapes,
the worst case's message), and the shaped cases not run, one entry per reason; findings and
not-run entries wrap at the terminal's width, never cut.
"""

from __future__ import annotations

from typing import Any, Callable, Iterable

from fftgauge.harness.rows import message_cause
from fftgauge.harness.shapes.fields import shape_text

__all__ = ["check_summary", "shaped_case_key", "shaped_summary_lines"]

#: Failing shapes a table line names before it says how many more there are.
SHAPES_SHOWN = 4


def shaped_case_key(row: dict[str, Any]) -> tuple:
    """Return the key of the case a shaped row belongs to."""
    return (row["backend"], row["kind"], row["dtype"], row.get("norm") or "backward", tuple(row["shape"]),
            tuple(row.get("axes") or ()), row.get("layout") or "C")


def _case_status(statuses: Iterable[str]) -> str:
    statuses = list(statuses)
    for status in ("error", "fail"):
        if status in statuses:
            return status
    return "skip" if all(s == "skip" for s in statuses) else "pass"


def _shown(labels: list[str]) -> str:
    labels = list(dict.fromkeys(labels))
    more = len(labels) - SHAPES_SHOWN
    return "; ".join(labels[:SHAPES_SHOWN]) + (f"; ... ({more} more)" if more > 0 else "")


def _table(rows: list[dict[str, Any]]) -> str:
    import pandas as pd

    cases: dict[tuple, list[dict]] = {}
    for r in rows:
        cases.setdefault(shaped_case_key(r), []).append(r)
    lines: dict[tuple, dict[str, Any]] = {}
    for key, members in cases.items():
        group = key[:4]
        line = lines.setdefault(group, {"backend": key[0], "kind": key[1], "dtype": key[2], "norm": key[3],
                                        "passed": 0, "failed": 0, "errors": 0, "skipped": 0, "worst": None,
                                        "limit": None, "failing": [], "codes": {}})
        status = _case_status(r["status"] for r in members)
        line[{"pass": "passed", "fail": "failed", "error": "errors", "skip": "skipped"}[status]] += 1
        if status in ("fail", "error"):
            line["failing"].append(shape_text(members[0]))
        for r in members:
            if r["check"] == "accuracy" and r.get("eps_units") is not None and \
                    (line["worst"] is None or r["eps_units"] > line["worst"]):
                line["worst"] = r["eps_units"]
                limit, value = r.get("limit"), r.get("value")
                line["limit"] = r["eps_units"] * limit / value if limit and value else None
            if r["status"] == "fail" and r.get("diagnosis"):
                line["codes"][r["diagnosis"]] = line["codes"].get(r["diagnosis"], 0) + 1
    table = pd.DataFrame([{
        "backend": v["backend"], "kind": v["kind"], "dtype": v["dtype"], "norm": v["norm"], "passed": v["passed"],
        "failed": v["failed"], "errors": v["errors"], "skipped": v["skipped"],
        "worst eps (limit)": "" if v["worst"] is None else f"{v['worst']:.3g}" + (
            f" ({v['limit']:.3g})" if v["limit"] else ""),
        "failed shapes": _shown(v["failing"]),
        "diagnoses": ", ".join(f"{c} x{k}" for c, k in sorted(v["codes"].items(), key=lambda i: -i[1])),
    } for v in lines.values()])
    if (table["norm"] == "backward").all():
        table = table.drop(columns=["norm"])
    return table.to_string(index=False)


def _case_label(row: dict[str, Any], dtype: bool = True) -> str:
    return " ".join([row["kind"]] + ([row["dtype"]] if dtype else []) + [shape_text(row)])


def _findings(rows: list[dict[str, Any]]) -> list[str]:
    groups: dict[tuple[str, str], list[dict]] = {}
    for r in rows:
        if r["status"] == "fail":
            groups.setdefault((r["backend"], r.get("diagnosis") or "unknown"), []).append(r)
        elif r["status"] == "error" and r["check"] != "all":
            groups.setdefault((r["backend"], f"error: {message_cause(r.get('message'))[:60]}"), []).append(r)
    out = []
    for (backend, cause), members in groups.items():
        checks = ", ".join(dict.fromkeys(r["check"] for r in members))
        keys = {shaped_case_key(r) for r in members}
        worst = max(members, key=lambda r: r.get("eps_units") or 0.0)
        out.append(f"  {backend} · {cause} ({checks}): {len(keys)} case{'s' if len(keys) != 1 else ''} "
                   f"({_shown([_case_label(r) for r in members])}); worst "
                   f"{worst['kind']} {worst['dtype']} {shape_text(worst)} {worst['check']}: {worst.get('message')}")
    return out


def _not_run(rows: list[dict[str, Any]]) -> list[str]:
    groups: dict[tuple[str, str], list[dict]] = {}
    for r in rows:
        if r["status"] == "skip" and r["check"] == "all":
            groups.setdefault((r["backend"], message_cause(r.get("message"))), []).append(r)
    return [f"  {backend}: {len(members)} shaped case{'s' if len(members) != 1 else ''} "
            f"({_shown([_case_label(r, dtype=False) for r in members])}): {members[0].get('message')}"
            for (backend, _), members in groups.items()]


def shaped_summary_lines(rows: list[dict[str, Any]], width: int | None = None) -> list[str]:
    """Return the shaped part of the summary (verdict, table, findings, not run) as lines: the
    findings and not-run lines wrapped at ``width`` columns (the terminal's when None,
    :func:`~fftgauge.harness.report.findings.wrap_line`), never cut."""
    from fftgauge.harness.report.findings import wrap_line

    if not rows:
        return []
    statuses = {}
    for r in rows:
        statuses.setdefault(shaped_case_key(r), []).append(r["status"])
    counts = {"pass": 0, "fail": 0, "error": 0, "skip": 0}
    for members in statuses.values():
        counts[_case_status(members)] += 1
    verdict = ("PASS (shapes): every shaped case held" if counts["fail"] + counts["error"] == 0 else
               f"FAIL (shapes): {counts['fail']} shaped case(s) gave wrong answers, {counts['error']} could not run, "
               f"{counts['pass']} passed")
    run = [r for r in rows if not (r["status"] == "skip" and r["check"] == "all")]
    lines = [verdict, ""] + ([_table(run)] if run else ["no shaped case was run"])
    found = _findings(rows)
    if found:
        lines += ["", *wrap_line("shaped findings, one per cause (backend · diagnosis (checks): cases; worst case: "
                                 "what was seen):", width)]
        lines += [part for line in found for part in wrap_line(line, width)]
    skipped = _not_run(rows)
    if skipped:
        lines += ["", "shaped cases not run (one entry per reason):"]
        lines += [part for line in skipped for part in wrap_line(line, width)]
    return lines


def check_summary(doc: dict[str, Any], format_summary: Callable[..., str]) -> str:
    """Return the terminal summary of a check document: ``format_summary`` (the 1-D battery's)
    of its 1-D rows, then :func:`shaped_summary_lines` of its shaped rows."""
    from fftgauge.harness.report.check_tables import rows_frame

    line_rows = [r for r in doc["rows"] if not r.get("shape")]
    shaped = [r for r in doc["rows"] if r.get("shape")]
    parts = []
    if line_rows or not shaped:
        parts.append(format_summary(rows_frame(line_rows), doc.get("backends")))
    if shaped:
        parts.append("\n".join(shaped_summary_lines(shaped)))
    return "\n\n".join(parts)
