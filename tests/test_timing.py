"""fftgauge.harness.timing.timer: the timer on synthetic plans of known cost, the overhead floor, the row
fields and their formulas, and the job function the worker runs.

The busy-wait tests are the one place where a measured time is asserted, as the timing
issue asks: with a loose ratio (median within 0.9x-1.5x of the busy-wait), which holds on a
shared 2-core machine.
"""

from __future__ import annotations

import dataclasses
import gc
import math
import multiprocessing
import pickle
import weakref
from concurrent.futures import ProcessPoolExecutor

import numpy as np
import pytest

from fftgauge.backends.base import Plan
from fftgauge.backends.busywait import BusyWaitBackend
from fftgauge.backends.null import NullBackend
from fftgauge.backends.numpy_fft import NumpyBackend
from fftgauge.harness.cases import Case
from fftgauge.harness.errors import UnsupportedCase, UsageError
from fftgauge.harness.battery.inputs import case_rng, random_input
from fftgauge.harness.rows import TimeRow
from fftgauge.harness.timing.caches import FALLBACK_EVICTION_BYTES, last_level_cache_bytes
from fftgauge.harness.timing.timer import TimerSettings, Timer, gflops, limit_threads, measure, ns_per_nlogn, time_case
import fftgauge.harness.timing.caches as caches
import fftgauge.harness.timing.timer as timing

CASE = Case("fft", "float64", 1024)
X = random_input(CASE, case_rng(0, CASE))
FAST = dict(samples=9, min_samples=5, budget_seconds=1.0, warmup_seconds=1e-3)


def _closest_of_attempts(timer: Timer, plan: Plan, seconds: float, attempts: int = 3):
    """Return the measurement whose median is closest to ``seconds`` over a few attempts.

    A busy-wait spins on the wall clock, so when another process takes the CPU in the
    middle of a sample, that sample grows by the time slice lost; on a shared 2-core machine
    more than half the samples of one attempt can be hit. Trying again (at most 3 times)
    keeps the check meaningful (a timer that mis-divides by loops, or subtracts the wrong
    floor, misses on every attempt) without making it flaky under load.
    """
    found = []
    for _ in range(attempts):
        m = timer.measure(plan, X)
        found.append(m)
        if 0.9 * seconds <= m.seconds <= 1.5 * seconds:
            break
    return min(found, key=lambda m: abs(math.log(m.seconds / seconds)) if m.seconds > 0 else math.inf)


@pytest.mark.parametrize("seconds", [1e-3, 2e-4])
def test_busywait_cost_is_recovered(seconds):
    m = _closest_of_attempts(Timer(TimerSettings(**FAST)), BusyWaitBackend(seconds=seconds).plan(CASE), seconds)
    assert 0.9 * seconds <= m.seconds <= 1.5 * seconds, m
    assert m.seconds_low <= m.seconds <= m.seconds_high
    # one sample lasts about the target (half of it at least, even if the autorange was disturbed)
    assert m.loops * seconds >= 0.5 * TimerSettings().target_sample_seconds


def test_cold_cache_eviction_is_outside_the_timed_region():
    """Evicting 32 MiB takes milliseconds; the 1 ms busy-wait must still read as ~1 ms."""
    timer = Timer(TimerSettings(cold_cache=True, eviction_bytes=32 * 2**20, **FAST))
    m = _closest_of_attempts(timer, BusyWaitBackend(seconds=1e-3).plan(CASE), 1e-3)
    assert m.cold_cache and m.loops == 1
    assert 0.9e-3 <= m.seconds <= 1.5e-3, m


def test_null_backend_reads_its_floor_after_subtraction():
    """Only the empty loop is subtracted: a do-nothing backend then reads the cost of one
    Python call (its floor), far below a microsecond, and the loop itself is cheaper still."""
    m = measure(NullBackend().plan(CASE), X, samples=15, budget_seconds=1.0, warmup_seconds=1e-3)
    assert 0.0 <= m.overhead_seconds < m.floor_seconds < 1e-6, m
    assert abs(m.seconds - m.floor_seconds) < 0.5 * m.floor_seconds, m
    raw = measure(NullBackend().plan(CASE), X, samples=15, budget_seconds=1.0, warmup_seconds=1e-3,
                  subtract_overhead=False)
    assert raw.seconds > 0.5 * raw.overhead_seconds, raw  # unsubtracted, the floor is all there is


def test_measurement_fields_are_consistent():
    m = measure(NumpyBackend().plan(CASE), X, **FAST)
    assert m.samples == len(m.sample_seconds) == 9
    assert m.loops >= 1
    assert m.seconds_low <= m.seconds <= m.seconds_high
    assert m.seconds == pytest.approx(float(np.median(m.sample_seconds)))
    assert min(m.sample_seconds) <= m.seconds_low and m.seconds_high <= max(m.sample_seconds)
    assert m.coverage == pytest.approx(0.9609375)  # n = 9: x_(2)..x_(8), 1 - 2*10/512 (hand)


def test_budget_stops_at_min_samples():
    m = measure(BusyWaitBackend(seconds=1e-4).plan(CASE), X, samples=50, min_samples=3,
                budget_seconds=0.0, warmup_seconds=0.0)
    assert m.samples == 3


class _Recorder(Plan):
    """Records, at every call, whether gc is enabled and how many earlier outputs are alive."""

    def __init__(self, case):
        super().__init__(case)
        self.gc_states: list[bool] = []
        self.alive_at_call: list[int] = []
        self._refs: list[weakref.ref] = []

    def execute(self, x):
        self.gc_states.append(gc.isenabled())
        self.alive_at_call.append(sum(r() is not None for r in self._refs))
        y = np.empty(4)
        self._refs.append(weakref.ref(y))
        return y


def test_gc_paused_during_samples_and_outputs_not_kept():
    plan = _Recorder(CASE)
    assert gc.isenabled()
    measure(plan, X, samples=5, budget_seconds=None, warmup_seconds=0.0, target_sample_seconds=1e-4)
    assert gc.isenabled()
    assert plan.gc_states and not any(plan.gc_states)
    assert max(plan.alive_at_call) == 0


def test_caller_input_is_not_modified():
    class Overwrite(Plan):
        def execute(self, x):
            x *= 2
            return x

    x = X.copy()
    measure(Overwrite(CASE), x, samples=5, warmup_seconds=0.0, target_sample_seconds=1e-4)
    np.testing.assert_array_equal(x, X)


# -- rates ----------------------------------------------------------------------------------

def test_rate_formulas_n1024():
    """Pseudo-flop convention (common practice in FFT benchmarking): 5 N log2 N for a complex
    transform, 2.5 N log2 N for a real one; N = 1024: 5 * 1024 * 10 = 51200 (hand)."""
    row = time_case(BusyWaitBackend(seconds=1e-4), ("fft", "float64", 1024, "backward"),
                    dict(FAST, measure_memory=False))
    assert row["flops"] == 51200
    assert row["gflops"] == pytest.approx(51200 / row["seconds"] / 1e9)
    assert row["ns_per_nlogn"] == pytest.approx(row["seconds"] * 1e9 / (1024 * 10))
    real = time_case(BusyWaitBackend(seconds=1e-4), ("rfft", "float32", 1024, "backward"),
                     dict(FAST, measure_memory=False))
    assert real["flops"] == 25600


def test_rate_helpers_edge_cases():
    assert ns_per_nlogn(1e-6, 1) is None
    assert ns_per_nlogn(2e-6, 4) == pytest.approx(2e3 / 8)
    assert gflops(1e9, 0.5) == pytest.approx(2.0)
    assert gflops(1e9, 0.0) == 0.0 and gflops(1e9, -1e-9) == 0.0


# -- time_case ------------------------------------------------------------------------------

def test_time_case_returns_every_time_row_field():
    row = time_case(NumpyBackend(), ("rfft", "float64", 4096, "ortho"), dict(FAST, seed=3))
    names = [f.name for f in dataclasses.fields(TimeRow)]
    assert all(name in row for name in names)
    rebuilt = TimeRow(**{k: row[k] for k in names})
    assert rebuilt.as_dict() == {k: row[k] for k in names}
    assert (row["backend"], row["kind"], row["n"], row["norm"], row["threads"]) == ("numpy", "rfft", 4096, "ortho", 1)
    assert row["plan_seconds"] >= 0.0 and row["status"] == "ok"
    assert row["seconds_low"] <= row["seconds"] <= row["seconds_high"]
    assert isinstance(row["peak_bytes"], int) and row["peak_bytes"] >= 0
    assert row["in_place"] is False
    assert row["overhead_seconds"] > 0 and row["memory_method"].startswith("tracemalloc")


def test_time_case_flags_null_as_in_place_and_below_floor():
    row = time_case(NullBackend(), ("fft", "float64", 64, "backward"), dict(FAST, measure_memory=False))
    assert row["in_place"] is True and row["peak_bytes"] is None and row["memory_method"] is None
    if row["seconds"] <= 0:
        assert row["gflops"] == 0.0 and "floor" in row["message"]


def test_time_case_records_plan_time():
    class SlowPlanning(BusyWaitBackend):
        def plan(self, case):
            BusyWaitBackend(seconds=0.02).plan(case).execute(None)
            return super().plan(case)

    row = time_case(SlowPlanning(seconds=1e-4), ("fft", "float64", 256, "backward"), dict(FAST, measure_memory=False))
    assert row["plan_seconds"] >= 0.02


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
