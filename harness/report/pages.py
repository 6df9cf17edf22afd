"""The report page's content: a list of blocks (headings, paragraphs, preformatted text,
tables, images with captions, the verdict headline; :mod:`fftgauge.harness.report.markup`
writes them as Markdown or HTML).

The page reads top-down: the verdict (``PASS``, ``FAIL`` or ``INCOMPLETE``) and why, the
inputs, the pick's ranking (from a ``fftgauge pick`` file), correctness (summary, one
sentence per finding, the accuracy plot), timing (the median times with the fastest in bold, planning time, peak memory and
rate per backend, the speed plots, the scaling analysis in full), histories, and last the
machine fingerprint and library versions of every input.
"""

from __future__ import annotations

import datetime as dt
from typing import Any

from fftgauge.harness.report.inputs import ReportInputs, merged_time_rows, run_tags


def machine_line(doc: dict[str, Any]) -> str:
    """Return where and when a results document was measured, with its note, as one line."""
    machine = doc.get("machine") or {}
    caches = ", ".join(f"{k} {v}" for k, v in (machine.get("caches") or {}).items())
    return (f"measured {doc.get('created', '?')} on {machine.get('cpu', 'an unknown CPU')}, "
            f"{machine.get('cores', '?')} cores" + (f" (caches: {caches})" if caches else "")
            + (f"; note: {doc['note']}" if doc.get("note") else ""))


def _count(n: int, what: str) -> str:
    return f"{n} {what}" + ("" if n == 1 else "s")


def verdict(inputs: ReportInputs) -> tuple[str, str]:
    """Return the headline: (``PASS`` | ``FAIL`` | ``INCOMPLETE``, one sentence saying why).

    FAIL when a checked case gave a wrong answer or could not run, a timed case could not
    run, a pick recommended no backend, or the newest gate run of a history found a regression; else INCOMPLETE when an
    input is from a run that did not complete; else PASS.
    """
    from fftgauge.harness.report.findings import case_counts
    from fftgauge.harness.report.pick_section import pick_verdict

    parts, failed = [], False
    if inputs.check:
        counts = case_counts(r for _, doc in inputs.check for r in doc["rows"])
        failed |= bool(counts["wrong"] or counts["error"])
        words = [_count(counts["passed"], "case") + " passed"]
        if counts["wrong"]:
            words.append(f"{counts['wrong']} gave a wrong answer")
        if counts["error"]:
            words.append(f"{counts['error']} could not run")
        if counts["skipped"]:
            words.append(f"{counts['skipped']} not claimed (skipped)")
        parts.append("correctness, " + ", ".join(words))
    if inputs.time:
        rows = [r for _, doc in inputs.time for r in doc["rows"]]
        errors = sum(1 for r in rows if r.get("status") == "error")
        timed = sum(1 for r in rows if r.get("status", "ok") == "ok" and r.get("seconds"))
        failed |= bool(errors)
        parts.append(f"timing, {_count(timed, 'case')} timed" + (f", {errors} could not run" if errors else ""))
    for path, doc in inputs.pick:
        none, words = pick_verdict(doc)
        failed |= none
        parts.insert(0, words)
    for folder, docs in inputs.histories:
        gates = sorted((d for d in docs if d.get("schema") == "fftgauge-gate/1"), key=lambda d: str(d.get("created")))
        if gates and gates[-1].get("regressed") and gates[-1].get("complete") is not False:
            failed = True
            parts.append(f"{folder}: the newest gate run found a regression")
        else:
            parts.append(f"{folder}: {_count(len(docs), 'stored run')}")
    word = "FAIL" if failed else "INCOMPLETE" if inputs.incomplete else "PASS"
    sentence = "; ".join(parts) + "."
    if inputs.incomplete:
        sentence += f" {_count(len(inputs.incomplete), 'input')} from a run that did not complete."
    return word, sentence


def _correctness(inputs: ReportInputs, images: dict[str, list]) -> list[tuple]:
    from fftgauge.harness.report.check_tables import rows_frame, summary_frame
    from fftgauge.harness.report.findings import bound_eps_units, findings

    blocks: list[tuple] = [("h", 2, "Correctness")]
    for path, doc in inputs.check:
        blocks.append(("p", f"{path}: {machine_line(doc)}"))
        summary = summary_frame(rows_frame(doc["rows"]))
        if summary.empty:
            blocks.append(("p", "no cases were run"))
            continue
        worst_bound = {}
        for r in doc["rows"]:
            if r.get("check") == "accuracy" and r.get("eps_units") is not None:
                key = (r["backend"], r["kind"], r["dtype"], r.get("norm") or "backward")
                if key not in worst_bound or r["eps_units"] > worst_bound[key][0]:
                    worst_bound[key] = (r["eps_units"], bound_eps_units(r))
        lines = []
        for s in summary.to_dict("records"):
            eps, bound = worst_bound.get((s["backend"], s["kind"], s["dtype"], s["norm"]), (None, None))
            lines.append([s["backend"], s["kind"], s["dtype"], s["norm"], str(s["passed"]), str(s["failed"]),
                          str(s["errors"]), str(s["skipped"]), "" if eps is None else f"{eps:.3g}",
                          "" if bound is None else f"{bound:.3g}", s["failed_sizes"], s["diagnoses"]])
        blocks.append(("table", ["backend", "kind", "dtype", "norm", "passed", "failed", "errors", "skipped",
                                 "worst eps", "its bound (eps)", "failed sizes", "diagnoses"], lines, set()))
        found = findings(doc["rows"])
        blocks.append(("h", 3, "Findings" if found else "Findings: none, every case held"))
        blocks += [("p", f.sentence()) for f in found]
    blocks += [("img", p, c) for p, c in images.get("check", [])]
    return blocks


def _timing(inputs: ReportInputs, images: dict[str, list]) -> list[tuple]:
    from fftgauge.harness.report.time_tables import (TIMING_SUMMARY_HEADER, comparison_blocks, comparison_table,
                                                     timing_summary)
    from fftgauge.harness.timing.scaling import scaling_report

    blocks: list[tuple] = [("h", 2, "Timing")]
    tags = run_tags(inputs.time)
    for path, doc in inputs.time:
        blocks.append(("p", (f"[{tags[path]}] " if tags else "") + f"{path}: {machine_line(doc)}"))
    if tags:
        blocks.append(("p", "Two files time the same backend and case: each backend is tagged with its run, "
                            + ", ".join(f"[{tag}] = {path}" for path, tag in tags.items()) + "."))
    rows = merged_time_rows(inputs.time)
    blocks.append(("h", 3, "Planning time, peak memory and rate per backend"))
    blocks.append(("p", "Fastest at: at how many of the sizes that two or more backends timed this one was the "
                        "fastest. Planning is the one-off set-up a backend does before its first transform "
                        "(median and most over the sizes). GFLOP/s counts 5 N log2 N operations per complex "
                        "transform and 2.5 N log2 N per real one, whatever algorithm runs."))
    blocks.append(("table", TIMING_SUMMARY_HEADER, timing_summary(rows), set()))
    for block in comparison_blocks(comparison_table([r for r in rows if not r.get("shape")]), "µs"):
        blocks.append(("h", 3, f"{block['kind']} {block['dtype']}: median time per transform (fastest in bold)"))
        bold = {(i, j) for i, j in enumerate(block["fastest"]) if j is not None}
        blocks.append(("table", block["header"], block["rows"], bold))
        if block.get("legend"):
            blocks.append(("p", block["legend"]))
    from fftgauge.harness.report.shape_tables import shaped_blocks  # shaped cases, one line per shape

    for block in shaped_blocks(rows, "µs"):
        blocks.append(("h", 3, f"{block['title']}: median time of one call (fastest in bold)"))
        blocks.append(("table", block["header"], block["rows"],
                       {(i, j) for i, j in enumerate(block["fastest"]) if j is not None}))
    blocks += [("img", p, c) for p, c in images.get("time", [])]
    blocks.append(("h", 3, "Scaling"))
    for path, doc in inputs.time:
        flat = [r for r in doc["rows"] if not r.get("shape")]  # N alone does not order shaped cases
        blocks.append(("pre", f"{path}\n" + (scaling_report(flat, doc.get("machine")) if flat else
                                              "shaped cases only: no scaling fit over N (see the shaped plot)")))
    return blocks


#: The machine fingerprint's fields in the order shown (others follow, sorted).
MACHINE_FIELDS = ("cpu", "cores", "caches", "machine", "os", "platform", "python")


def machine_blocks(inputs: ReportInputs) -> list[tuple]:
    """Return the section that says where each input was measured: one table of the machine
    fingerprint (CPU, cores, caches, OS, Python, ...) and the library versions per distinct
    machine and versions, with the inputs measured there (a folder by its newest run)."""
    import json

    docs = [(p, d) for p, d in inputs.pick + inputs.time + inputs.check if "(pick's " not in p]
    docs += [(f"{folder} (newest run)", max(ds, key=lambda d: str(d.get("created") or "")))
             for folder, ds in inputs.histories if ds]
    groups: dict[str, list[tuple[str, dict[str, Any]]]] = {}
    for path, doc in docs:
        key = json.dumps([doc.get("machine") or {}, doc.get("versions") or {}], sort_keys=True, default=str)
        groups.setdefault(key, []).append((path, doc))
    blocks: list[tuple] = [("h", 2, "Machine")]
    for members in groups.values():
        doc = members[0][1]
        machine = doc.get("machine") or {}
        blocks.append(("p", "Measured on this machine: " + ", ".join(p for p, _ in members) + "."))
        names = [f for f in MACHINE_FIELDS if f in machine] + sorted(set(machine) - set(MACHINE_FIELDS))
        lines = [[name, ", ".join(f"{k} {v}" for k, v in machine[name].items()) if isinstance(machine[name], dict)
                  else str(machine[name])] for name in names]
        blocks.append(("table", ["machine", "value"], lines or [["(not recorded)", ""]], set()))
        versions = doc.get("versions") or {}
        if versions:
            blocks.append(("table", ["library", "version"],
                           [[k, "not installed" if v is None else str(v)] for k, v in versions.items()], set()))
    return blocks


def build_blocks(inputs: ReportInputs, images: dict[str, list]) -> list[tuple]:
    """Return the report as a list of blocks (:mod:`fftgauge.harness.report.markup`):
    ("verdict", word, sentence), ("h", level, text), ("p", text), ("pre", text),
    ("table", header, rows, bold cells as (row, col) set), ("img", path, caption), ("ul", items).

    The order: the verdict, the pick (when a pick file is given), correctness, timing,
    histories, then the machine fingerprint of every input."""
    word, sentence = verdict(inputs)
    sources = ([p for p, _ in inputs.pick] + [p for p, _ in inputs.time + inputs.check if "(pick's " not in p]
               + [f"{p} (stored runs)" for p, _ in inputs.histories])
    blocks: list[tuple] = [("h", 1, "fftgauge report"), ("verdict", word, sentence),
                           ("p", "Generated " + dt.datetime.now(dt.timezone.utc).strftime("%Y-%m-%d %H:%M UTC")
                            + " from " + ", ".join(sources) + ".")]
    blocks += [("p", f"Note: {note}.") for note in inputs.incomplete]
    if inputs.pick:
        from fftgauge.harness.report.pick_section import pick_blocks

        blocks += pick_blocks(inputs.pick)
    if inputs.check:
        blocks += _correctness(inputs, images)
    if inputs.time:
        blocks += _timing(inputs, images)
    if inputs.histories:
        blocks.append(("h", 2, "History"))
        for folder, docs in inputs.histories:
            blocks.append(("p", f"{folder}: {len(docs)} stored runs"))
        blocks += [("img", p, c) for p, c in images.get("history", [])]
    return blocks + machine_blocks(inputs)
