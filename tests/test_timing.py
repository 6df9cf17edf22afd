"""fftgauge.harness.timing.timer: the timer and its sessions on a fake clock (every expected
time derived by hand from the fake costs), the row fields and their formulas, rounds, and
the job function the worker runs.

No test here asserts a real duration: the timer reads an injectable clock
(:mod:`fftgauge.harness.timing.clock`), and :mod:`fake_clock` gives one that only fake plans
advance. How close the timer comes to a known real cost (the busy-wait backend) is a
benchmark: ``benchmarks/bench_timing.py busywait``.
"""

from __future__ import annotations

import dataclasses
import gc
import multiprocessing
import pickle
import weakref
from concurrent.futures import ProcessPoolExecutor

import numpy as np
import pytest

from fake_clock import FakeBackend, FakeClock, FakePlan
from fftgauge.backends.base import Plan
from fftgauge.backends.busywait import BusyWaitBackend
from fftgauge.backends.null import NullBackend
from fftgauge.backends.numpy_fft import NumpyBackend
from fftgauge.harness.cases import Case
from fftgauge.harness.errors import UnsupportedCase, UsageError
from fftgauge.harness.battery.inputs import case_rng, random_input
from fftgauge.harness.rows import TimeRow
from fftgauge.harness.timing.caches import FALLBACK_EVICTION_BYTES, last_level_cache_bytes
from fftgauge.harness.timing.case_job import time_case
from fftgauge.harness.timing.timer import TimerSettings, Timer, limit_threads, measure
import fftgauge.harness.timing.caches as caches
import fftgauge.harness.timing.case_job as timing

CASE = Case("fft", "float64", 1024)
X = random_input(CASE, case_rng(0, CASE))
FAST = dict(samples=9, min_samples=5, budget_seconds=1.0, warmup_seconds=1e-3)
#: Fake-clock settings: no warm-up beyond its one call, no budget, 1 ms target.
EXACT = dict(samples=9, min_samples=5, budget_seconds=None, warmup_seconds=0.0)
#: A fake call of 2 ms: longer than the 1 ms target, so every sample is one call.
ONE_CALL_NS = 2_000_000


def fake_timer(read_ns: int = 0, **settings) -> tuple[Timer, FakeClock]:
    """Return a timer on a new fake clock, with :data:`EXACT` settings updated by ``settings``."""
    clock = FakeClock(read_ns)
    return Timer(TimerSettings(**{**EXACT, **settings}), clock), clock


# -- the timer on a fake clock ------------------------------------------------------------------

def test_known_cost_is_recovered_with_the_loop_overhead_subtracted():
    """2.5 us calls, 40 ns per clock read. Autorange: 64 loops take 64 * 2500 + 40 = 160040 ns
    >= 125 us (32 loops do not), scaled to ceil(64e6 / 160040) = 400 loops. A sample of 400
    calls reads 1e6 + 40 ns, the empty loop and the null plan (which does not move the clock)
    40 ns: overhead 40 / 400 ns = 0.1 ns per call, floor 0, and the call's cost exactly."""
    timer, clock = fake_timer(read_ns=40)
    m = timer.measure(FakePlan(CASE, clock, 2_500), X)
    assert m.loops == 400 and m.samples == 9
    assert m.overhead_seconds == pytest.approx(0.1e-9, rel=1e-12)
    assert m.floor_seconds == pytest.approx(0.0, abs=1e-21)
    assert m.seconds == m.seconds_low == m.seconds_high == pytest.approx(2.5e-6, rel=1e-12)
    raw, clock = fake_timer(read_ns=40, subtract_overhead=False)
    assert raw.measure(FakePlan(CASE, clock, 2_500), X).seconds == pytest.approx(2500.1e-9, rel=1e-12)


def test_median_interval_and_order_of_samples():
    """Calls 0 and 1 are the warm-up and the autorange (2 ms: one call per sample); the nine
    samples take 2.3, 2.0, 2.8, 2.1, 2.6, 2.4, 2.2, 2.7, 2.5 ms. Median 2.4 ms; the 95%
    order-statistic interval for n = 9 is x_(2)..x_(8) = 2.1..2.7 ms with coverage
    1 - 2 * (1 + 9) / 2^9 = 0.9609375 (binomial tails, by hand)."""
    sample_ms = [2.3, 2.0, 2.8, 2.1, 2.6, 2.4, 2.2, 2.7, 2.5]
    timer, clock = fake_timer()
    m = timer.measure(FakePlan(CASE, clock, [ONE_CALL_NS] * 2 + [round(v * 1e6) for v in sample_ms]), X)
    assert m.loops == 1
    assert m.sample_seconds == pytest.approx([v * 1e-3 for v in sample_ms], rel=1e-12)
    assert (m.seconds, m.seconds_low, m.seconds_high) == pytest.approx((2.4e-3, 2.1e-3, 2.7e-3), rel=1e-12)
    assert m.coverage == pytest.approx(0.9609375)
    assert m.relative_spread == pytest.approx((2.6 - 2.2) / 2.4, rel=1e-9)  # IQR (numpy's linear quartiles) / median


def test_budget_stops_sampling_once_spent_and_min_samples_are_in():
    """2 ms samples, a 10 ms budget: the fifth sample brings the spent time to 10 ms, so 5
    samples of the 50 asked for; a zero budget stops at min_samples."""
    timer, clock = fake_timer(samples=50, min_samples=3, budget_seconds=0.01)
    assert timer.measure(FakePlan(CASE, clock, ONE_CALL_NS), X).samples == 5
    timer, clock = fake_timer(samples=50, min_samples=3, budget_seconds=0.0)
    assert timer.measure(FakePlan(CASE, clock, ONE_CALL_NS), X).samples == 3


def test_budget_counts_every_round_and_the_untimed_call_of_each():
    """Round 1: 3 samples of 2 ms (6 ms spent). Round 2 starts with one untimed call (8 ms),
    then one sample brings it to 10 ms = the budget: 4 samples in all, not 3 + 5."""
    timer, clock = fake_timer(samples=50, min_samples=3, budget_seconds=0.01)
    plan = FakePlan(CASE, clock, ONE_CALL_NS)
    session = timer.start(plan, X)
    session.take(3)
    assert session.spent_seconds == pytest.approx(6e-3)
    session.take(5)
    assert session.result().samples == 4 and session.spent_seconds == pytest.approx(10e-3)
    assert plan.calls == 2 + 3 + 1 + 1  # warm-up, autorange, round 1, untimed call, round 2


def test_cold_cache_eviction_is_outside_the_timed_region():
    """Evicting costs 5 ms on the fake clock before every sample; the samples still read the
    call's 300 us, one call each, and there is one eviction per sample."""
    class EvictingTimer(Timer):
        evictions = 0

        def evict_caches(self):
            self.evictions += 1
            self.clock.advance(5_000_000)

    clock = FakeClock()
    timer = EvictingTimer(TimerSettings(cold_cache=True, **EXACT), clock)
    m = timer.measure(FakePlan(CASE, clock, 300_000), X)
    assert m.cold_cache and m.loops == 1 and timer.evictions == m.samples == 9
    assert m.seconds == m.seconds_high == pytest.approx(300e-6, rel=1e-12)


def test_the_null_plan_reads_its_floor_of_zero():
    """The null plan on a fake clock with 40 ns reads: it never reaches the target, so the
    autorange stops at max_loops; every sample is the empty loop's 40 ns, all of it
    subtracted, so the median is 0 and so is the floor."""
    timer, clock = fake_timer(read_ns=40, max_loops=64)
    m = timer.measure(NullBackend().plan(CASE), X)
    assert m.loops == 64 and m.overhead_seconds == pytest.approx(40e-9 / 64, rel=1e-12)
    assert m.seconds == pytest.approx(0.0, abs=1e-21) and m.floor_seconds == pytest.approx(0.0, abs=1e-21)


def test_measurement_fields_are_consistent_on_a_real_plan():
    """A real plan (numpy): structure only, no duration asserted."""
    m = measure(NumpyBackend().plan(CASE), X, **FAST)
    assert m.samples == len(m.sample_seconds) == 9 and m.loops >= 1
    assert m.seconds == pytest.approx(float(np.median(m.sample_seconds)))
    assert min(m.sample_seconds) <= m.seconds_low <= m.seconds <= m.seconds_high <= max(m.sample_seconds)


class _Recorder(FakePlan):
    """Records, at every call, whether gc is enabled and how many earlier outputs are alive."""

    def __init__(self, case, clock):
        super().__init__(case, clock, 100_000)
        self.gc_states: list[bool] = []
        self.alive_at_call: list[int] = []
        self._refs: list[weakref.ref] = []

    def execute(self, x):
        super().execute(x)
        self.gc_states.append(gc.isenabled())
        self.alive_at_call.append(sum(r() is not None for r in self._refs))
        y = np.empty(4)
        self._refs.append(weakref.ref(y))
        return y


def test_gc_paused_during_samples_and_outputs_not_kept():
    timer, clock = fake_timer(samples=5)
    plan = _Recorder(CASE, clock)
    assert gc.isenabled()
    timer.measure(plan, X)
    assert gc.isenabled()
    assert len(plan.gc_states) > 5 and not any(plan.gc_states)
    assert max(plan.alive_at_call) == 0


def test_caller_input_is_not_modified():
    class Overwrite(FakePlan):
        def execute(self, x):
            super().execute(x)
            x *= 2
            return x

    timer, clock = fake_timer(samples=5)
    x = X.copy()
    timer.measure(Overwrite(CASE, clock, 100_000), x)
    np.testing.assert_array_equal(x, X)


# -- time_case: the row, its rates and planning time ------------------------------------------

def fake_row(kind: str, dtype: str, n: int, cost_ns: int, plan_ns: int = 0, **options) -> dict:
    """Return the row :func:`time_case` makes for a fake backend of ``cost_ns`` per call."""
    clock = FakeClock()
    backend = FakeBackend(clock, cost_ns, plan_ns)
    return time_case(backend, (kind, dtype, n, "backward"), dict(EXACT, measure_memory=False, **options), clock)


def test_rate_formulas_n1024():
    """Pseudo-flop convention (common practice in FFT benchmarking): 5 N log2 N for a complex
    transform, 2.5 N log2 N for a real one. N = 1024 at 10 us per call (by hand):
    5 * 1024 * 10 = 51200 flops, 51200 / 1e-5 / 1e9 = 5.12 GFLOP/s, 1e4 ns / 10240 = 0.9765625
    ns per N log2 N; rfft: 25600 flops, 2.56 GFLOP/s."""
    row = fake_row("fft", "float64", 1024, 10_000)
    assert row["seconds"] == pytest.approx(1e-5, rel=1e-12)
    assert row["flops"] == 51200
    assert row["gflops"] == pytest.approx(5.12, rel=1e-12)
    assert row["ns_per_nlogn"] == pytest.approx(0.9765625, rel=1e-12)
    real = fake_row("rfft", "float32", 1024, 10_000)
    assert real["flops"] == 25600 and real["gflops"] == pytest.approx(2.56, rel=1e-12)


def test_time_case_records_plan_time():
    """Planning advances the fake clock by 20 ms: the row says 0.02 s, the calls do not count."""
    row = fake_row("fft", "float64", 256, 10_000, plan_ns=20_000_000)
    assert row["plan_seconds"] == pytest.approx(0.02, rel=1e-12)


def test_time_case_flags_null_as_in_place_and_below_floor():
    """A plan that takes no time on the fake clock: median 0, GFLOP/s 0 and the floor message."""
    clock = FakeClock()
    row = time_case(NullBackend(), ("fft", "float64", 64, "backward"),
                    dict(EXACT, measure_memory=False, max_loops=64), clock)
    assert row["in_place"] is True and row["peak_bytes"] is None and row["memory_method"] is None
    assert row["seconds"] == 0.0 and row["gflops"] == 0.0 and "floor" in row["message"]


def test_time_case_returns_every_time_row_field():
    row = time_case(NumpyBackend(), ("rfft", "float64", 4096, "ortho"), dict(FAST, seed=3))
    names = [f.name for f in dataclasses.fields(TimeRow)]
    assert all(name in row for name in names)
    rebuilt = TimeRow(**{k: row[k] for k in names})
    assert rebuilt.as_dict() == {k: row[k] for k in names}
    assert (row["backend"], row["kind"], row["n"], row["norm"], row["threads"]) == ("numpy", "rfft", 4096, "ortho", 1)
    assert isinstance(row["plan_seconds"], float) and row["status"] == "ok"
    assert row["seconds_low"] <= row["seconds"] <= row["seconds_high"]
    assert isinstance(row["peak_bytes"], int) and row["peak_bytes"] >= 0
    assert row["in_place"] is False
    assert isinstance(row["overhead_seconds"], float) and row["memory_method"].startswith("tracemalloc")


def test_time_case_rejects_unsupported_and_unknown_options():
    class Pow2Only(NumpyBackend):
        def capabilities(self):
            return dataclasses.replace(super().capabilities(), sizes="pow2")

    with pytest.raises(UnsupportedCase, match="powers of two"):
        time_case(Pow2Only(), ("fft", "float64", 12, "backward"), {})
    with pytest.raises(ValueError, match="unknown timing options: sampels"):
        time_case(NumpyBackend(), ("fft", "float64", 16, "backward"), {"sampels": 3})


def test_time_case_runs_in_a_spawned_process():
    """The worker runs time_case in a child process: function and backends must pickle."""
    pickle.dumps((time_case, BusyWaitBackend(seconds=1e-4), NullBackend()))
    ctx = multiprocessing.get_context("spawn")
    with ProcessPoolExecutor(max_workers=1, mp_context=ctx) as pool:
        row = pool.submit(time_case, BusyWaitBackend(seconds=2e-4), ("ifft", "float32", 128, "backward"),
                          dict(FAST, measure_memory=False)).result(timeout=60)
    assert row["backend"] == "busywait[seconds=0.0002]" and row["kind"] == "ifft"
    assert row["samples"] == 9


# -- threads, caches ------------------------------------------------------------------------

def test_limit_threads_caps_pools_and_restores():
    from threadpoolctl import threadpool_info

    before = [(p["prefix"], p["num_threads"]) for p in threadpool_info()]
    with limit_threads(1):
        assert all(p["num_threads"] == 1 for p in threadpool_info())
    assert [(p["prefix"], p["num_threads"]) for p in threadpool_info()] == before
    with limit_threads(None):
        assert [(p["prefix"], p["num_threads"]) for p in threadpool_info()] == before


def test_last_level_cache_from_sysfs(tmp_path):
    for index, (level, kind, size) in enumerate([(1, "Data", "48K"), (1, "Instruction", "32K"),
                                                  (2, "Unified", "2048K"), (3, "Unified", "300M")]):
        folder = tmp_path / f"index{index}"
        folder.mkdir()
        (folder / "level").write_text(f"{level}\n")
        (folder / "type").write_text(f"{kind}\n")
        (folder / "size").write_text(f"{size}\n")
    assert last_level_cache_bytes(str(tmp_path)) == 300 * 2**20
    assert last_level_cache_bytes(str(tmp_path / "missing")) is None


def test_eviction_size_falls_back_to_64_mib(monkeypatch):
    monkeypatch.setattr(caches, "last_level_cache_bytes", lambda: None)
    assert caches.eviction_bytes() == FALLBACK_EVICTION_BYTES == 64 * 2**20
    monkeypatch.setattr(caches, "last_level_cache_bytes", lambda: 8 * 2**20)
    assert caches.eviction_bytes() == 12 * 2**20


def test_busywait_rejects_negative_seconds():
    with pytest.raises(UsageError, match="seconds"):
        BusyWaitBackend(seconds=-1.0)


def test_time_case_input_follows_the_seed():
    """Same seed, same input; another seed, another input."""

    class Recording(NullBackend):
        def __init__(self):
            super().__init__()
            self.inputs = []

        def plan(self, case):
            plan = super().plan(case)
            prepare = plan.prepare
            plan.prepare = lambda x: (self.inputs.append(np.array(x, copy=True)), prepare(x))[1]
            return plan

    def first_input(seed):
        backend = Recording()
        time_case(backend, ("fft", "float64", 32, "backward"), dict(FAST, seed=seed, measure_memory=False))
        return backend.inputs[0]

    np.testing.assert_array_equal(first_input(1), first_input(1))
    assert not np.array_equal(first_input(1), first_input(2))


# -- rounds ---------------------------------------------------------------------------------

class CountingPlans(BusyWaitBackend):
    """A busy-wait backend that counts the plans it makes and the plans closed."""

    def __init__(self, seconds: float):
        super().__init__(seconds=seconds)
        self.planned = 0
        self.closed = 0

    def plan(self, case):
        self.planned += 1
        plan = super().plan(case)
        close = plan.close
        plan.close = lambda: (setattr(self, "closed", self.closed + 1), close())[1]
        return plan


def test_rounds_share_one_plan_and_the_last_round_returns_every_sample():
    backend = CountingPlans(seconds=1e-4)
    fields = ("fft", "float64", 256, "backward")
    options = dict(FAST, samples=10, measure_memory=False, rounds=3)
    assert time_case(backend, fields, dict(options, round=0)) is None
    assert time_case(backend, fields, dict(options, round=1)) is None
    assert backend.planned == 1 and backend.closed == 0
    row = time_case(backend, fields, dict(options, round=2))
    # ceil(10 / 3) = 4 samples in each early round, the rest (2) in the last
    assert row["samples"] == 10 and backend.planned == 1 and backend.closed == 1
    assert not timing._OPEN_CASES


def test_a_round_without_its_open_case_plans_again():
    """A worker restarted half-way has lost the case: the next round plans it afresh."""
    backend = CountingPlans(seconds=1e-4)
    fields = ("fft", "float64", 128, "backward")
    options = dict(FAST, samples=9, measure_memory=False, rounds=3)
    row = time_case(backend, fields, dict(options, round=2))
    assert backend.planned == 1 and backend.closed == 1 and row["samples"] == 9


def test_a_failing_round_closes_the_plan():
    """A backend that raises in a later round: the error propagates, and the plan opened in
    round 0 is closed and forgotten."""

    class FailsLater(CountingPlans):
        armed = False

        def plan(self, case):
            plan = super().plan(case)
            execute = plan.execute

            def maybe_fail(x):
                if FailsLater.armed:
                    raise RuntimeError("gave up")
                return execute(x)

            plan.execute = maybe_fail
            return plan

    backend = FailsLater(seconds=1e-5)
    fields = ("fft", "float64", 64, "backward")
    options = dict(FAST, samples=6, measure_memory=False, rounds=2)
    assert time_case(backend, fields, dict(options, round=0)) is None
    assert backend.planned == 1 and backend.closed == 0 and timing._OPEN_CASES
    FailsLater.armed = True
    with pytest.raises(RuntimeError, match="gave up"):
        time_case(backend, fields, dict(options, round=1))
    assert backend.closed == backend.planned == 1 and not timing._OPEN_CASES


def test_runner_rounds_interleave_cases_and_write_each_row_once(tmp_path):
    from fftgauge.harness.timing.runner import TimingRequest, run_timing

    req = TimingRequest(specs=("busywait[seconds=0.0001]", "null"), kinds=("fft",), dtypes=("float64",),
                        sizes=(16, 32, 64), samples=6, budget_seconds=1.0, measure_memory=False, rounds=3)
    doc = run_timing(req, json_path=str(tmp_path / "t.json"))
    rows = doc["rows"]
    assert len(rows) == 6 and all(r["status"] == "ok" for r in rows)
    assert all(r["samples"] == 6 for r in rows)
    assert doc["request"]["rounds"] == 3
    assert sorted((r["backend"], r["n"]) for r in rows) == sorted(
        (b, n) for b in ("busywait[seconds=0.0001]", "null") for n in (16, 32, 64))


def test_runner_makes_no_row_for_a_kind_the_backend_never_claimed(tmp_path):
    """A plain callable computes fft only: ``time`` without --kinds has fft rows alone; with
    --kinds fft,rfft the rfft case is a skip row saying why."""
    from pathlib import Path

    from fftgauge.harness.timing.runner import TimingRequest, run_timing

    spec = f"{Path(__file__).parent / 'data' / 'sample_adapters.py'}:numpy_forward"
    base = dict(specs=(spec,), dtypes=("float64",), sizes=(16,), samples=3, measure_memory=False, rounds=1)
    plain = run_timing(TimingRequest(kinds=None, **base))["rows"]
    assert [(r["kind"], r["status"]) for r in plain] == [("fft", "ok")]
    asked = run_timing(TimingRequest(kinds=("fft", "rfft"), **base))["rows"]
    assert [(r["kind"], r["status"]) for r in asked] == [("fft", "ok"), ("rfft", "skip")]
    assert "does not compute rfft" in asked[1]["message"]
