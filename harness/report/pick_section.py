"""The report page's pick section: the workload, the answer in words, the ranking table of
``fftgauge pick`` and, per backend not recommended, every reason (blocks of
:mod:`fftgauge.harness.report.markup`)."""

from __future__ import annotations

from typing import Any

from fftgauge.harness.selection.table import SQNR_COLUMN, candidates_of, table_of


def workload_text(workload: dict[str, Any]) -> str:
    """Return a pick document's workload in words (sizes, kinds, precisions, norm, threads,
    calls per plan, the accuracy asked for, and the SQNR asked for when there is one)."""
    sizes = ", ".join(str(n) for n in workload.get("sizes") or [])
    accuracy = workload.get("accuracy") or "the battery's bounds"
    sqnr = ""
    if workload.get("sqnr_db") is not None:
        level = workload.get("sqnr_level_dbfs")
        sqnr = (f"; SQNR needed: at least {workload['sqnr_db']:g} dB on noise at "
                f"{0.0 if level is None else level:g} dBFS at every fixed-point case")
    return (f"Workload: sizes {sizes}; kinds {', '.join(workload.get('kinds') or [])}; precisions "
            f"{', '.join(workload.get('dtypes') or [])}; norm {workload.get('norm', 'backward')}; "
            f"{workload.get('threads', 1)} thread(s); {workload.get('calls_per_plan', '?')} calls per plan; "
            f"accuracy needed: {accuracy}{sqnr}.")


def pick_verdict(doc: dict[str, Any]) -> tuple[bool, str]:
    """Return (whether no backend is recommended, the verdict's words for one pick document)."""
    if doc.get("recommended"):
        return False, f"pick, {doc['recommended']} recommended"
    return True, "pick, no backend can be recommended"


def column_notes(head: list[str], calls: Any) -> str:
    """Return what the ranking's columns mean (the SQNR column's words only when ``head`` has it)."""
    sqnr = ("; worst SQNR: the lowest SQNR on noise at the stated input level over the fixed-point cases, with "
            "the SQNR needed" if SQNR_COLUMN in head else "")
    return ("Per call: one call of each case of the workload, planning amortised over "
            f"{calls} calls per plan; interval: the 95% interval of the median; planning: one plan "
            "of each case; worst eps: the largest relative rms error in units of machine epsilon, "
            f"with the limit it was held to{sqnr}.")


def pick_blocks(pick: list[tuple[str, dict[str, Any]]]) -> list[tuple]:
    """Return the section's blocks for every pick document given: per document its source and
    machine line, the workload, the summary sentences, the ranking (the recommended backend
    in bold) and the reasons of each backend that is not recommended."""
    from fftgauge.harness.report.pages import machine_line

    blocks: list[tuple] = [("h", 2, "Pick: which backend to ship")]
    for path, doc in pick:
        ranked = candidates_of(doc["rows"])
        blocks.append(("p", f"{path}: {machine_line(doc)}"))
        blocks.append(("p", workload_text(doc.get("workload") or {})))
        if doc["summary"]:
            blocks.append(("ul", [f"{s}." for s in doc["summary"]]))
        bold = {(i, 1) for i, c in enumerate(ranked) if c.rank == 1}
        head, body = table_of(ranked)
        blocks.append(("table", head, body, bold))
        blocks.append(("p", column_notes(head, (doc.get("workload") or {}).get("calls_per_plan"))))
        excluded = [c for c in ranked if not c.recommended]
        if excluded:
            blocks.append(("h", 3, "Why the others are not recommended"))
            blocks.append(("ul", [f"{c.backend}: {reason}" for c in excluded
                                  for reason in (c.reasons or ("no reason recorded",))]))
    return blocks
