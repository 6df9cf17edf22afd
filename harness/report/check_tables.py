"""Turning battery rows into what a person reads: a DataFrame, a summary per backend x kind
x precision, and the terminal text."""

from __future__ import annotations

from typing import TYPE_CHECKING, Any, Iterable

if TYPE_CHECKING:  # pandas is imported when a table is built, not with this module
    import pandas as pd

ROW_COLUMNS = ["backend", "kind", "dtype", "norm", "n", "check", "status", "value", "limit", "eps_units",
               "diagnosis", "message", "reference"]


def rows_frame(rows: Iterable[dict[str, Any]]) -> pd.DataFrame:
    """Return the battery rows as a DataFrame with the contract's columns in a fixed order."""
    import pandas as pd

    df = pd.DataFrame(list(rows))
    if df.empty:
        return pd.DataFrame(columns=ROW_COLUMNS)
    for col in ROW_COLUMNS:
        if col not in df:
            df[col] = None
    return df[ROW_COLUMNS + [c for c in df.columns if c not in ROW_COLUMNS]]


def compress_sizes(sizes: Iterable[int], limit: int = 12) -> str:
    """Return sorted sizes as short text: runs of consecutive sizes as ``A..B``.

    Examples
    --------
    >>> compress_sizes([1, 2, 3, 5, 8, 9, 10, 1009])
    '1..3, 5, 8..10, 1009'
    """
    values = sorted(set(int(s) for s in sizes))
    parts: list[str] = []
    i = 0
    while i < len(values):
        j = i
        while j + 1 < len(values) and values[j + 1] == values[j] + 1:
            j += 1
        parts.append(str(values[i]) if j == i else f"{values[i]}..{values[j]}")
        i = j + 1
    if len(parts) > limit:
        return ", ".join(parts[:limit]) + f", ... ({len(values)} sizes)"
    return ", ".join(parts)


def _case_status(statuses: pd.Series) -> str:
    if (statuses == "error").any():
        return "error"
    if (statuses == "fail").any():
        return "fail"
    if (statuses == "skip").all():
        return "skip"
    return "pass"


def summary_frame(df: pd.DataFrame) -> pd.DataFrame:
    """Return one line per backend x kind x dtype x norm: cases passed/failed/error/skipped,
    worst accuracy in eps units, the failing sizes and the diagnoses found."""
    import pandas as pd

    from fftgauge.harness.report.findings import bound_eps_units

    if df.empty:
        return pd.DataFrame()
    keys = ["backend", "kind", "dtype", "norm"]
    per_case = df.groupby(keys + ["n"], sort=False)["status"].agg(_case_status).reset_index(name="case_status")
    lines = []
    for key, group in per_case.groupby(keys, sort=False):
        sub = df[(df[keys] == pd.Series(key, index=keys)).all(axis=1)]
        acc = sub[(sub["check"] == "accuracy") & sub["eps_units"].notna()]
        bad = sub[sub["status"].isin(["fail", "error"])]
        diagnoses = bad["diagnosis"].dropna()
        counts = group["case_status"].value_counts()
        lines.append({
            "backend": key[0], "kind": key[1], "dtype": key[2], "norm": key[3],
            "passed": int(counts.get("pass", 0)), "failed": int(counts.get("fail", 0)),
            "errors": int(counts.get("error", 0)), "skipped": int(counts.get("skip", 0)),
            "worst_eps_units": float(acc["eps_units"].max()) if not acc.empty else None,
            "worst_limit_eps_units": (bound_eps_units(acc.loc[acc["eps_units"].idxmax()].to_dict())
                                      if not acc.empty else None),
            "failed_sizes": compress_sizes(group.loc[group["case_status"].isin(["fail", "error"]), "n"]),
            "diagnoses": ", ".join(f"{d} x{c}" for d, c in diagnoses.value_counts().items()),
        })
    return pd.DataFrame(lines)


#: Findings the terminal summary lists per backend before it says how many more there are
#: (each backend's first finding is always listed; the rest are in the results file).
FINDINGS_PER_BACKEND = 12


def finding_lines(rows: Iterable[dict[str, Any]], per_backend: int = FINDINGS_PER_BACKEND) -> list[str]:
    """Return the terminal's findings: one line per distinct cause of each backend (a diagnosis
    code, or a way a case could not run) with the checks that saw it, grouped by backend in the order the backends first appear, wrong answers before
    cases that could not run.

    Nothing is cut silently: past ``per_backend`` lines for one backend, one line says how many
    more findings that backend has and where they are; every backend's first finding is listed.
    Each entry (:meth:`~fftgauge.harness.report.findings.Finding.summary_lines`, wrapped at the
    terminal's width, never cut) gives the cases and sizes the cause covers, their size rule,
    and where in the output and the likely code, or the worst case's message
    (:func:`fftgauge.harness.report.findings.findings` does the grouping).
    """
    from fftgauge.harness.report.findings import findings, wrap_line

    rows = [dict(r) for r in rows]
    order = list(dict.fromkeys(str(r["backend"]) for r in rows))
    by_backend: dict[str, list] = {b: [] for b in order}
    for found in findings(rows):
        by_backend.setdefault(found.backend, []).append(found)
    out = []
    for backend, found_here in by_backend.items():
        for found in found_here[:max(1, per_backend)]:
            out.append("\n".join(found.summary_lines()))  # two parts, each wrapped (findings.Finding.summary_lines)
        hidden = len(found_here) - max(1, per_backend)
        if hidden > 0:
            out.append("\n".join(wrap_line(
                f"  {backend}: {hidden} more finding{'s' if hidden != 1 else ''} (distinct causes) not listed "
                f"here; every row is in the results file (its path is printed below)")))
    return out


def convention_lines(backends: dict[str, Any] | None) -> list[str]:
    """Return one line per backend of a results file's ``backends`` map that declared a
    convention other than numpy's (``"dit: declared order=bit-reversed (checked in numpy's
    convention)"``): its outputs were turned into numpy's convention before the checks. An
    entry without a readable ``capabilities.conventions`` gives no line."""
    from fftgauge.backends.claims import Conventions
    from fftgauge.harness.battery.conventions import DeclaredConvention

    lines = []
    for label, record in (backends or {}).items():
        fields = ((record or {}).get("capabilities") or {}).get("conventions") or {}
        try:
            text = DeclaredConvention(Conventions(**fields)).describe_all()
        except (TypeError, ValueError):
            continue
        if text:
            lines.append(f"{label}: declared {text} (checked in numpy's convention)")
    return lines


def format_summary(df: pd.DataFrame, backends: dict[str, Any] | None = None) -> str:
    """Return the terminal summary of a battery run: a verdict line, the table, one line per
    backend of ``backends`` (a results file's map) that declared a convention, the findings."""
    if df.empty:
        return "no cases were run"
    summary = summary_frame(df)
    shown = summary.copy()
    limits = shown.pop("worst_limit_eps_units")
    shown["worst eps (limit)"] = [
        "" if v is None or v != v else f"{v:.3g}" + ("" if lim is None or lim != lim else f" ({lim:.3g})")
        for v, lim in zip(shown.pop("worst_eps_units"), limits)]
    shown = shown.rename(columns={"failed_sizes": "failed sizes"})
    if (shown["norm"] == "backward").all():
        shown = shown.drop(columns=["norm"])
    text = shown.to_string(index=False)
    from fftgauge.harness.report.findings import case_counts, wrap_line

    counts = case_counts(df.to_dict("records"))
    verdict = ("PASS: every case held" if counts["wrong"] + counts["error"] == 0 else
               f"FAIL: {counts['wrong']} case(s) gave wrong answers, {counts['error']} could not run (raised, "
               f"crashed, timed out, returned something unusable or left processes running), "
               f"{counts['passed']} passed")
    lines = [*wrap_line(verdict), "", text]
    conventions = convention_lines(backends)
    if conventions:
        lines += [""] + conventions
    records = df.astype(object).where(df.notna(), None).to_dict("records")
    findings = finding_lines(records)
    if findings:
        lines += ["", *wrap_line("findings, one per cause, in two parts (backend · diagnosis (checks): cases, sizes; "
                                 "size rule / where, likely code; details in the results file):"), *findings]
    from fftgauge.harness.battery.size_patterns import pattern_lines

    patterns = pattern_lines(records)
    if patterns:
        lines += ["", *wrap_line("size patterns (backend · kind precision: the rule over n that tells failing sizes "
                                 "from passing ones):")]
        lines += [part for line in patterns for part in wrap_line(line)]
    return "\n".join(lines)
