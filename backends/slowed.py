"""The slowed backend: another backend plus a calibrated extra cost of a given percentage.

It exists to test the regression gate: ``slowed[percent=5]`` is numpy.fft made 5% slower,
``slowed[percent=10,base=scipy]`` is scipy.fft made 10% slower. Its outputs are the base
backend's, unchanged, so it passes the battery exactly as its base does.

How the extra cost is made
--------------------------
Every call is timed: ``dt`` is the base plan's own duration for that call, read with
:func:`time.perf_counter_ns` around it, and ``percent/100 * dt`` nanoseconds are added to a
*debt*. Once the debt reaches :data:`PAY_MIN_NS` (5 µs; or the fixed cost ``F`` of one
busy-wait call, if larger), a busy-wait of ``debt - F`` runs (so the call costs the whole
debt) and the debt is cleared. The extra
cost is thus proportional to the measured base time call by call, as a real regression of
``percent`` % would be: it scales with the machine's state and the case, and a sample of
many calls is ``1 + percent/100`` times the base's when nothing else changes. The debt
matters for small transforms: 5% of a 3 µs call is 150 ns, less than one busy-wait call
costs, so those calls pay every few dozen calls, in waits long enough that the fixed cost
and the overshoot of each (a clock read, about 100 ns here) are small beside them.

What is calibrated at plan time (in :meth:`SlowedBackend.plan`) is ``F``:
:func:`spin_overshoot_ns` measures the median excess of a spin call over the time asked for
(:data:`CALIBRATION_SPINS` spins of :data:`CALIBRATION_SPIN_NS`, timed from outside the
call, the cost of a clock read taken off). The plan also records ``base_seconds``, the base
plan's median per-call time measured there (for reports only).

``percent = 0`` runs exactly the same code (clock reads, debt arithmetic, comparison) with a
debt that never grows, so ``slowed[percent=0]`` is the fair "old" side for
``slowed[percent=x]``: both pay the wrapper's own cost (some 200-300 ns per call on the
project's test machine), and the only difference is the busy-wait.
"""

from __future__ import annotations

import time

import numpy as np

from fftgauge.backends.base import Backend, Capabilities, OptionSpec, Plan
from fftgauge.harness.cases import Case
from fftgauge.harness.errors import UsageError

#: Spins measured to calibrate the busy-wait's overshoot, and the wait each one asks for.
CALIBRATION_SPINS = 201
CALIBRATION_SPIN_NS = 2_000
#: Smallest debt paid at once (ns): fewer, longer busy-waits keep the fixed cost of each small.
PAY_MIN_NS = 5_000
#: Samples (of about 1 ms) of the base plan measured for ``base_seconds``.
BASE_SAMPLES = 9
#: Seed of the input used at plan time (any input of the right shape and dtype will do).
CALIBRATION_SEED = 0

_clock = time.perf_counter_ns


def spin_ns(wait_ns: int) -> None:
    """Busy-wait until ``wait_ns`` nanoseconds have passed on :func:`time.perf_counter_ns`."""
    end = _clock() + wait_ns
    while _clock() < end:
        pass


def spin_overshoot_ns(spins: int = CALIBRATION_SPINS, wait_ns: int = CALIBRATION_SPIN_NS) -> float:
    """Return the median nanoseconds a call ``spin_ns(wait_ns)`` lasts beyond ``wait_ns``.

    Each spin is timed from outside with two clock reads; the median cost of a clock read
    (back-to-back reads) is taken off, so what remains is the call, the first read inside
    and the overshoot of the last loop iteration: the fixed part of every busy-wait.
    """
    reads = []
    excess = []
    for _ in range(spins):
        a = _clock()
        b = _clock()
        reads.append(b - a)
        a = _clock()
        spin_ns(wait_ns)
        b = _clock()
        excess.append(b - a - wait_ns)
    return max(0.0, float(np.median(excess)) - float(np.median(reads)))


class SlowedPlan(Plan):
    """The base plan followed by a busy-wait of ``fraction`` times the call's own duration.

    Attributes
    ----------
    base : the base backend's plan.
    fraction : ``percent / 100``.
    overshoot_ns : the fixed cost ``F`` of a busy-wait call (see the module docstring).
    debt_ns : extra nanoseconds owed and not yet spun.
    base_seconds : median per-call time of the base plan inside this wrapper at plan time
        (None until measured).
    """

    def __init__(self, case: Case, base: Plan, fraction: float, overshoot_ns: float = 0.0):
        super().__init__(case)
        self.base = base
        self.fraction = float(fraction)
        self.overshoot_ns = float(overshoot_ns)
        self.debt_ns = 0.0
        self.pay_ns = max(PAY_MIN_NS, self.overshoot_ns)
        self.base_seconds: float | None = None

    def prepare(self, x: np.ndarray) -> np.ndarray:
        """Return the base plan's prepared input."""
        return self.base.prepare(x)

    def execute(self, x: np.ndarray) -> np.ndarray:
        """Run the base plan on ``x``, owe ``fraction`` of its duration, pay the debt once it
        covers a busy-wait call's fixed cost; return the base's output."""
        start = _clock()
        out = self.base.execute(x)
        self.debt_ns += (_clock() - start) * self.fraction
        if self.debt_ns >= self.pay_ns:
            spin_ns(self.debt_ns - self.overshoot_ns)
            self.debt_ns = 0.0
        return out

    def close(self) -> None:
        """Close the base plan."""
        self.base.close()


class SlowedBackend(Backend):
    """A base backend made ``percent`` % slower by a busy-wait proportional to each call's duration."""

    name = "slowed"
    description = "another backend plus a calibrated extra cost of percent % (busy-wait): tests the gate"
    options = {
        "percent": OptionSpec(float, 0.0, "extra cost in percent of the base backend's per-call time (>= 0)"),
        "base": OptionSpec(str, "numpy", "name of the backend to slow down (a built-in or entry-point name)"),
    }

    def __init__(self, **opts):
        """Build the backend.

        Raises
        ------
        UsageError
            When ``percent`` is negative or not finite, or ``base`` is not a plain backend
            name (options cannot nest in a SPEC) or does not load.
        """
        super().__init__(**opts)
        percent = float(self.opts["percent"])
        if not (np.isfinite(percent) and percent >= 0.0):
            raise UsageError(f"backend slowed: option percent={self.opts['percent']!r} must be a number >= 0")
        self.percent = percent
        base_name = str(self.opts["base"])
        if any(c in base_name for c in "[]:,=") or base_name == self.name:
            raise UsageError(f"backend slowed: option base={base_name!r} must be a plain backend name such as "
                             f"numpy or scipy")
        from fftgauge.backends.registry import load_backend

        self.base = load_backend(base_name)

    @property
    def version(self) -> str:
        return f"1 (base {self.base.name} {self.base.version})"

    def capabilities(self) -> Capabilities:
        return self.base.capabilities()

    def unsupported_reason(self, case: Case) -> str | None:
        """Return the base backend's reason for refusing ``case``, or None."""
        return self.base.unsupported_reason(case)

    def plan(self, case: Case) -> Plan:
        """Plan ``case`` on the base backend, calibrate the busy-wait and measure the base time.

        Raises
        ------
        Exception
            Whatever the base backend raises while planning or executing.
        """
        overshoot = spin_overshoot_ns()
        plan = SlowedPlan(case, self.base.plan(case), self.percent / 100.0, overshoot)
        try:
            plan.base_seconds = _base_seconds(plan)
        except BaseException:
            plan.close()
            raise
        return plan


def _base_seconds(plan: SlowedPlan) -> float:
    """Return the median per-call time of ``plan``'s base plan inside the wrapper (no busy-wait)."""
    from fftgauge.harness.battery.inputs import case_rng, random_input
    from fftgauge.harness.timing.clock import autorange, gc_paused, time_loops, warm_up

    x = plan.prepare(random_input(plan.case, case_rng(CALIBRATION_SEED, plan.case, "slowed-calibration")))
    fraction, plan.fraction = plan.fraction, 0.0
    try:
        with gc_paused():
            warm_up(plan.execute, x)
            loops = autorange(plan.execute, x)
            samples = [time_loops(plan.execute, x, loops) for _ in range(BASE_SAMPLES)]
    finally:
        plan.fraction = fraction
    return float(np.median(samples)) / loops * 1e-9
