"""The busy-wait backend: a synthetic backend of known cost.

Each ``execute`` spins on :func:`time.perf_counter_ns` for the ``seconds`` the SPEC gives
(``busywait[seconds=0.001]``), then returns a zero array of the case's output length and
dtype. It computes no transform (the battery would fail it); it exists so that the timer's
accuracy can be checked against a cost known in advance, by tests and benchmarks.
"""

from __future__ import annotations

import time

import numpy as np

from fftgauge.backends.base import Backend, Capabilities, OptionSpec, Plan
from fftgauge.harness.cases import DTYPES, Case
from fftgauge.harness.errors import UsageError


class BusyWaitPlan(Plan):
    """A plan that spins ``wait_ns`` nanoseconds per call and returns zeros."""

    def __init__(self, case: Case, wait_ns: int):
        super().__init__(case)
        self.wait_ns = wait_ns

    def execute(self, x: np.ndarray) -> np.ndarray:
        """Spin for the configured time, then return zeros of the output length and dtype."""
        end = time.perf_counter_ns() + self.wait_ns
        while time.perf_counter_ns() < end:
            pass
        return np.zeros(self.case.output_length, dtype=self.case.output_dtype)


class BusyWaitBackend(Backend):
    """Spins a fixed time per call (option ``seconds``) and returns a zero array."""

    name = "busywait"
    #: Computes no transform: not for the default backend set of check/time.
    synthetic = True
    description = "spins a known time per call and returns zeros (no transform): checks the timer"
    options = {
        "seconds": OptionSpec(float, 1e-3, "seconds each call spins for (>= 0)"),
    }

    def __init__(self, **opts):
        """Build the backend; raises UsageError when ``seconds`` is negative or not a number."""
        super().__init__(**opts)
        seconds = float(self.opts["seconds"])
        if not seconds >= 0.0:
            raise UsageError(f"backend busywait: option seconds={self.opts['seconds']!r} must be a number >= 0")
        self._wait_ns = round(seconds * 1e9)

    @property
    def version(self) -> str:
        return "1"

    def capabilities(self) -> Capabilities:
        return Capabilities(dtypes=DTYPES)

    def plan(self, case: Case) -> Plan:
        """Return a :class:`BusyWaitPlan` for ``case`` (never raises)."""
        return BusyWaitPlan(case, self._wait_ns)
