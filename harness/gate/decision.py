"""The gate's decision rule: per-case verdicts, Holm's correction across cases, accuracy
regressions, and the run's outcome.

With threshold ``t`` (``--threshold``, 5%) and family-wise level ``alpha`` (0.05):

- the p-values of all compared cases go through Holm's step-down procedure
  (:func:`fftgauge.harness.stats.holm_bonferroni`), so the chance that *any* unchanged case is called
  significant is at most ``alpha`` whatever the dependence between cases (a gate over 30
  cases would otherwise flag one by chance in most runs). Holm rather than Bonferroni: the
  same guarantee and never less power. Rather than false-discovery control: a CI gate fails
  the build on a single finding, so the family-wise rate is the one that matters;
- ``slower``: significant after Holm, ratio > 1 + t and the interval's low end > 1;
- ``faster``: significant after Holm, ratio < 1 / (1 + t) and the interval's high end < 1
  (the same distance on the log scale, so x% slower and x% faster are treated alike);
- ``same``: anything else; ``accuracy``: a new battery failure or an error that grew
  (:func:`compare_accuracy`), whatever the timing says.

A case is *conclusive* when its interval does not straddle 1 + t or 1 / (1 + t)
(:func:`is_conclusive`); inconclusive cases get more samples
(:func:`fftgauge.harness.gate.adaptive.collect`) until they are conclusive, reach
``max_samples``, or the budget is spent. The point estimate then decides, so a change right at
the threshold is called either way about half of the time per case. Sampling more where the
interval straddles a threshold is optional stopping: it can only move a p-value across
``alpha`` for cases whose ratio is already near a threshold, which the threshold test (not
the p-value) then decides.
"""

from __future__ import annotations

import math
from typing import Any, Iterable, Sequence

from fftgauge.harness.battery import bounds
from fftgauge.harness.cases import Case
from fftgauge.harness.gate.estimates import Estimate
from fftgauge.harness.stats import holm_bonferroni

VERDICTS = ("slower", "faster", "same", "accuracy")
#: An accuracy error counts as grown only above this many eps (tiny errors vary freely).
ACCURACY_FLOOR_EPS_UNITS = 1.0


def is_conclusive(est: Estimate, threshold: float) -> bool:
    """Return True when the interval straddles neither 1 + threshold nor 1 / (1 + threshold).

    In record mode (no ratio) a case is conclusive when its median's interval is narrower
    than a quarter of the threshold on each side.
    """
    if math.isnan(est.ratio):
        return est.seconds_high <= est.seconds * (1 + threshold / 4) and est.seconds_low >= est.seconds / (1 + threshold / 4)
    up, down = 1.0 + threshold, 1.0 / (1.0 + threshold)
    return not (est.ratio_low < up < est.ratio_high) and not (est.ratio_low < down < est.ratio_high)


def undecided(verdict: str | None, est: Estimate, threshold: float) -> bool:
    """Return True when a case's timing is *inconclusive* for the gate: its verdict is ``same``
    and its interval still reaches above ``1 + threshold``, so a slowdown beyond the threshold
    is not ruled out. A ``slower``, ``faster`` or ``accuracy`` verdict, a record-mode case (no
    ratio) and a ``same`` whose interval stays below ``1 + threshold`` are decided.
    """
    if verdict != "same" or math.isnan(est.ratio_high):
        return False
    return est.ratio_high > 1.0 + threshold


def holm_adjusted(p_values: Sequence[float]) -> list[float]:
    """Return Holm's adjusted p-values: ``p~_(i) = max_{j <= i} min(1, (m - j + 1) p_(j))`` on the
    ascending order, so that ``p~_i <= alpha`` exactly when Holm's procedure rejects H_i at ``alpha``.

    Source: Holm, "A simple sequentially rejective multiple test procedure", Scand. J.
    Statist. 6 (1979) 65-70; adjusted p-values as in Wright, "Adjusted p-values for
    simultaneous inference", Biometrics 48 (1992) 1005-1013 (from memory; the tests check the
    equivalence with :func:`fftgauge.harness.stats.holm_bonferroni`).
    """
    p = [float(v) for v in p_values]
    m = len(p)
    order = sorted(range(m), key=lambda i: p[i])
    out = [1.0] * m
    running = 0.0
    for j, i in enumerate(order):
        running = max(running, min(1.0, (m - j) * p[i]))
        out[i] = running
    return out


def timing_verdict(est: Estimate, significant: bool, threshold: float) -> str:
    """Return ``slower``, ``faster`` or ``same`` for one case by the module's decision rule."""
    if significant and est.ratio > 1.0 + threshold and est.ratio_low > 1.0:
        return "slower"
    if significant and est.ratio < 1.0 / (1.0 + threshold) and est.ratio_high < 1.0:
        return "faster"
    return "same"


def decide(estimates: Sequence[Estimate], threshold: float, alpha: float) -> list[tuple[str, bool, float]]:
    """Return per estimate ``(verdict, significant after Holm, Holm-adjusted p)``."""
    if not estimates:
        return []
    p = [e.p_value for e in estimates]
    rejected = holm_bonferroni(p, alpha)
    adjusted = holm_adjusted(p)
    return [(timing_verdict(e, r, threshold), r, a) for e, r, a in zip(estimates, rejected, adjusted)]


def compare_accuracy(case: Case, new_rows: Sequence[dict[str, Any]], old_rows: Sequence[dict[str, Any]] | None,
                     baseline: dict[str, Any] | None, growth: float) -> dict[str, Any]:
    """Return the accuracy comparison of one case.

    Parameters
    ----------
    new_rows : the candidate's battery rows (:func:`fftgauge.harness.battery.checks.run_case_checks`).
    old_rows : the old backend's rows (A/B mode), or None.
    baseline : a stored run's accuracy record (``eps_units``, ``battery_failures``) or None.
    growth : an accuracy error more than ``growth`` times the baseline's (and above
        :data:`ACCURACY_FLOOR_EPS_UNITS` eps) counts as a regression.

    Returns
    -------
    dict
        ``eps_units`` (the accuracy check's error), ``baseline_eps_units``,
        ``bound_eps_units`` (the error bound, :func:`fftgauge.harness.battery.bounds.accuracy_limit`, in eps),
        ``battery_failures`` (checks with status fail or error), ``new_battery_failures``
        (those the baseline did not fail; every failure when the baseline has no battery
        record), ``grew`` and ``regressed`` (a new failure, or ``grew``), ``message`` (one
        short line: the new failures by check name with their diagnosis codes, the growth),
        ``detail`` (every new failure's own message, for the JSON row).
    """
    def failures(rows: Iterable[dict[str, Any]]) -> list[str]:
        return sorted({r["check"] for r in rows if r.get("status") in ("fail", "error")})

    def accuracy_eps(rows: Iterable[dict[str, Any]]) -> float | None:
        for r in rows:
            if r.get("check") == "accuracy" and r.get("eps_units") is not None:
                return float(r["eps_units"])
        return None

    now_failing = failures(new_rows)
    if old_rows is not None:
        before, base_eps = set(failures(old_rows)), accuracy_eps(old_rows)
    elif baseline is not None:
        before, base_eps = set(baseline.get("battery_failures") or ()), baseline.get("eps_units")
    else:
        before, base_eps = set(), None
    new_failures = [c for c in now_failing if c not in before]
    eps = accuracy_eps(new_rows)
    bound = float(bounds.eps_units(bounds.accuracy_limit(case), case.dtype))
    grew = (eps is not None and base_eps is not None and eps > ACCURACY_FLOOR_EPS_UNITS
            and eps > growth * float(base_eps))
    parts = []
    failing_rows = [r for r in new_rows if r["check"] in new_failures and r.get("status") in ("fail", "error")]
    if new_failures:
        named = []
        for check in new_failures:
            codes = sorted({r.get("diagnosis") or r.get("status") for r in failing_rows if r["check"] == check})
            named.append(f"{check} ({', '.join(codes)})")
        parts.append(f"new battery failure(s): {', '.join(named)}")
    if grew:
        parts.append(f"accuracy error grew from {float(base_eps):.3g} to {eps:.3g} eps (more than {growth:g}x)")
    return {"eps_units": eps, "baseline_eps_units": None if base_eps is None else float(base_eps),
            "bound_eps_units": bound, "battery_failures": now_failing, "new_battery_failures": new_failures,
            "grew": bool(grew), "regressed": bool(new_failures or grew), "message": "; ".join(parts),
            "detail": "; ".join(f"{r['check']}: {r.get('message', '')}" for r in failing_rows) or None}


#: A run's outcomes, most serious first (:func:`outcome_of`).
OUTCOMES = ("regression", "error", "incomplete", "inconclusive", "pass")


def outcome_of(rows: Sequence[dict[str, Any]], complete: bool) -> tuple[str, bool]:
    """Return ``(outcome, regressed)`` of a run's rows.

    The outcome is the first that holds of: ``regression`` (a finished case is ``slower`` or
    ``accuracy``), ``error`` (a case could not be measured or checked), ``incomplete`` (the
    run stopped before every case was decided), ``inconclusive`` (a case is ``same`` but its
    interval still reaches above 1 + threshold, :func:`undecided`), ``pass``. ``regressed`` is
    true for ``regression`` and ``error`` only: an incomplete run never says it regressed
    about cases it did not finish, and an inconclusive one found no regression.
    """
    if any(r.get("verdict") in ("slower", "accuracy") for r in rows):
        outcome = "regression"
    elif any(r.get("status") == "error" for r in rows):
        outcome = "error"
    elif not complete:
        outcome = "incomplete"
    elif any(r.get("inconclusive") for r in rows):
        outcome = "inconclusive"
    else:
        outcome = "pass"
    return outcome, outcome in ("regression", "error")


def exit_code(outcome: str, inconclusive: str = "pass", signal_number: int | None = None) -> int:
    """Return the exit code of a gate run.

    ``0`` for ``pass``; ``1`` for ``regression`` and ``error``; for ``inconclusive``, ``0``
    when ``inconclusive`` is ``pass`` (the default: nothing was found slower) and ``1`` when it
    is ``fail`` (a slowdown could not be ruled out, so the build stops); for a run stopped by
    a signal, ``128 + signal_number`` (130 SIGINT, 143 SIGTERM, 129 SIGHUP), whatever the
    finished cases say (the outputs say it); ``1`` for a run that stopped for another reason.
    """
    if signal_number is not None:
        return 128 + signal_number
    if outcome in ("regression", "error"):
        return 1
    if outcome == "inconclusive":
        return 1 if inconclusive == "fail" else 0
    return 0 if outcome == "pass" else 1
