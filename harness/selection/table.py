"""The ranking of ``fftgauge pick`` as a plain-text table (one line per backend)."""

from __future__ import annotations

from fftgauge.harness.selection.ranking import Candidate, CaseCost
from fftgauge.harness.selection.verdict import seconds_text

#: Column headings, in order.
COLUMNS = ("rank", "backend", "per call", "interval", "execution", "planning", "worst eps (limit)", "peak memory",
           "verdict")


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
    verdict = "recommended" if c.rank == 1 else "ok" if c.recommended else (
        f"not recommended: {len(c.failed_checks)} failing check(s)" if c.failed_checks
        else f"not recommended: {c.reasons[0].split(':')[0]}" if c.reasons else "not recommended")
    return (str(c.rank) if c.rank is not None else "-", c.backend, t(c.amortised_seconds),
            f"{t(c.amortised_low)} - {t(c.amortised_high)}" if timed else "-", t(c.seconds), t(c.plan_seconds),
            accuracy, bytes_text(c.peak_bytes), verdict)


def candidates_of(rows: list[dict]) -> list[Candidate]:
    """Return the candidates of a ``fftgauge-pick/1`` document's ``rows`` (as :meth:`Candidate.as_dict` wrote them)."""
    return [Candidate(**{**r, "reasons": tuple(r["reasons"]), "failed_checks": tuple(r["failed_checks"]),
                         "cases": tuple(CaseCost(**c) for c in r["cases"])}) for r in rows]


def ranking_table(ranked: list[Candidate]) -> str:
    """Return the ranking as aligned text columns (times per workload call, planning amortised
    in ``per call``; ``planning`` the whole planning time of one plan of each case)."""
    rows = [COLUMNS] + [cells(c) for c in ranked]
    widths = [max(len(r[i]) for r in rows) for i in range(len(COLUMNS))]
    return "\n".join("  ".join(cell.ljust(w) for cell, w in zip(r, widths)).rstrip() for r in rows)
