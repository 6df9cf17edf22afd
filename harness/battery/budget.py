"""What a case would cost: each backend's seconds per call, measured on its smallest sizes,
and the sizes whose case would run past the per-case budget.

Before the battery dispatches a backend's cases, one worker job (:func:`measure_call_seconds`)
times calls of the backend (the fastest of two) at a few of its claimed sizes, smallest first, each about
twice the last, until one call takes :data:`PROBE_STOP_SECONDS` or the probe has spent
:data:`PROBE_TOTAL_SECONDS`. A case makes at most :data:`CALLS_PER_CASE` calls of the
backend (every check together; counted in the tests), so its cost is estimated as that many
calls at the size, extrapolated from the largest sizes measured (:func:`call_seconds_at`).
A case whose estimate exceeds the budget becomes a ``skip`` row whose message gives the
estimate: a slow implementation (pure Python, a debug build) is checked where it can be in
the time given, and says where it was not, instead of timing out at its largest sizes.
The pure-Python references' default limit is this rule with a smaller budget
(:data:`REFERENCE_CASE_BUDGET_SECONDS`, in a run that does not name its sizes).
"""

from __future__ import annotations

import math
import time
from typing import Any, Callable, Sequence

from fftgauge.harness.cases import Case

#: Calls of the backend one case makes at most, all checks together, with room for a few
#: more checks (67-84 counted with a counting backend over the kinds and small sizes;
#: tests/test_budget.py counts them).
CALLS_PER_CASE = 100

#: Seconds one case (all its checks) may take by its estimate, by default.
DEFAULT_CASE_BUDGET_SECONDS = 10.0

#: The budget of the pure-Python references in a run that does not name its sizes.
REFERENCE_CASE_BUDGET_SECONDS = 0.1

#: The probe stops after a call that took this long (the next size would take twice as much).
PROBE_STOP_SECONDS = 0.05

#: The probe stops when it has spent this long in all.
PROBE_TOTAL_SECONDS = 1.0

#: Calls timed per size (the fastest counts), unless the first already takes PROBE_STOP_SECONDS.
PROBE_CALLS = 2

#: The smallest size the probe times (smaller calls measure the call overhead, not the size).
PROBE_MIN_N = 16


def probe_sizes(sizes: Sequence[int]) -> list[int]:
    """Return the sizes a probe times, ascending: from ``sizes``, those >= :data:`PROBE_MIN_N`,
    each at least twice the previous one."""
    chosen: list[int] = []
    for n in sorted(set(sizes)):
        if n >= PROBE_MIN_N and (not chosen or n >= 2 * chosen[-1]):
            chosen.append(n)
    return chosen


def measure_call_seconds(backend: Any, case_fields: list[tuple], seed: int = 0,
                         clock: Callable[[], float] = time.perf_counter) -> list[tuple[int, float | None]]:
    """Time the calls of ``backend`` per case (ascending sizes; the fastest of
    :data:`PROBE_CALLS`) and return ``(n, seconds)`` pairs; ``seconds`` is None where planning
    or the call raised.

    Stops after a call of :data:`PROBE_STOP_SECONDS` or more, or when the probe has run
    :data:`PROBE_TOTAL_SECONDS`. Runs in a worker (job ``jobs.call_seconds``).
    """
    from fftgauge.harness.battery.conventions import declared_input_plan
    from fftgauge.harness.battery.inputs import case_rng, random_input

    out: list[tuple[int, float | None]] = []
    started = clock()
    for fields in case_fields:
        case = Case(*fields)
        try:
            plan = declared_input_plan(backend, backend.plan(case))
            try:
                x = plan.prepare(random_input(case, case_rng(seed, case, "budget")))
                seconds = float("inf")
                for _ in range(PROBE_CALLS):  # the first call may pay for warming up (caches, BLAS threads)
                    t0 = clock()
                    plan.execute(x)
                    seconds = min(seconds, clock() - t0)
                    if seconds >= PROBE_STOP_SECONDS:
                        break
            finally:
                plan.close()
        except Exception:  # noqa: BLE001 - a size that raises is the battery's finding, not the probe's
            seconds = None
        out.append((case.n, seconds))
        if (seconds is not None and seconds >= PROBE_STOP_SECONDS) or clock() - started >= PROBE_TOTAL_SECONDS:
            break
    return out


def _work(n: int) -> float:
    """The n log2 n work model of a fast transform (n for n < 2)."""
    return n * math.log2(n) if n >= 2 else float(n)


def call_seconds_at(probes: Sequence[tuple[int, float | None]], n: int) -> float | None:
    """Return the estimated seconds of one call at size ``n`` from the probe's ``(n, seconds)``
    pairs, or None when no probe succeeded.

    Within the measured range: the time at the smallest measured size >= n (an upper bound).
    Beyond it: the largest measured time scaled as (w(n) / w(m)) ** q, with w(n) = n log2 n
    and q the growth between the two largest measured sizes in that model, clamped to [1, 2]
    (1: an n log n algorithm; larger: a slower one, up to the direct DFT's n^2).
    """
    good = sorted((m, s) for m, s in probes if s is not None and s > 0)
    if not good:
        return None
    for m, s in good:
        if m >= n:
            return s
    m, s = good[-1]
    q = 1.0
    if len(good) >= 2:
        (m0, s0), (m1, s1) = good[-2], good[-1]
        if _work(m1) > _work(m0):
            q = math.log(s1 / s0) / math.log(_work(m1) / _work(m0))
    q = min(2.0, max(1.0, q))
    return s * (_work(n) / _work(m)) ** q


def time_reason(label: str, probes: Sequence[tuple[int, float | None]], case: Case,
                budget_seconds: float | None) -> str | None:
    """Return why ``case`` is skipped for time (the estimate, the budget, how to lift it), or
    None when it fits the budget (or there is no budget or estimate)."""
    if not budget_seconds:
        return None
    per_call = call_seconds_at(probes, case.n)
    if per_call is None:
        return None
    estimate = CALLS_PER_CASE * per_call
    if estimate <= budget_seconds:
        return None
    return (f"skipped for time: {label} takes about {per_call:.2g} s per call at n = {case.n}, so this case "
            f"would take about {estimate:.3g} s, over the budget of {budget_seconds:g} s per case "
            f"(raise it with --case-budget SECONDS, 0 for none)")


#: What every skip-for-time message starts with (how the summary recognises one).
TIME_SKIP_PREFIX = "skipped for time:"
