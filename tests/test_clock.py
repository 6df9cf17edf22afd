"""fftgauge.harness.timing.clock on a fake clock: every expected count and duration below is
derived by hand from the fake costs (no sleep, no real duration asserted)."""

from __future__ import annotations

import gc

import numpy as np
import pytest

from fake_clock import FakeClock, FakePlan
from fftgauge.harness.cases import Case
from fftgauge.harness.timing.clock import (MIN_CLOCK_TICKS, autorange, gc_paused, sample_target_ns, time_empty_loop,
                                           time_loops, warm_up)

CASE = Case("fft", "float64", 16)
X = np.zeros(16, dtype=complex)


def test_time_loops_reads_the_given_clock():
    clock = FakeClock()
    plan = FakePlan(CASE, clock, 700)
    assert time_loops(plan.execute, X, 5, clock) == 3500 and plan.calls == 5
    # a clock read that costs 40 ns lands once between the start and the end read
    clock = FakeClock(read_ns=40)
    assert time_loops(FakePlan(CASE, clock, 700).execute, X, 5, clock) == 3540


def test_time_empty_loop_is_the_cost_of_reading_the_clock():
    assert time_empty_loop(1000, FakeClock(read_ns=40)) == 40
    assert time_empty_loop(7, FakeClock()) == 0


@pytest.mark.parametrize("cost_ns, seconds, calls", [(1_000_000, 5e-3, 5), (10_000_000, 5e-3, 1), (1_000, 0.0, 1)])
def test_warm_up_calls_until_its_duration_and_at_least_once(cost_ns, seconds, calls):
    """1 ms calls for 5 ms: the 5th call ends exactly at the deadline, so 5 calls; a call
    longer than the warm-up, or no warm-up at all: the one call that is always made."""
    clock = FakeClock()
    plan = FakePlan(CASE, clock, cost_ns)
    assert warm_up(plan.execute, X, seconds, clock) == calls == plan.calls


@pytest.mark.parametrize("cost_ns, loops", [
    (1_000, 1000),       # doubles to 128 (128 us >= 125 us, an eighth), then ceil(128 * 1e6 / 128000)
    (3_000, 334),        # doubles to 64 (192 us), then ceil(64 * 1e6 / 192000) = ceil(333.3)
    (1_000_000, 1),      # one call lasts the target
    (5_000_000, 1),      # one call longer than the target
])
def test_autorange_makes_a_sample_last_the_target(cost_ns, loops):
    clock = FakeClock()
    assert autorange(FakePlan(CASE, clock, cost_ns).execute, X, 1_000_000, clock) == loops


def test_autorange_scales_from_the_shortest_of_three_runs():
    """1 us calls: the doubling runs take calls 0..254 (1+2+...+128), the 128-loop run being
    calls 127..254; 50 us more on its call 130 makes it 178 us, still below the target. The
    two further runs (calls 255..510) are clean: the shortest, 128 us, gives 1000 loops; the
    disturbed run alone would give ceil(128e6 / 178000) = 720."""
    clock = FakeClock()
    plan = FakePlan(CASE, clock, lambda i: 1_000 + (50_000 if i == 130 else 0))
    assert autorange(plan.execute, X, 1_000_000, clock) == 1000
    assert plan.calls == 255 + 2 * 128


def test_autorange_stops_at_max_loops_for_a_plan_that_takes_no_time():
    clock = FakeClock()
    assert autorange(FakePlan(CASE, clock, 0).execute, X, 1_000_000, clock, max_loops=64) == 64


def test_sample_target_is_the_target_or_enough_clock_ticks():
    assert sample_target_ns(1e-3, resolution_seconds=1e-9) == 1_000_000
    # a 1 us clock: 10 000 ticks are 10 ms, longer than the 1 ms target
    assert sample_target_ns(1e-3, resolution_seconds=1e-6) == MIN_CLOCK_TICKS * 1_000 == 10_000_000


def test_gc_paused_disables_collects_and_restores(monkeypatch):
    collected = []
    real_collect = gc.collect
    monkeypatch.setattr(gc, "collect", lambda *a: collected.append(1) or real_collect(*a))
    assert gc.isenabled()
    with gc_paused():
        assert not gc.isenabled()
    assert gc.isenabled() and collected == [1]
    with gc_paused(collect=False):
        assert not gc.isenabled()
    assert collected == [1]
    with pytest.raises(RuntimeError):
        with gc_paused(collect=False):
            raise RuntimeError("inside")
    assert gc.isenabled()


def test_gc_paused_leaves_a_disabled_collector_disabled():
    gc.disable()
    try:
        with gc_paused(collect=False):
            pass
        assert not gc.isenabled()
    finally:
        gc.enable()
