"""The ranking of ``fftgauge pick`` as a plain-text table (one line per backend)."""

from __future__ import annotations

from fftgauge.harness.selection.ranking import Candidate, CaseCost
from fftgauge.harness.selection.verdict import seconds_text

#: Column headings, in order (:func:`shown_columns`: the SQNR column only where a candidate has one).
COLUMNS = ("rank", "backend", "per call", "interval", "execution", "planning", "worst eps (limit)",
           "worst SQNR (need)", "peak memory", "verdict")
#: The column of fixed-point workloads.
SQNR_COLUMN = "worst SQNR (need)"


def bytes_text(peak_bytes: int | None) -> str:
    """Return a byte count as ``16.0 KiB`` (``-`` when unknown)."""
    if peak_bytes is None:
        return "-"
    value = float(peak_bytes)
    for unit in ("B", "KiB", "MiB", "GiB"):
        if value < 1024 or unit == "GiB":
            return f"{value:.0f} {unit}" if unit == "B" else f"{value:.1f} {unit}"
        value /= 1024
    return f"{value:.1f} GiB"


def cells(c: Candidate) -> tuple[str, ...]:
    """Return the table cells of one candidate."""
    timed = c.amortised_seconds is not None

    def t(value):
        return seconds_text(value) if value is not None else "-"

    accuracy = "-" if c.worst_eps is None else f"{c.worst_eps:.3g}" + (
        f" ({c.limit_eps:.3g})" if c.limit_eps is not None else "")
    sqnr = "-" if c.worst_sqnr_db is None else ("exact" if c.worst_sqnr_db == float("inf")
                                                 else f"{c.worst_sqnr_db:.1f} dB") + (
        f" ({c.sqnr_need_db:g})" if c.sqnr_need_db is not None else "")
    verdict = "recommended" if c.rank == 1 else "ok" if c.recommended else (
        f"not recommended: {len(c.failed_checks)} failing check(s)" if c.failed_checks
        else f"not recommended: {c.reasons[0].split(':')[0]}" if c.reasons else "not recommended")
    return (str(c.rank) if c.rank is not None else "-", c.backend, t(c.amortised_seconds),
            f"{t(c.amortised_low)} - {t(c.amortised_high)}" if timed else "-", t(c.seconds), t(c.plan_seconds),
            accuracy, sqnr, bytes_text(c.peak_bytes), verdict)


def candidates_of(rows: list[dict]) -> list[Candidate]:
    """Return the candidates of a ``fftgauge-pick/1`` document's ``rows`` (as :meth:`Candidate.as_dict` wrote them)."""
    return [Candidate(**{**r, "reasons": tuple(r["reasons"]), "failed_checks": tuple(r["failed_checks"]),
                         "cases": tuple(CaseCost(**c) for c in r["cases"])}) for r in rows]


def shown_columns(ranked: list[Candidate]) -> list[int]:
    """Return the indices of :data:`COLUMNS` worth showing for ``ranked``: every column, but
    the SQNR one only when a candidate has an SQNR (a fixed-point workload)."""
    keep_sqnr = any(c.worst_sqnr_db is not None or c.sqnr_need_db is not None for c in ranked)
    return [i for i, name in enumerate(COLUMNS) if name != SQNR_COLUMN or keep_sqnr]


def table_of(ranked: list[Candidate]) -> tuple[list[str], list[list[str]]]:
    """Return (the headings, one row of cells per candidate) of the columns :func:`shown_columns` keeps."""
    keep = shown_columns(ranked)
    return [COLUMNS[i] for i in keep], [[cells(c)[i] for i in keep] for c in ranked]


def ranking_table(ranked: list[Candidate]) -> str:
    """Return the ranking as aligned text columns (times per workload call, planning amortised
    in ``per call``; ``planning`` the whole planning time of one plan of each case)."""
    head, body = table_of(ranked)
    rows = [head] + body
    widths = [max(len(r[i]) for r in rows) for i in range(len(head))]
    return "\n".join("  ".join(cell.ljust(w) for cell, w in zip(r, widths)).rstrip() for r in rows)
