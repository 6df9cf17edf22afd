"""A fake clock and plans that advance it by known costs: timer tests without real durations.

:class:`FakeClock` is a clock as :mod:`fftgauge.harness.timing.clock` defines one (a callable
returning nanoseconds); it moves only when a :class:`FakePlan` call advances it, or by
``read_ns`` at every read (the cost of reading a clock). Every time a timer computes from it
is then known exactly, in advance, by hand.
"""

from __future__ import annotations

from typing import Callable, Sequence

import numpy as np

from fftgauge.backends.base import Backend, Capabilities, Plan
from fftgauge.harness.cases import DTYPES, Case


class FakeClock:
    """A clock that returns ``now_ns`` and then moves on by ``read_ns``; :meth:`advance` moves it."""

    def __init__(self, read_ns: int = 0):
        self.now_ns = 0
        self.read_ns = read_ns
        self.reads = 0

    def __call__(self) -> int:
        now = self.now_ns
        self.now_ns += self.read_ns
        self.reads += 1
        return now

    def advance(self, ns: int) -> None:
        """Move the clock on by ``ns`` nanoseconds."""
        self.now_ns += int(ns)


def cost_schedule(costs_ns: int | Sequence[int] | Callable[[int], int]) -> Callable[[int], int]:
    """Return ``cost(call_index) -> ns``: a constant, the items of a sequence (the last one
    repeated after its end), or the given function."""
    if callable(costs_ns):
        return costs_ns
    if isinstance(costs_ns, int):
        return lambda i: costs_ns
    costs = list(costs_ns)
    return lambda i: costs[min(i, len(costs) - 1)]


class FakePlan(Plan):
    """A plan whose call number ``i`` advances the clock by ``cost(i)`` ns and returns its input."""

    def __init__(self, case: Case, clock: FakeClock, costs_ns: int | Sequence[int] | Callable[[int], int]):
        super().__init__(case)
        self.clock = clock
        self.cost = cost_schedule(costs_ns)
        self.calls = 0
        self.closed = False

    def execute(self, x: np.ndarray) -> np.ndarray:
        """Advance the clock by this call's cost; return ``x``."""
        self.clock.advance(self.cost(self.calls))
        self.calls += 1
        return x

    def close(self) -> None:
        self.closed = True


class FakeBackend(Backend):
    """Plans :class:`FakePlan` on one fake clock; planning advances it by ``plan_ns``."""

    name = "fake"

    def __init__(self, clock: FakeClock, cost_ns: int | Sequence[int] | Callable[[int], int], plan_ns: int = 0):
        super().__init__()
        self.clock = clock
        self.cost_ns = cost_ns
        self.plan_ns = plan_ns
        self.plans: list[FakePlan] = []

    @property
    def version(self) -> str:
        return "1"

    def capabilities(self) -> Capabilities:
        return Capabilities(dtypes=DTYPES)

    def plan(self, case: Case) -> FakePlan:
        self.clock.advance(self.plan_ns)
        plan = FakePlan(case, self.clock, self.cost_ns)
        self.plans.append(plan)
        return plan
