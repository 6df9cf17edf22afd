"""What ``fftgauge check`` writes for CI beside its JSON: JUnit XML, a Markdown summary for a
pull-request comment, and CSV.

Every writer takes the ``fftgauge-check/1`` document as it stands, complete or not (a run
stopped by a signal has ``complete: false``), so an interrupted run still explains itself.

- JUnit XML (:func:`junit_xml`): one ``testsuite`` per backend, one ``testcase`` per
  backend x kind x precision (x norm) x check, its sizes inside, and one per shaped case x
  check. ``classname`` is ``fftgauge.check.<label>`` (the backend's label, never a path),
  ``name`` ``<kind> <dtype> <check>``, for a shaped case ``<kind> <dtype> <shape> axes
  (<axes>) <layout> <check>`` (``fftn float64 12x12x12 axes (0,1,2) C accuracy``); sizes and
  shaped cases are named the same way in the messages and the Markdown. A case with a failing size has a ``failure`` whose message lists the failing sizes
  and the diagnosis in words; one with only ``error`` sizes an ``error``; one whose every size
  was skipped ``skipped``. The body lists each failing or erroring size with its message.
- Markdown (:func:`markdown_summary`): the verdict first, then the findings in words (one per
  cause, :mod:`fftgauge.harness.report.findings`) and the notes on user limits, then a compact
  table (one line per backend x kind x precision).
- CSV (:func:`csv_text`): every row, the contract's columns first.
"""

from __future__ import annotations

import os
import xml.etree.ElementTree as ET
from typing import Any, Iterable, Mapping

from fftgauge.harness.report.markup import escape_markdown, markdown_table

#: The ``check`` of a row that stands for a whole case the backend does not claim.
WHOLE_CASE_CHECK = "all"

#: At most this many findings are written into the Markdown (a pull-request comment has a size
#: limit); one line says how many more there are and where they are.
MARKDOWN_FINDINGS = 40


def junit_class_name(backend: str) -> str:
    """Return the JUnit ``classname`` of a backend: ``fftgauge.check.<label>``, with a path or a
    ``.py`` left out of an old label (``dir/my_fft.py:fft`` -> ``my_fft:fft``) and dots made ``_``
    (CI servers read dots as package levels)."""
    label = str(backend)
    head, sep, attr = label.rpartition(":")
    path = head if sep else label
    if "/" in path or "\\" in path or path.endswith(".py"):
        path = os.path.basename(path.replace("\\", "/"))
        path = path[:-3] if path.endswith(".py") else path
        label = f"{path}:{attr}" if sep else path
    return "fftgauge.check." + label.replace(".", "_")


def _norm(row: Mapping[str, Any]) -> str:
    return row.get("norm") or "backward"


def junit_case_name(kind: str, dtype: str, norm: str, check: str, shape: str = "") -> str:
    """Return a test case's name: ``fft float64 accuracy``, for a shaped case (``shape``, its
    :func:`~fftgauge.harness.report.findings.shape_words`) ``fftn float64 12x12x12 axes (0,1,2)
    C accuracy`` (``norm=ortho`` added when not backward)."""
    return " ".join([kind, dtype] + ([shape] if shape else []) + [check]) + (
        "" if norm == "backward" else f" norm={norm}")


def grouped_cases(doc: Mapping[str, Any]) -> dict[tuple[str, str, str, str, str, str], list[Mapping[str, Any]]]:
    """Return the rows by (backend, kind, dtype, norm, check, shape), in the document's order:
    ``shape`` is ``""`` for the 1-D rows (their sizes in one group) and a shaped case's
    :func:`~fftgauge.harness.report.findings.shape_words` (one group per shaped case). A row for
    a whole unclaimed case (check ``all``) counts for every check the run asked for (of its
    battery: the request's ``shape_checks`` for a shaped one)."""
    from fftgauge.harness.report.findings import shape_words

    rows = list(doc.get("rows") or [])
    request = doc.get("request") or {}
    seen = list(dict.fromkeys(r["check"] for r in rows if r.get("check") != WHOLE_CASE_CHECK))
    checks = list(request.get("checks") or []) or seen
    shape_checks = list(request.get("shape_checks") or []) or checks
    groups: dict[tuple[str, str, str, str, str, str], list[Mapping[str, Any]]] = {}
    for r in rows:
        shape = shape_words(r)
        names = (shape_checks if shape else checks) if r.get("check") == WHOLE_CASE_CHECK else [r["check"]]
        for name in names:
            groups.setdefault((r["backend"], r["kind"], r["dtype"], _norm(r), name, shape), []).append(r)
    return groups


def _sizes(rows: Iterable[Mapping[str, Any]]) -> str:
    from fftgauge.harness.report.check_tables import compress_sizes

    return compress_sizes([r["n"] for r in rows], limit=10**6)


def _at(rows: Iterable[Mapping[str, Any]]) -> str:
    """Return where rows were seen: ``n = 8, 16`` for 1-D rows, the shaped case's shape, axes
    and layout (``12x12x12 axes (0,1,2) C``) for rows of shaped cases."""
    from fftgauge.harness.report.findings import shape_words

    rows = list(rows)
    shapes = list(dict.fromkeys(shape_words(r) for r in rows))
    if shapes and all(shapes):
        return "; ".join(shapes)
    return f"n = {_sizes(rows)}"


def _meaning(code: str | None) -> str:
    from fftgauge.harness.report.findings import DIAGNOSIS_MEANINGS

    if not code:
        return "wrong answer"
    meaning = DIAGNOSIS_MEANINGS.get(code)
    return f"{code}: {meaning}" if meaning else code


def failure_message(rows: list[Mapping[str, Any]]) -> str:
    """Return the one-line message of a test case with failing sizes: per diagnosis, the sizes
    and the diagnosis in words, then the worst failing row's own message."""
    by_code: dict[str | None, list[Mapping[str, Any]]] = {}
    for r in rows:
        by_code.setdefault(r.get("diagnosis"), []).append(r)
    parts = [f"{_at(rs)} ({_meaning(code)})" for code, rs in by_code.items()]
    worst = max(rows, key=lambda r: r.get("eps_units") or 0.0)
    return f"fails at {'; '.join(parts)}. Worst, {_at([worst])}: {worst.get('message') or 'no message'}"


def _detail(rows: list[Mapping[str, Any]]) -> str:
    return "\n".join(f"{_at([r])}: {r['status']}" + (f" ({r['diagnosis']})" if r.get("diagnosis") else "")
                     + f": {r.get('message') or ''}" for r in rows)


def _case_element(suite: ET.Element, key: tuple[str, str, str, str, str, str],
                  rows: list[Mapping[str, Any]]) -> str:
    """Add one ``testcase`` to ``suite``; return its outcome (pass, fail, error, skip)."""
    backend, kind, dtype, norm, check, shape = key
    case = ET.SubElement(suite, "testcase", {"classname": junit_class_name(backend),
                                             "name": junit_case_name(kind, dtype, norm, check, shape), "time": "0"})
    failing = [r for r in rows if r.get("status") == "fail"]
    errors = [r for r in rows if r.get("status") == "error"]
    skipped = [r for r in rows if r.get("status") == "skip"]
    if failing:
        message = failure_message(failing)
        if errors:
            message += f" (and {_at(errors)} could not run)"
        codes = sorted({r.get("diagnosis") or "fail" for r in failing})
        ET.SubElement(case, "failure", {"type": ",".join(codes), "message": message}).text = _detail(failing + errors)
        outcome = "fail"
    elif errors:
        worst = errors[0]
        message = f"could not run at {_at(errors)}: {worst.get('message') or 'error'}"
        ET.SubElement(case, "error", {"type": "error", "message": message}).text = _detail(errors)
        outcome = "error"
    elif skipped and len(skipped) == len(rows):
        reasons = list(dict.fromkeys(str(r.get("message") or "skipped") for r in skipped))
        ET.SubElement(case, "skipped", {"message": f"{_at(skipped)}: {'; '.join(reasons)}"[:2000]})
        return "skip"
    else:
        outcome = "pass"
    passed = [r for r in rows if r.get("status") == "pass"]
    lines = []
    if passed:
        worst = max(passed, key=lambda r: r.get("eps_units") or 0.0)
        source = worst.get("limit_source")
        lines.append(f"passes at {_at(passed)}; worst {_at([worst])}: {worst.get('message') or ''}"
                     + (f" (limit {worst['limit']:.3g}, {source})" if worst.get("limit") is not None and source
                        else ""))
    if skipped:
        lines.append(f"skipped at {_at(skipped)}: {skipped[0].get('message') or ''}")
    if lines:
        ET.SubElement(case, "system-out").text = "\n".join(lines)
    return outcome


def junit_xml(doc: Mapping[str, Any]) -> str:
    """Return the JUnit XML report of a check document (see the module docstring)."""
    groups = grouped_cases(doc)
    root = ET.Element("testsuites", {"name": "fftgauge check"})
    suites: dict[str, tuple[ET.Element, dict[str, int]]] = {}
    for key, rows in groups.items():
        backend = key[0]
        if backend not in suites:
            suite = ET.SubElement(root, "testsuite", {"name": f"fftgauge check: {backend}"})
            props = ET.SubElement(suite, "properties")
            for name, value in (("schema", doc.get("schema")), ("seed", doc.get("seed")),
                                ("complete", str(doc.get("complete", True)).lower()),
                                ("fftgauge", (doc.get("versions") or {}).get("fftgauge"))):
                if value is not None:
                    ET.SubElement(props, "property", {"name": name, "value": str(value)})
            suites[backend] = (suite, {"pass": 0, "fail": 0, "error": 0, "skip": 0})
        suite, tally = suites[backend]
        tally[_case_element(suite, key, rows)] += 1
    totals = {"tests": 0, "failures": 0, "errors": 0, "skipped": 0}
    for suite, tally in suites.values():
        counts = {"tests": sum(tally.values()), "failures": tally["fail"], "errors": tally["error"],
                  "skipped": tally["skip"]}
        for name, value in counts.items():
            suite.set(name, str(value))
            totals[name] += value
        suite.set("time", "0")
        suite.set("timestamp", str(doc.get("created") or "").rstrip("Z")[:19])
        if doc.get("complete") is False:
            ET.SubElement(suite, "system-err").text = ("the run was stopped before every case ran "
                                                       "(complete: false): cases not reached are not listed")
    for name, value in totals.items():
        root.set(name, str(value))
    root.set("time", "0")
    ET.indent(root)
    return '<?xml version="1.0" encoding="utf-8"?>\n' + ET.tostring(root, encoding="unicode") + "\n"


def verdict(doc: Mapping[str, Any]) -> tuple[str, str]:
    """Return the run's verdict word (``PASS``, ``FAIL``, ``INCOMPLETE``) and its sentence."""
    from fftgauge.harness.report.findings import case_counts

    rows = list(doc.get("rows") or [])
    c = case_counts(rows)
    total = sum(c.values())
    bad = c["wrong"] + c["error"]
    tail = f"{c['passed']} of {total} case(s) passed, {c['wrong']} wrong, {c['error']} could not run, " \
           f"{c['skipped']} skipped"
    if doc.get("complete") is False:
        return "INCOMPLETE", f"the run was stopped before every case ran; so far {tail}"
    if bad:
        return "FAIL", tail
    if not total:
        return "INCOMPLETE", "no case was run"
    hidden = sum(1 for r in rows if r.get("status") == "pass" and r.get("limit_source") == "user"
                 and r.get("value") is not None and r.get("bound_limit") is not None and r["value"] > r["bound_limit"])
    if hidden:
        return "PASS", (f"every case held under the user's limits, but the built-in bounds fail {hidden} row(s) "
                        f"(see the findings): {tail}")
    return "PASS", f"every case held: {tail}"


def _settings_line(doc: Mapping[str, Any]) -> str:
    req = doc.get("request") or {}
    backends = list((doc.get("backends") or {}).keys()) or sorted({r["backend"] for r in doc.get("rows") or []})
    sizes = req.get("sizes") or []
    parts = [f"backends {', '.join(backends)}"]
    if req.get("kinds"):
        parts.append(f"kinds {', '.join(req['kinds'])}")
    if req.get("dtypes"):
        parts.append(f"precisions {', '.join(req['dtypes'])}")
    if sizes:
        parts.append(f"{len(sizes)} sizes ({_sizes({'n': n} for n in sizes)})")
    parts.append(f"seed {doc.get('seed')}")
    limits = req.get("limits") or {}
    if limits:
        parts.append("limits " + ", ".join(f"{k} {v.get('criterion')}" for k, v in limits.items()))
    else:
        parts.append("limits: the built-in bounds")
    return " · ".join(parts)


def _panel_lines(doc: Mapping[str, Any]) -> tuple[list[str], list[list[str]], set[tuple[int, int]]]:
    """Return the compact table: one line per backend x kind x dtype (x norm)."""
    groups = grouped_cases(doc)
    limits = (doc.get("request") or {}).get("limits") or {}
    user = limits.get("accuracy") or limits.get(WHOLE_CASE_CHECK)
    limit_words = {"bound": "built-in bound", "user": f"yours: {user.get('criterion')}" if user else "yours"}
    by_check: dict[tuple[str, str, str, str, str], list[Mapping[str, Any]]] = {}
    for (backend, kind, dtype, norm, check, _), rows in groups.items():  # a panel's shaped cases together
        by_check.setdefault((backend, kind, dtype, norm, check), []).extend(rows)
    panels: dict[tuple[str, str, str, str], dict[str, Any]] = {}
    for (backend, kind, dtype, norm, check), rows in by_check.items():
        p = panels.setdefault((backend, kind, dtype, norm), {"pass": 0, "fail": [], "error": [], "skip": 0,
                                                              "eps": None, "limit": None})
        statuses = {r.get("status") for r in rows}
        if "fail" in statuses:
            p["fail"].append(check)
        elif "error" in statuses:
            p["error"].append(check)
        elif statuses == {"skip"}:
            p["skip"] += 1
        else:
            p["pass"] += 1
        if check == "accuracy":
            eps = [r["eps_units"] for r in rows if r.get("eps_units") is not None]
            if eps:
                p["eps"] = max(eps)
            sources = sorted({r.get("limit_source") for r in rows if r.get("limit_source")})
            p["limit"] = ", ".join(limit_words.get(s, s) for s in sources) or None
    with_norm = any(key[3] != "backward" for key in panels)
    header = ["backend", "kind", "precision"] + (["norm"] if with_norm else []) + [
        "checks passed", "failing checks", "could not run", "skipped", "worst accuracy (eps)", "accuracy limit"]
    lines, bold = [], set()
    for i, ((backend, kind, dtype, norm), p) in enumerate(panels.items()):
        line = [backend, kind, dtype] + ([norm] if with_norm else []) + [
            str(p["pass"]), ", ".join(p["fail"]) or "–", ", ".join(p["error"]) or "–", str(p["skip"]),
            "–" if p["eps"] is None else f"{p['eps']:.3g}", p["limit"] or "–"]
        if p["fail"]:
            bold.add((i, header.index("failing checks")))
        lines.append(line)
    return header, lines, bold


def markdown_summary(doc: Mapping[str, Any]) -> str:
    """Return the Markdown summary of a check document (see the module docstring); every text
    from a backend or a file is escaped (:func:`fftgauge.harness.report.markup.escape_markdown`)."""
    from fftgauge.harness.battery.criteria import limit_notes
    from fftgauge.harness.report.findings import findings

    word, sentence = verdict(doc)
    rows = list(doc.get("rows") or [])
    out = [f"## fftgauge check: {word}", "", f"**{word}**: {escape_markdown(sentence, block=False)}", "",
           escape_markdown(_settings_line(doc))]
    found = findings(rows)
    notes = limit_notes(rows, (doc.get("request") or {}).get("limits"))
    if found or notes:
        out += ["", "### Findings", ""]
        out += [f"- {escape_markdown(f.sentence(), block=False)}" for f in found[:MARKDOWN_FINDINGS]]
        if len(found) > MARKDOWN_FINDINGS:
            out.append(f"- {len(found) - MARKDOWN_FINDINGS} more finding(s) (distinct causes) not listed here; "
                       f"every row is in the JSON results and the CSV")
        out += [f"- {escape_markdown(note, block=False)}" for note in notes]
    header, lines, bold = _panel_lines(doc)
    if lines:
        out += ["", "### Results", "", markdown_table(header, lines, bold)]
    versions = doc.get("versions") or {}
    out += ["", f"<sub>fftgauge {escape_markdown(versions.get('fftgauge', '?'), block=False)} · schema "
                f"{escape_markdown(doc.get('schema'), block=False)} · created "
                f"{escape_markdown(doc.get('created'), block=False)}</sub>", ""]
    return "\n".join(out)


def csv_text(doc: Mapping[str, Any]) -> str:
    """Return every row of a check document as CSV text, the contract's columns first."""
    from fftgauge.harness.report.check_tables import rows_frame

    return rows_frame(doc.get("rows") or []).to_csv(index=False)


#: The outputs this module writes: option name -> renderer.
RENDERERS = {"junit": junit_xml, "markdown": markdown_summary, "csv": csv_text}


def write_check_outputs(doc: Mapping[str, Any], junit: str | None = None, markdown: str | None = None,
                        csv: str | None = None) -> list[str]:
    """Write each output asked for (``-``: standard output) and return what was written.

    Every output is attempted even when an earlier one cannot be written.

    Raises
    ------
    UsageError
        After trying all of them, for the first path that could not be written.
    """
    from fftgauge.harness.results import write_rendered

    return write_rendered(doc, ((junit, junit_xml), (markdown, markdown_summary), (csv, csv_text)))


def validate_outputs(paths: Mapping[str, str | None]) -> str | None:
    """Check the outputs asked for (option -> path, None when not asked) before a run starts, and
    return the option that writes to standard output (``-``), or None.

    Raises
    ------
    UsageError
        When more than one output is ``-`` (standard output can hold one document), or a path is a
        folder or lies in a folder that cannot be written (naming the option and the path).
    """
    from fftgauge.harness.errors import UsageError
    from fftgauge.harness.results import check_output_path, is_stdout

    to_stdout = [name for name, path in paths.items() if path and is_stdout(path)]
    if len(to_stdout) > 1:
        raise UsageError(f"only one output can go to standard output (-), got {' and '.join('--' + n for n in to_stdout)}")
    for name, path in paths.items():
        check_output_path(path, f"--{name}")
    return to_stdout[0] if to_stdout else None
