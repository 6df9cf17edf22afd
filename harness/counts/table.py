"""``fftgauge time --metric instructions``: every timed case's instructions per transform,
counted under cachegrind (:func:`add_counts`) beside its time, and the table that shows them
against the N log2 N model (:func:`counts_table`).

Per row: ``instructions`` (median per transform over the repeats), ``instructions_spread``,
``instructions_repeats`` (per repeat; a stored-mode count gate pools them),
``instructions_per_point`` (per input point, ``instructions / n``; of a shaped case, per point
of the array, ``instructions / (batch N)``, its count being per call),
``instructions_per_nlogn`` (per ``n log2 n``, per ``batch N log2 N`` of a shaped case: flat
across sizes for an O(N log N) transform, the model of :mod:`fftgauge.harness.timing.opcount`)
and ``ns_per_instruction`` (the median time over the count: where it grows with n while the
count per N log2 N stays flat, the time went to the machine, memory and caches, not to more
work).
"""

from __future__ import annotations

import math
from typing import Any, Callable

from fftgauge.harness.errors import BackendFailure

#: Repeats of each case's count in ``fftgauge time`` (the spread is shown).
TIME_COUNT_REPEATS = 2


def case_points(case: Any) -> tuple[int, int]:
    """Return ``(N, batch)`` of a counted case: ``(n, 1)`` for a 1-D case, the points of one
    transform and the transforms per call of a shaped one."""
    if hasattr(case, "shape"):
        return case.points, case.batch
    return case.n, 1


def add_counts(doc: dict[str, Any], threads: int = 1, timeout: float = 120.0, seed: int | None = None,
               on_case: Callable[[str], None] | None = None) -> None:
    """Count every ``ok`` row of a ``fftgauge-time/1`` document and add the count fields, in place.

    A case that cannot be counted keeps its timing and gets ``instructions`` None and a
    ``count_message`` saying why.

    Raises
    ------
    UsageError
        When valgrind is not installed (the install line).
    """
    from fftgauge.harness.counts.cachegrind import calls_for, require_valgrind
    from fftgauge.harness.counts.fingerprint import count_fingerprint
    from fftgauge.harness.counts.measure import count_sides
    from fftgauge.harness.gate.history import case_of

    valgrind = require_valgrind()
    seed = doc.get("seed", 0) if seed is None else seed
    specs = {label: rec.get("spec", label) for label, rec in (doc.get("backends") or {}).items()}
    for row in doc.get("rows") or []:
        if row.get("status") != "ok" or row.get("backend") not in specs:
            continue
        case = case_of(row)  # 1-D or shaped
        try:
            got = count_sides(valgrind, {"x": specs[row["backend"]]}, case, seed=seed, calls=calls_for(case),
                              repeats=TIME_COUNT_REPEATS, threads=threads, timeout=timeout)["x"]
        except BackendFailure as exc:
            row.update(instructions=None, count_message=str(exc))
            continue
        finally:
            if on_case is not None:
                on_case(f"{row['backend']} {case.label()}")
        points, batch = case_points(case)
        nlogn = batch * points * max(1.0, math.log2(points))
        seconds = row.get("seconds")
        row.update(instructions=got.median, instructions_spread=got.spread,
                   instructions_repeats=list(got.instructions),
                   instructions_per_point=got.median / (batch * points), instructions_per_nlogn=got.median / nlogn,
                   ns_per_instruction=None if seconds is None else seconds * 1e9 / got.median)
    doc["counting"] = {"tool": "cachegrind", "repeats": TIME_COUNT_REPEATS,
                       "fingerprint": count_fingerprint(valgrind)}


def counts_table(rows: list[dict[str, Any]]) -> str:
    """Return the terminal table of counted rows (empty text when none was counted); a shaped
    row is named by its shape (``fftn float64 64x64 axes=0,1 C``)."""
    from fftgauge.harness.shapes.fields import shape_text

    counted = [r for r in rows if r.get("status") == "ok" and "instructions" in r]
    if not counted:
        return ""
    lines = ["instructions per transform (cachegrind), against the N log2 N model:",
             f"  {'backend':<18} {'case':<26} {'instructions':>14} {'per point':>10} {'per N log2 N':>13} "
             f"{'ns/instr':>9} {'spread':>8}"]
    for r in counted:
        label = f"{r['kind']} {r['dtype']} " + (shape_text(r) if r.get("shape") else f"n={r['n']}")
        if r.get("instructions") is None:
            lines.append(f"  {r['backend']:<18} {label:<26} not counted: {r.get('count_message', '')}")
            continue
        ns = r.get("ns_per_instruction")
        lines.append(f"  {r['backend']:<18} {label:<26} {r['instructions']:>14,.0f} {r['instructions_per_point']:>10.2f} "
                     f"{r['instructions_per_nlogn']:>13.3f} {'' if ns is None else f'{ns:.3f}':>9} "
                     f"{r['instructions_spread'] * 100:>7.3f}%")
    return "\n".join(lines)
