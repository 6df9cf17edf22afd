"""The null backend: plans that return their input unchanged, at (almost) no cost.

It computes no transform. The timer runs its plan in the same loop as a real plan to
measure the loop's own overhead (one iteration plus one ``plan.execute`` call), which it
then subtracts from every sample; timing the null backend itself therefore gives a median
near zero. It claims every kind, precision and size so that it can stand in for any case.
"""

from __future__ import annotations

import numpy as np

from fftgauge.backends.base import Backend, Capabilities, Plan
from fftgauge.harness.cases import DTYPES, Case


class NullPlan(Plan):
    """A plan whose :meth:`execute` returns ``x`` itself (no copy, no work)."""

    def prepare(self, x: np.ndarray) -> np.ndarray:
        """Return ``x`` unchanged: the null plan takes any array as it is."""
        return x

    def execute(self, x: np.ndarray) -> np.ndarray:
        """Return ``x`` (the same object)."""
        return x


class NullBackend(Backend):
    """Returns the input unchanged; used to measure the timing loop's overhead."""

    name = "null"
    #: Computes no transform: not for the default backend set of check/time.
    synthetic = True
    description = "returns its input unchanged (no transform): measures the timing loop's overhead"

    @property
    def version(self) -> str:
        return "1"

    def capabilities(self) -> Capabilities:
        return Capabilities(dtypes=DTYPES, in_place=True)

    def plan(self, case: Case) -> Plan:
        """Return a :class:`NullPlan` for ``case`` (never raises)."""
        return NullPlan(case)
