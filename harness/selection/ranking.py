"""Ranking backends on a workload from the battery's rows and the timing runner's rows.

Pure functions on rows (``fftgauge-check/1`` and ``fftgauge-time/1`` row dicts), so the
logic is tested on synthetic rows; :mod:`fftgauge.harness.selection.run` produces the real
ones.

The cost of a backend on a workload is that of one call of every case of the workload
(each (kind, precision, size) once), with planning amortised over the expected calls per
plan:

    amortised = sum over cases of (seconds + plan_seconds / calls_per_plan)

and its interval the same sum over the cases' interval ends (``seconds_low`` and
``seconds_high``, the timing runner's 95% intervals of the median), which is conservative.
A backend is recommended only when it claims every case, no battery row of the workload
failed or errored, every case was timed, and (when the user states an accuracy) its worst
relative rms error is within it; the others are listed with the reasons.

Fixed-point cases (q15, q31) have no ``accuracy`` row: the battery's ``sqnr`` row is the one
that says a backend takes the case, and carries the SQNR measured on noise at each input level
(``noise_sqnr_db``). With an SQNR requirement (``--sqnr``) a backend is recommended only when
that SQNR, at the stated level, reaches the requirement at every fixed-point case; each case
that misses is a reason with the shortfall in dB. The requirement then takes the place of the
``sqnr`` check's own verdict (within 1 dB of the textbook radix-2 with the same scaling): a
backend of another design that reaches what the user needs is not refused for that, while
every other fixed-point check (``overflow``, ``linearity``, ...) still counts.
"""

from __future__ import annotations

from dataclasses import asdict, dataclass, field, replace
from typing import Any, Iterable

import math

from fftgauge.harness.cases import FIXED_DTYPES
from fftgauge.harness.dft import machine_epsilon
from fftgauge.harness.selection.workload import DEFAULT_SQNR_LEVEL_DBFS, Workload

#: Statuses of battery rows that keep a backend from being recommended.
FAILING = ("fail", "error")


def case_key(row: dict) -> tuple[str, str, int]:
    """Return the (kind, dtype, n) of a row."""
    return row["kind"], row["dtype"], int(row["n"])


def claim_check(dtype: str) -> str:
    """Return the check whose row says a backend takes a case of ``dtype``: ``sqnr`` for the
    fixed-point precisions, ``accuracy`` for the others."""
    return "sqnr" if dtype in FIXED_DTYPES else "accuracy"


def case_text(key: tuple[str, str, int]) -> str:
    """Return a case as ``rfft float32 n=4096``."""
    return f"{key[0]} {key[1]} n={key[2]}"


@dataclass(frozen=True)
class CaseCost:
    """One case's times for one backend (seconds are the timing runner's)."""

    kind: str
    dtype: str
    n: int
    seconds: float
    seconds_low: float
    seconds_high: float
    plan_seconds: float
    peak_bytes: int | None


@dataclass(frozen=True)
class Candidate:
    """One backend's standing on the workload (every number per workload call, see the module docstring)."""

    backend: str
    recommended: bool
    reasons: tuple[str, ...] = ()
    failed_checks: tuple[str, ...] = ()
    seconds: float | None = None
    seconds_low: float | None = None
    seconds_high: float | None = None
    plan_seconds: float | None = None
    amortised_seconds: float | None = None
    amortised_low: float | None = None
    amortised_high: float | None = None
    worst_eps: float | None = None
    worst_case: str | None = None
    limit_eps: float | None = None
    limit_source: str | None = None
    worst_sqnr_db: float | None = None
    sqnr_case: str | None = None
    sqnr_need_db: float | None = None
    sqnr_level_dbfs: float | None = None
    peak_bytes: int | None = None
    rank: int | None = None
    cases: tuple[CaseCost, ...] = field(default=())

    def as_dict(self) -> dict[str, Any]:
        """Return the candidate as JSON-able values (cases as a list of dicts)."""
        d = asdict(self)
        d["reasons"], d["failed_checks"] = list(self.reasons), list(self.failed_checks)
        d["cases"] = [asdict(c) for c in self.cases]
        return d


def accuracy_evidence(rows: list[dict], workload: Workload) -> tuple[float | None, str | None, float | None, str | None, list[str]]:
    """Return (worst eps, its case, the limit in eps at that case, the limit's source, cases over the user's need)
    from the ``accuracy`` rows that carry an ``eps_units``."""
    worst, worst_key, limit, source, over = None, None, None, None, []
    for row in rows:
        if row.get("check") != "accuracy" or row.get("eps_units") is None:
            continue
        eps_units = float(row["eps_units"])
        key = case_key(row)
        if workload.accuracy is not None:
            need = workload.accuracy.limit_eps(row["dtype"])
            if eps_units > need:
                over.append(f"{case_text(key)}: {eps_units:.3g} eps, above the {need:.3g} eps needed")
        if worst is None or eps_units > worst:
            worst, worst_key = eps_units, key
            if workload.accuracy is not None:
                limit, source = workload.accuracy.limit_eps(row["dtype"]), "user"
            elif row.get("limit") is not None:
                limit, source = float(row["limit"]) / machine_epsilon(row["dtype"]), "battery"
    return worst, None if worst_key is None else case_text(worst_key), limit, source, over


def row_sqnr_db(row: dict, level_key: str) -> float | None:
    """Return the SQNR (dB) an ``sqnr`` row measured on noise at the level ``level_key`` (inf
    for an exact output, which a results file writes as null), or None when it has none."""
    by_level = row.get("noise_sqnr_db") or {}
    if level_key not in by_level:
        return None
    value = by_level[level_key]
    if value is None:
        return math.inf
    value = float(value)
    return None if math.isnan(value) else value


def sqnr_evidence(rows: list[dict], workload: Workload) -> tuple[float | None, str | None, float, list[str]]:
    """Return (the worst SQNR in dB at the workload's level, its case, that level in dBFS, a
    line per case below the requirement) from the ``sqnr`` rows of fixed-point cases.

    A line reads ``fft q15 n=1024: 52.3 dB at 0 dBFS, 7.7 dB short of 60 dB``; a case whose
    row took no SQNR at that level reads ``...: no SQNR measured at 0 dBFS``.
    """
    level = DEFAULT_SQNR_LEVEL_DBFS if workload.sqnr is None else workload.sqnr.level_dbfs
    key = f"{level:g}"
    worst, worst_key, short = None, None, []
    for row in rows:
        if row.get("check") != "sqnr" or row.get("dtype") not in FIXED_DTYPES or row.get("status") == "skip":
            continue
        got = row_sqnr_db(row, key)
        case = case_key(row)
        if got is None:
            if workload.sqnr is not None:
                short.append(f"{case_text(case)}: no SQNR measured at {level:g} dBFS")
            continue
        if workload.sqnr is not None and got < workload.sqnr.db:
            short.append(f"{case_text(case)}: {got:.1f} dB at {level:g} dBFS, "
                         f"{workload.sqnr.db - got:.1f} dB short of {workload.sqnr.db:g} dB")
        if worst is None or got < worst:
            worst, worst_key = got, case
    return worst, None if worst_key is None else case_text(worst_key), level, short


def failure_summary(rows: list[dict], waived: tuple[str, ...] = ()) -> list[str]:
    """Return one line per failing check (but the checks in ``waived``):
    ``accuracy (precision) at 2 of 3 cases, e.g. fft float64 n=8``."""
    by_check: dict[str, list[dict]] = {}
    for row in rows:
        if row.get("status") in FAILING and row.get("check") not in waived:
            by_check.setdefault(row["check"], []).append(row)
    out = []
    for check, failed in by_check.items():
        codes = sorted({r.get("diagnosis") or r["status"] for r in failed})
        keys = sorted({case_key(r) for r in failed})
        message = " ".join(str(failed[0].get("message") or "").split()).split(";")[0]
        out.append(f"{check} ({', '.join(codes)}) at {len(keys)} case(s), e.g. {case_text(keys[0])}: "
                   f"{message[:100]}")
    return out


def unclaimed_cases(rows: list[dict], workload_keys: Iterable[tuple[str, str, int]]) -> list[str]:
    """Return a line per workload case the backend does not take (its ``accuracy`` row, or
    ``sqnr`` row for a fixed-point case, is a skip, or there is none), with the battery's reason."""
    accuracy = {case_key(r): r for r in rows if r.get("check") == claim_check(r["dtype"])}
    skips = {case_key(r): r for r in rows if r.get("status") == "skip"}
    out = []
    for key in workload_keys:
        row = accuracy.get(key)
        if row is None or row.get("status") == "skip":
            why = (row or skips.get(key) or {}).get("message") or "no battery row"
            out.append(f"{case_text(key)}: {why}")
    return out


def case_costs(rows: list[dict], workload_keys: list[tuple[str, str, int]]) -> tuple[list[CaseCost], list[str]]:
    """Return the timed cases and a line per workload case without a usable time."""
    timed = {case_key(r): r for r in rows}
    costs, missing = [], []
    for key in workload_keys:
        row = timed.get(key)
        if row is None or row.get("seconds") is None or row.get("status", "ok") != "ok":
            missing.append(f"{case_text(key)}: " + ((row or {}).get("message") or "not timed"))
            continue
        costs.append(CaseCost(*key, seconds=float(row["seconds"]),
                              seconds_low=float(row.get("seconds_low") or row["seconds"]),
                              seconds_high=float(row.get("seconds_high") or row["seconds"]),
                              plan_seconds=float(row.get("plan_seconds") or 0.0),
                              peak_bytes=row.get("peak_bytes")))
    return costs, missing


def workload_keys(workload: Workload) -> list[tuple[str, str, int]]:
    """Return every (kind, dtype, n) of the workload."""
    return [(k, d, n) for k in workload.kinds for d in workload.dtypes for n in workload.sizes]


def waived_checks(workload: Workload) -> tuple[str, ...]:
    """Return the checks whose failures the user's requirement replaces: ``sqnr`` with ``--sqnr``."""
    return ("sqnr",) if workload.sqnr is not None else ()


def battery_reasons(check_rows: list[dict], workload: Workload) -> list[str]:
    """Return why the battery's rows (of one backend) keep it from being recommended on the
    workload: cases it does not take, failing checks, cases above the user's accuracy or
    below the SQNR needed."""
    keys = workload_keys(workload)
    wanted = set(keys)
    check_rows = [r for r in check_rows if case_key(r) in wanted]
    reasons = [f"does not take {line}" for line in unclaimed_cases(check_rows, keys)]
    reasons += [f"fails the battery: {line}" for line in failure_summary(check_rows, waived_checks(workload))]
    reasons += [f"is not accurate enough at {line}" for line in accuracy_evidence(check_rows, workload)[4]]
    return reasons + [f"does not reach the SQNR needed at {line}" for line in sqnr_evidence(check_rows, workload)[3]]


def assess(backend: str, check_rows: list[dict], time_rows: list[dict], workload: Workload) -> Candidate:
    """Return the :class:`Candidate` of ``backend`` from its own battery and timing rows."""
    keys = workload_keys(workload)
    wanted = set(keys)
    check_rows = [r for r in check_rows if case_key(r) in wanted]
    reasons = battery_reasons(check_rows, workload)
    failed = failure_summary(check_rows, waived_checks(workload))
    worst, worst_case, limit, source, _ = accuracy_evidence(check_rows, workload)
    sqnr, sqnr_case, level, _ = sqnr_evidence(check_rows, workload) if workload.fixed_dtypes else (None, None, None, [])
    costs, missing = case_costs([r for r in time_rows if case_key(r) in wanted], keys)
    if not reasons:
        reasons += [f"has no time for {line}" for line in missing]
    calls = workload.calls_per_plan
    timed = bool(costs) and not missing
    total = (lambda attr: sum(getattr(c, attr) for c in costs)) if timed else (lambda attr: None)
    plan = total("plan_seconds")
    peaks = [c.peak_bytes for c in costs if c.peak_bytes is not None]
    return Candidate(
        backend=backend, recommended=not reasons, reasons=tuple(reasons), failed_checks=tuple(failed),
        seconds=total("seconds"), seconds_low=total("seconds_low"), seconds_high=total("seconds_high"),
        plan_seconds=plan,
        amortised_seconds=None if plan is None else total("seconds") + plan / calls,
        amortised_low=None if plan is None else total("seconds_low") + plan / calls,
        amortised_high=None if plan is None else total("seconds_high") + plan / calls,
        worst_eps=worst, worst_case=worst_case, limit_eps=limit, limit_source=source,
        worst_sqnr_db=sqnr, sqnr_case=sqnr_case, sqnr_level_dbfs=level,
        sqnr_need_db=None if workload.sqnr is None else workload.sqnr.db,
        peak_bytes=max(peaks) if peaks else None, cases=tuple(costs),
    )


def rank(candidates: Iterable[Candidate]) -> list[Candidate]:
    """Return the candidates in order: the recommended ones by amortised time (rank 1 the
    fastest), then the others (rank None) in their given order."""
    items = list(candidates)
    good = sorted((c for c in items if c.recommended), key=lambda c: c.amortised_seconds)
    return [replace(c, rank=i + 1) for i, c in enumerate(good)] + [c for c in items if not c.recommended]
