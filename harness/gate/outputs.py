"""What the gate writes for CI: a Markdown summary, JUnit XML, CSV, the terminal summary, and
the ``fftgauge-gate/1`` JSON (through :mod:`fftgauge.harness.results`).

Every writer takes the gate document (:func:`fftgauge.harness.gate.run.run_gate`) as it stands, complete
or not, so a run stopped half-way still explains itself.

- Markdown (:func:`markdown_summary`): a headline verdict, the run's mode and settings, any
  warnings, then one table row per case with the ratio, its 95% interval, the
  Holm-adjusted p-value and the verdict; regressions in bold. Made for a CI job summary or a
  pull-request comment.
- JUnit XML (:func:`junit_xml`): one ``testsuite`` with one ``testcase`` per case
  (``classname`` ``fftgauge.gate.<backend label>`` with dots and other marks made ``_``,
  ``name`` the case's label); a regression is a
  ``failure`` (type ``slower`` or ``accuracy``), a backend failure an ``error``, a skipped
  case ``skipped``. CI systems that read test reports show each case on its own.
- CSV (:func:`csv_text`): the rows, lists joined by ``;``.

Every string quoted from a backend or a file (labels, SPECs, paths, messages, notes) is escaped
for the format it goes into: Markdown by :func:`fftgauge.harness.report.markup.escape_markdown`
(``<img onerror=...>`` is shown, not run; a ``|`` does not split a table cell), XML by
ElementTree with the characters XML cannot hold replaced. Messages longer than
:data:`SHORT_MESSAGE_CHARS` are cut in terminal lines (the JSON keeps them whole).
"""

from __future__ import annotations

import math
import re
import xml.etree.ElementTree as ET
from typing import Any

from fftgauge.harness.errors import UsageError

_MODE_WORDS = {"ab": "A/B run", "referenced": "A/B ratio against stored A/B ratios", "stored": "against stored results",
               "record": "record only"}


#: Longest message a terminal line or a table cell quotes (the JSON keeps the whole of it).
SHORT_MESSAGE_CHARS = 160


def short(text: Any, limit: int = SHORT_MESSAGE_CHARS) -> str:
    """Return ``text`` on one line, cut to ``limit`` characters with an ellipsis when longer."""
    one = " ".join(str(text or "").split())
    return one if len(one) <= limit else one[: limit - 1].rstrip() + "…"


def _case_label(row: dict[str, Any]) -> str:
    norm = row.get("norm") or "backward"
    if row.get("shape"):  # a shaped case: its shape, axes and layout say more than N
        from fftgauge.harness.shapes.fields import shape_text
        return f"{row['kind']} {row['dtype']} {shape_text(row)}" + ("" if norm == "backward" else f" norm={norm}")
    return f"{row['kind']} {row['dtype']} n={row['n']}" + ("" if norm == "backward" else f" norm={norm}")


def _num(value: Any, digits: int = 4) -> str:
    if value is None or (isinstance(value, float) and math.isnan(value)):
        return "–"
    return f"{value:.{digits}g}" if abs(value) < 1e4 else f"{value:.3e}"


def _p(value: Any) -> str:
    if value is None or (isinstance(value, float) and math.isnan(value)):
        return "–"
    return "<1e-99" if value < 1e-99 else f"{value:.2g}"


def _percent(ratio: Any) -> str:
    if ratio is None or (isinstance(ratio, float) and math.isnan(ratio)):
        return ""
    change = (ratio - 1.0) * 100.0
    return f"{change:+.1f}%"


def is_inconclusive(row: dict[str, Any]) -> bool:
    """Return True when a row is ``same`` but could not rule out a slowdown beyond the threshold
    (its ``inconclusive`` field; rows of files older than that field: ``conclusive`` false)."""
    if row.get("status") != "ok" or row.get("verdict") != "same":
        return False
    if "inconclusive" in row:
        return bool(row["inconclusive"])
    return row.get("conclusive") is False


def counts(doc: dict[str, Any]) -> dict[str, int]:
    """Return how many rows have each verdict, and how many were skipped, errored or left
    undecided; ``inconclusive`` counts the ``same`` rows that are inconclusive (:func:`is_inconclusive`)."""
    out = {"slower": 0, "faster": 0, "same": 0, "accuracy": 0, "skip": 0, "error": 0, "incomplete": 0,
           "recorded": 0, "inconclusive": 0}
    for row in doc.get("rows", []):
        status = row.get("status")
        if status in ("skip", "error", "incomplete"):
            out[status] += 1
        elif row.get("verdict") in out:
            out[row["verdict"]] += 1
            out["inconclusive"] += is_inconclusive(row)
        else:
            out["recorded"] += 1
    return out


def headline(doc: dict[str, Any]) -> str:
    """Return the one-line verdict of a gate run, e.g. ``FAIL: 2 slower of 20 case(s)``.

    It starts with ``FAIL``, ``INCOMPLETE``, ``INCONCLUSIVE``, ``RECORDED`` or ``PASS``
    (:func:`fftgauge.harness.gate.decision.outcome_of`) and never leaves out inconclusive
    cases: ``INCONCLUSIVE`` when one is and nothing regressed, and a count beside the others.
    """
    c = counts(doc)
    compared = c["slower"] + c["faster"] + c["same"] + c["accuracy"]
    outcome = doc.get("outcome")
    undecided = f", {c['inconclusive']} inconclusive" if c["inconclusive"] else ""
    if outcome == "regression":
        parts = [f"{c[k]} {k if k != 'accuracy' else 'accuracy regression(s)'}" for k in ("slower", "accuracy") if c[k]]
        return f"FAIL: {' and '.join(parts)} of {compared} case(s){undecided}"
    if outcome == "error":
        return f"FAIL: {c['error']} case(s) could not be measured or checked (backend failure){undecided}"
    if outcome == "incomplete":
        why = f": {doc['error']}" if doc.get("error") else ""
        done = f" ({compared} of {len(doc.get('rows') or [])} case(s) decided{undecided})"
        return f"INCOMPLETE: the run stopped before every case was decided{why}{done}"
    if doc.get("mode") == "record":
        return f"RECORDED: {c['recorded']} case(s) measured, nothing compared"
    faster = f", {c['faster']} faster" if c["faster"] else ""
    if outcome == "inconclusive":
        threshold = (doc.get("threshold") or 0.0) * 100
        policy = doc.get("inconclusive_policy") or "pass"
        return (f"INCONCLUSIVE: {c['inconclusive']} of {compared} case(s) could not rule out a slowdown beyond "
                f"{threshold:g}%; none found slower{faster} (--inconclusive {policy}: exit "
                f"{1 if policy == 'fail' else 0})")
    return f"PASS: no regression in {compared} case(s){faster}"


def _plain(text: Any) -> str:
    return str(text)


def _md(text: Any) -> str:
    """Return a string from a backend or a file escaped for a Markdown line or table cell."""
    from fftgauge.harness.report.markup import escape_markdown

    return escape_markdown(text, block=False)


def _settings_line(doc: dict[str, Any], quote: Any = _plain) -> str:
    """Return the run's mode and settings on one line, every quoted string passed through ``quote``."""
    mode = doc.get("mode")
    parts = [_MODE_WORDS.get(mode, str(mode))]
    if mode in ("ab", "referenced"):
        old, new = doc.get("old") or {}, doc.get("new") or {}
        parts[0] += f": new {quote(new.get('spec', '?'))} against old {quote(old.get('spec', '?'))}"
    if mode == "referenced":
        base = doc.get("baseline") or {}
        parts[0] += f", {len(base.get('runs') or [])} stored run(s) from {quote(base.get('path', '?'))}"
    elif mode == "stored":
        base = doc.get("baseline") or {}
        parts[0] += f": {len(base.get('runs') or [])} stored run(s) from {quote(base.get('path', '?'))}"
    threshold = doc.get("threshold")
    if threshold is not None and mode != "record":
        parts.append(f"threshold {threshold * 100:g}%")
        parts.append(f"Holm-corrected at alpha {doc.get('alpha', 0.05):g}")
    counting = doc.get("counting") if doc.get("metric") == "instructions" else None
    if counting:
        parts.append(f"metric instructions per transform (cachegrind, {counting.get('repeats')} repeat(s) of K and "
                     f"2K transforms per side)")
        if doc.get("sampling_seconds") is not None:
            parts.append(f"{doc['sampling_seconds']:.1f} s of counting")
    elif doc.get("sampling_seconds") is not None:
        parts.append(f"{doc['sampling_seconds']:.1f} s of sampling (budget {doc.get('budget_seconds', 0):g} s)")
    y = doc.get("yardstick")
    if y:
        parts.append(yardstick_text(y))
    if doc.get("commit"):
        parts.append(f"commit {quote(doc['commit'])}")
    return " · ".join(parts)


def yardstick_text(y: dict[str, Any]) -> str:
    """Return the yardstick's figure in the statistic its percentage is computed from, e.g.
    ``yardstick p10 0.889 ms (-2.1% against the baseline's p10 0.908 ms: ...)``; the median when
    nothing was compared."""
    statistic = y.get("ratio_statistic") or "median"
    key = "seconds_p10" if statistic == "p10" and y.get("seconds_p10") is not None else "seconds"
    name = "p10" if key == "seconds_p10" else "median"
    text = f"yardstick {name} {y[key] * 1e3:.3f} ms"
    if y.get("ratio"):
        base = f" {name} {y['baseline_seconds'] * 1e3:.3f} ms" if y.get("baseline_seconds") else ""
        text += (f" ({_percent(y['ratio'])} against the baseline's{base}: the machine's speed change, "
                 f"corrected for)")
    return text


def _verdict_word(row: dict[str, Any]) -> str:
    """Return the row's verdict as shown: ``same (inconclusive)`` where :func:`is_inconclusive`;
    an accuracy regression names its timing verdict apart (``accuracy; timing same``)."""
    verdict = row.get("verdict")
    if verdict == "accuracy":
        timing = row.get("timing_verdict")
        return "accuracy" + (f"; timing {timing}" if timing else "")
    return str(verdict) + (" (inconclusive)" if is_inconclusive(row) else "")


def _verdict_cell(row: dict[str, Any]) -> str:
    status = row.get("status")
    if status != "ok":
        return status or "?"
    verdict = row.get("verdict")
    if verdict is None:
        return "recorded"
    if verdict in ("slower", "accuracy"):
        return f"**{verdict}**"
    return _verdict_word(row)


def markdown_summary(doc: dict[str, Any]) -> str:
    """Return the Markdown summary of a gate document (see the module docstring)."""
    lines = [f"## fftgauge gate: {_md(headline(doc))}", "", _settings_line(doc, _md), ""]
    for warning in doc.get("warnings") or []:
        lines += [f"> **Warning:** {_md(warning)}", ""]
    rows = doc.get("rows") or []
    failing = [r for r in rows if r.get("verdict") in ("slower", "accuracy")]
    if failing:
        lines.append("Regressions: " + ", ".join(f"{_md(r['backend'])} {_case_label(r)} ({r['verdict']}"
                                                 + (f", {_percent(r['ratio'])}" if r.get("verdict") == "slower" else "")
                                                 + ")" for r in failing))
        lines.append("")
    if doc.get("mode") == "record" and doc.get("metric") == "instructions":
        lines += ["| backend | case | instructions per transform | spread | repeats |", "|---|---|---:|---:|---:|"]
        for r in rows:
            lines.append(f"| {_md(r['backend'])} | {_case_label(r)} | {_count(r.get('instructions'))} | {_spread(r)} | "
                         f"{r.get('count_repeats') or 0} |")
    elif doc.get("mode") == "record":
        header = "| backend | case | median time | 95% interval | samples |"
        lines += [header, "|---|---|---:|---|---:|"]
        for r in rows:
            lines.append(f"| {_md(r['backend'])} | {_case_label(r)} | {_num(r.get('seconds'))} s | "
                         f"{_num(r.get('seconds_low'))} – {_num(r.get('seconds_high'))} | {r.get('samples', 0)} |")
    elif rows:
        ratio_name = {"ab": "new / old", "referenced": "(new / old) now / stored"}.get(doc.get("mode"),
                                                                                     "now / baseline")
        with_acc = any(r.get("eps_units") is not None or r.get("battery_failures") is not None for r in rows)
        header = f"| backend | case | {ratio_name} | change | 95% interval | p (Holm) | verdict |"
        rule = "|---|---|---:|---:|---|---:|---|"
        counted = any(r.get("metric", "time") != "time" for r in rows)
        if counted:
            header += " metric | instructions new / old | spread |"
            rule += "---|---:|---:|"
        if with_acc:
            header += " error (eps) | bound (eps) |"
            rule += "---:|---:|"
        lines += [header, rule]
        for r in rows:
            line = (f"| {_md(r['backend'])} | {_case_label(r)} | {_num(r.get('ratio'))} | {_percent(r.get('ratio'))} | "
                    f"{_num(r.get('ratio_low'))} – {_num(r.get('ratio_high'))} | {_p(r.get('p_holm'))} | "
                    f"{_verdict_cell(r)} |")
            if counted:
                line += (f" {r.get('metric', 'time')} | {_count(r.get('instructions'))} / "
                         f"{_count(r.get('baseline_instructions'))} | {_spread(r)} |")
            if with_acc:
                eps = _num(r.get("eps_units"), 3)
                if r.get("baseline_eps_units") is not None:
                    eps += f" (was {_num(r['baseline_eps_units'], 3)})"
                line += f" {eps} | {_num(r.get('bound_eps_units'), 3)} |"
            lines.append(line)
    messages = [(r, r["message"]) for r in rows if r.get("message")]
    if messages:
        lines += ["", "Notes on cases:", ""]
        lines += [f"- {_md(r['backend'])} {_case_label(r)} ({_md(r.get('status'))}): {_md(short(m, 400))}"
                  for r, m in messages]
    notes = doc.get("notes") or []
    if notes:
        lines += ["", "Run notes:", ""] + [f"- {_md(n)}" for n in notes]
    lines += ["", f"<sub>fftgauge {doc.get('versions', {}).get('fftgauge', '?')} · schema {doc.get('schema')} · "
                  f"created {doc.get('created')} · seed {doc.get('seed')}</sub>", ""]
    return "\n".join(lines)


def _count(value: Any) -> str:
    """Return an instruction count per transform with thousands separators, e.g. ``42,358``, or ``–``."""
    if value is None or (isinstance(value, float) and math.isnan(value)):
        return "–"
    return f"{value:,.0f}"


def _spread(row: dict[str, Any]) -> str:
    """Return the larger of the two sides' relative count spreads, e.g. ``0.002%``, or ``–``."""
    values = [v for v in (row.get("instructions_spread"), row.get("baseline_instructions_spread")) if v is not None]
    return f"{max(values) * 100:.2g}%" if values else "–"


def _failure_text(row: dict[str, Any], doc: dict[str, Any]) -> tuple[str, str]:
    if row.get("verdict") == "accuracy":
        return "accuracy", row.get("message") or "accuracy regression"
    threshold = doc.get("threshold") or 0.0
    what = " in instructions per transform" if row.get("metric") == "instructions" else ""
    return "slower", (f"{_percent(row['ratio'])}{what} ({row['ratio']:.4g}x, 95% interval {row['ratio_low']:.4g}-"
                      f"{row['ratio_high']:.4g}, Holm p {_p(row.get('p_holm'))}), above the "
                      f"{threshold * 100:g}% threshold")


#: Characters XML 1.0 cannot hold (C0 controls other than tab, newline, carriage return; surrogates; U+FFFE/F).
_XML_INVALID = re.compile("[\x00-\x08\x0b\x0c\x0e-\x1f\ud800-\udfff\ufffe\uffff]")


def _xml(text: Any) -> str:
    """Return a string from a backend or a file fit for an XML attribute or text (ElementTree
    escapes ``& < > "``; characters XML cannot hold become U+FFFD)."""
    return _XML_INVALID.sub("\ufffd", str(text))


def junit_classname(backend: str) -> str:
    """Return the JUnit ``classname`` of a backend's cases: ``fftgauge.gate.<label>`` with every
    character of the label other than letters, digits, ``_`` and ``-`` made ``_`` (a ``.`` would
    split it into packages in CI test views: ``mine.py:fft`` -> ``fftgauge.gate.mine_py_fft``)."""
    return "fftgauge.gate." + re.sub(r"[^A-Za-z0-9_-]", "_", str(backend))


def junit_xml(doc: dict[str, Any]) -> str:
    """Return the JUnit XML report of a gate document (see the module docstring)."""
    rows = doc.get("rows") or []
    c = counts(doc)
    failures = c["slower"] + c["accuracy"]
    errors = c["error"] + c["incomplete"]
    total_seconds = sum(r.get("sampling_seconds") or 0.0 for r in rows)
    attrs = {"name": "fftgauge gate", "tests": str(len(rows)), "failures": str(failures), "errors": str(errors),
             "skipped": str(c["skip"]), "time": f"{total_seconds:.3f}"}
    root = ET.Element("testsuites", attrs)
    suite = ET.SubElement(root, "testsuite", {**attrs, "timestamp": str(doc.get("created", ""))})
    props = ET.SubElement(suite, "properties")
    for key in ("mode", "metric", "outcome", "complete", "stopped_by", "threshold", "alpha", "seed", "commit"):
        if doc.get(key) is not None:
            ET.SubElement(props, "property", {"name": key, "value": _xml(doc[key])})
    for row in rows:
        case = ET.SubElement(suite, "testcase", {"classname": junit_classname(row["backend"]),
                                                 "name": _case_label(row),
                                                 "time": f"{row.get('sampling_seconds') or 0.0:.3f}"})
        status = row.get("status")
        if row.get("verdict") in ("slower", "accuracy"):
            kind, text = _failure_text(row, doc)
            body = text + (f"\n{row['accuracy_detail']}" if row.get("accuracy_detail") else "")
            ET.SubElement(case, "failure", {"type": kind, "message": _xml(text)}).text = _xml(body)
        elif status == "error" or status == "incomplete":
            text = _xml(row.get("message") or status)
            ET.SubElement(case, "error", {"type": status, "message": text}).text = text
        elif status == "skip":
            ET.SubElement(case, "skipped", {"message": _xml(row.get("message") or "skipped")})
        elif row.get("ratio") is not None and not (isinstance(row["ratio"], float) and math.isnan(row["ratio"])):
            ET.SubElement(case, "system-out").text = (f"ratio {row['ratio']:.4g} (95% {row['ratio_low']:.4g}-"
                                                      f"{row['ratio_high']:.4g}), verdict {_verdict_word(row)}")
    ET.indent(root)
    return '<?xml version="1.0" encoding="utf-8"?>\n' + ET.tostring(root, encoding="unicode") + "\n"


def _csv_cell(value: Any) -> Any:
    if value is None or (isinstance(value, float) and math.isnan(value)):
        return ""
    return ";".join(map(str, value)) if isinstance(value, (list, tuple)) else value


def csv_text(doc: dict[str, Any]) -> str:
    """Return the rows of a gate document as CSV text: one column per field in the rows' order
    (the contract's first), lists joined by ``;``, missing values empty."""
    import csv
    import io

    columns = ["backend", "kind", "dtype", "n", "ratio", "ratio_low", "ratio_high", "p_value", "verdict"]
    rows = doc.get("rows") or []
    for r in rows:
        columns += [k for k in r if k not in columns]
    out = io.StringIO()
    writer = csv.DictWriter(out, fieldnames=columns, lineterminator="\n")
    writer.writeheader()
    for r in rows:
        writer.writerow({k: _csv_cell(v) for k, v in r.items()})
    return out.getvalue()


def summary_text(doc: dict[str, Any]) -> str:
    """Return the terminal summary: the headline, the settings and one line per case."""
    lines = [headline(doc), _settings_line(doc)]
    for warning in doc.get("warnings") or []:
        lines.append(f"WARNING: {warning}")
    for r in doc.get("rows") or []:
        if r.get("status") != "ok":
            lines.append(f"  {r['backend']:<22} {_case_label(r):<26} {r.get('status')}: {short(r.get('message', ''))}")
        elif r.get("verdict") is None and r.get("instructions") is not None:
            lines.append(f"  {r['backend']:<22} {_case_label(r):<26} {_count(r.get('instructions'))} instructions "
                         f"per transform (spread {_spread(r)})")
        elif r.get("verdict") is None:
            lines.append(f"  {r['backend']:<22} {_case_label(r):<26} median {_num(r.get('seconds'))} s "
                         f"({r.get('samples', 0)} samples)")
        else:
            lines.append(f"  {r['backend']:<22} {_case_label(r):<26} {_num(r.get('ratio')):>7} "
                         f"[{_num(r.get('ratio_low'))}, {_num(r.get('ratio_high'))}] {_percent(r.get('ratio')):>7} "
                         f"p(Holm) {_p(r.get('p_holm')):>7}  {_verdict_word(r)}"
                         + (f"  ({_count(r.get('instructions'))} vs {_count(r.get('baseline_instructions'))} "
                            f"instructions, spread {_spread(r)})" if r.get("instructions") is not None else "")
                         + (f"  [{short(r['message'])}]" if r.get("message") else ""))
    return "\n".join(lines)


def write_outputs(doc: dict[str, Any], markdown: str | None = None, junit: str | None = None,
                  json_path: str | None = None, csv: str | None = None) -> list[str]:
    """Write each output asked for; return the paths written (``standard output`` for ``-``).

    Every output is attempted even when an earlier one cannot be written.

    Raises
    ------
    UsageError
        After trying all of them, for the first path that could not be written.
    """
    from fftgauge.harness.results import dumps, write_rendered

    return write_rendered(doc, [(markdown, markdown_summary), (junit, junit_xml), (json_path, dumps), (csv, csv_text)])
