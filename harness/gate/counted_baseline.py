"""Stored instruction counts: the baselines of the gate's stored and referenced modes with
``--metric instructions``.

A stored count is a row with a positive ``instructions`` of a counted results file: a gate run
with ``--metric instructions`` (record, A/B, stored or referenced, saved with ``--save DIR``) or
a ``fftgauge time --metric instructions`` file. Which runs are usable is decided by the count
fingerprint (:mod:`fftgauge.harness.counts.fingerprint`: the instruction set valgrind offers,
the interpreter, the library versions and build, the valgrind version), not by the machine
fingerprint of timing: counts do not depend on the machine's load, core count or clock, but a
count made on another instruction set or library build counts other code.

Stored mode pools the stored repeats of the last K usable runs into one side
(:func:`stored_counts`, compared by :func:`fftgauge.harness.counts.measure.count_ratio`: each
repeat is a pair of fresh processes whichever run made it); referenced mode compares this run's
A/B count ratio with the stored A/B count ratios
(:func:`fftgauge.harness.gate.history.ratio_baseline_for`).
"""

from __future__ import annotations

import math
import os
from typing import Any, Sequence

from fftgauge.harness.cases import Case
from fftgauge.harness.errors import UsageError
from fftgauge.harness.shapes.case import ShapeCase
from fftgauge.harness.gate.history import GATE_SCHEMA, TIME_SCHEMA, StoredRun, case_of, check_stored_case


def _positive(value: Any) -> bool:
    return (isinstance(value, (int, float)) and not isinstance(value, bool) and math.isfinite(value)
            and value > 0)


def count_rows(path: str, doc: dict[str, Any]) -> list[dict[str, Any]]:
    """Return the rows of a loaded results document that hold a stored count (status ``ok``,
    a positive ``instructions``, a 1-D or a shaped case).

    Raises
    ------
    UsageError
        For a count that is not a positive number, repeats that are not a list of them, or an
        impossible case (:func:`fftgauge.harness.gate.history.check_stored_case`).
    """
    rows = []
    for i, row in enumerate(doc.get("rows") or []):
        if not isinstance(row, dict) or row.get("status", "ok") != "ok" or row.get("instructions") is None:
            continue
        if not _positive(row["instructions"]):
            raise UsageError(f"baseline {path!r}: row {i} has instructions {row['instructions']!r}, not a positive "
                             f"number; the file is corrupt")
        reps = row.get("instructions_repeats")
        if reps is not None and not (isinstance(reps, list) and reps and all(_positive(v) for v in reps)):
            raise UsageError(f"baseline {path!r}: row {i} has instructions_repeats that are not a list of positive "
                             f"numbers; the file is corrupt")
        check_stored_case(path, i, row)
        rows.append(row)
    return rows


def load_count_run(path: str) -> tuple[StoredRun, Any]:
    """Return one stored file's :class:`~fftgauge.harness.gate.history.StoredRun` of counts and
    its count fingerprint (None when it has none).

    Raises
    ------
    UsageError
        When the file is missing, unreadable, of another schema or corrupt.
    """
    from fftgauge.harness.results import load_results

    doc = load_results(path, (TIME_SCHEMA, GATE_SCHEMA))
    rows = count_rows(path, doc)
    backends = {label: info["spec"] for label, info in (doc.get("backends") or {}).items()
                if isinstance(info, dict) and isinstance(info.get("spec"), str)}
    counting = doc.get("counting") if isinstance(doc.get("counting"), dict) else {}
    run = StoredRun(path=path, created=str(doc.get("created") or ""), schema=doc["schema"],
                    machine=doc.get("machine") if isinstance(doc.get("machine"), dict) else {},
                    yardstick=None, rows=tuple(rows), backends=backends, complete=doc.get("complete") is not False)
    return run, counting.get("fingerprint")


def load_count_runs(path: str, last_k: int, allow_other: bool,
                    here: dict[str, Any]) -> tuple[tuple[StoredRun, ...], list[str], list[str]]:
    """Return the stored runs of counts a baseline is formed from (oldest first), with warnings
    and notes for the report: a file is one run; a folder's ``*.json`` files holding counts
    whose fingerprint is ``here``'s, the last ``last_k`` by creation time.

    Raises
    ------
    UsageError
        For a missing path, a corrupt file, no stored counts, or counts of another
        instruction set, interpreter, library build or valgrind without ``allow_other``
        (``--allow-other-machine``): one line naming the difference.
    """
    from fftgauge.harness.counts.fingerprint import fingerprint_differences

    if os.path.isdir(path):
        names = sorted(f for f in os.listdir(path) if f.endswith(".json"))
        loaded = [load_count_run(os.path.join(path, name)) for name in names]
        where = f"baseline folder {path!r}"
    elif os.path.exists(path):
        loaded = [load_count_run(path)]
        where = f"baseline {path!r}"
    else:
        raise UsageError(f"baseline {path!r} does not exist; give a counted results file or a folder of them "
                         f"(record one with fftgauge gate --metric instructions --backend SPEC --save DIR)")
    counted = sorted(((run, fp) for run, fp in loaded if run.rows), key=lambda p: (p[0].created, p[0].path))
    if not counted:
        raise UsageError(f"{where} holds no instruction counts (rows with instructions); record them with "
                         f"fftgauge gate --metric instructions --backend SPEC --save DIR")
    same = [run for run, fp in counted if not fingerprint_differences(fp, here)]
    warnings: list[str] = []
    notes: list[str] = []
    if not same:
        diff = "; ".join(fingerprint_differences(counted[-1][1], here))
        if not allow_other:
            raise UsageError(f"{where} holds counts made with another instruction set or build ({diff}); counts "
                             f"depend on them: record a baseline here, or pass --allow-other-machine")
        warnings.append(f"the stored counts were made with ANOTHER instruction set or build ({diff}): count "
                        f"differences may be theirs, not the code's")
        same = [run for run, _ in counted]
    elif len(same) < len(counted):
        notes.append(f"{len(counted) - len(same)} stored run(s) of counts with another instruction set or build "
                     f"in {path!r} ignored")
    used = same[-last_k:]
    partial = [os.path.basename(r.path) for r in used if not r.complete]
    if partial:
        notes.append(f"{len(partial)} stored run(s) did not complete ({', '.join(partial)}): only the cases they "
                     f"finished are in the baseline")
    return tuple(used), warnings, notes


def stored_counts(runs: Sequence[StoredRun], label: str, case: Case | ShapeCase) -> Any:
    """Return the stored counts of ``label``'s ``case`` pooled over ``runs`` as a
    :class:`~fftgauge.harness.counts.measure.CaseCount` (each row's ``instructions_repeats``,
    or its median where it has none), with the number of runs holding it; None when none does."""
    from fftgauge.harness.counts.measure import CaseCount

    values: list[float] = []
    misses: list[float] = []
    held = 0
    calls = 0
    for run in runs:
        for row in run.rows:
            if row["backend"] == label and case_of(row) == case:
                values.extend(float(v) for v in (row.get("instructions_repeats") or [row["instructions"]]))
                if row.get("ll_misses") is not None:
                    misses.append(float(row["ll_misses"]))
                calls = int(row.get("count_transforms") or calls)
                held += 1
                break
    if not held:
        return None
    return CaseCount(calls, tuple(values), tuple(misses) if len(misses) == held else None, 0.0), held
