"""The per-case budget (harness/battery/budget.py) and the size classes a backend does not
handle (harness/battery/unclaimed.py); a user's own pure-Python radix-2 end to end.

Sources: the work models n log2 n and n^2 (the definitions the estimate extrapolates with,
evaluated here in closed form); a counting backend for the calls one case makes; a fake clock
for the probe (no timing assertion).
"""

from __future__ import annotations

import math
import os
import subprocess
import sys
import threading
from pathlib import Path

import numpy as np
import pytest

from fftgauge.backends.base import Backend, Capabilities, FunctionPlan
from fftgauge.harness.battery import budget, unclaimed
from fftgauge.harness.battery.checks import check_case
from fftgauge.harness.cases import Case

REPO_ROOT = Path(__file__).resolve().parent.parent


def test_estimate_follows_n_log_n_and_n_squared_work():
    """Probes following c n log2 n extrapolate exactly; probes following c n^2 within 10%
    (the growth exponent is measured in the n log2 n model between the two largest probes)."""
    fast = [(n, 1e-8 * n * math.log2(n)) for n in (16, 32, 64, 128)]
    assert budget.call_seconds_at(fast, 4096) == pytest.approx(1e-8 * 4096 * 12, rel=1e-9)
    slow = [(n, 1e-9 * n * n) for n in (256, 512, 1024)]
    assert budget.call_seconds_at(slow, 4096) == pytest.approx(1e-9 * 4096 ** 2, rel=0.1)
    # within the measured range: the next measured size's time (an upper bound)
    assert budget.call_seconds_at(fast, 20) == fast[1][1]
    assert budget.call_seconds_at([(16, None)], 64) is None


def test_time_reason_says_the_estimate_and_the_budget():
    probes = [(n, 1e-4 * n / 16) for n in (16, 32, 64)]
    assert budget.time_reason("mine", probes, Case("fft", "float64", 64), budget_seconds=10.0) is None
    reason = budget.time_reason("mine", probes, Case("fft", "float64", 1 << 16), budget_seconds=10.0)
    assert reason.startswith(budget.TIME_SKIP_PREFIX) and "10 s" in reason and "--case-budget" in reason
    assert budget.time_reason("mine", probes, Case("fft", "float64", 1 << 16), budget_seconds=None) is None


class _FakeClock:
    def __init__(self):
        self.now = 0.0

    def __call__(self):
        return self.now


class _LinearBackend(Backend):
    """A backend whose call at size n advances a fake clock by n microseconds (and raises at odd n)."""

    name = "linear"

    def __init__(self, clock):
        super().__init__()
        self.clock = clock
        self.sizes = []

    @property
    def version(self):
        return "1"

    def capabilities(self):
        return Capabilities()

    def plan(self, case):
        def run(x):
            self.sizes.append(case.n)
            if case.n % 2:
                raise ValueError("odd")
            self.clock.now += case.n * 1e-6
            return np.fft.fft(x)
        return FunctionPlan(case, run)


def test_probe_stops_after_a_long_call_and_records_sizes_that_raise():
    clock = _FakeClock()
    backend = _LinearBackend(clock)
    sizes = budget.probe_sizes([1, 2, 8, 16, 17, 33, 64, 100, 128, 1 << 14, 1 << 16, 1 << 17, 1 << 20])
    assert sizes == [16, 33, 100, 1 << 14, 1 << 16, 1 << 17, 1 << 20]
    got = budget.measure_call_seconds(backend, [("fft", "float64", n, "backward") for n in sizes], clock=clock)
    # 2^16 us = 0.066 s >= PROBE_STOP_SECONDS: the probe stops there
    assert [n for n, _ in got] == [16, 33, 100, 1 << 14, 1 << 16]
    assert dict(got)[33] is None and dict(got)[1 << 16] == pytest.approx(65536e-6)


class _CountingBackend(Backend):
    name = "counting"

    def __init__(self):
        super().__init__()
        self.calls = 0
        self.lock = threading.Lock()

    @property
    def version(self):
        return "1"

    def capabilities(self):
        return Capabilities()

    def plan(self, case):
        def run(x):
            with self.lock:
                self.calls += 1
            if case.kind == "irfft":
                return np.fft.irfft(x, case.n, norm=case.norm)
            return getattr(np.fft, case.kind)(x, norm=case.norm)
        return FunctionPlan(case, run)


@pytest.mark.parametrize("kind", ["fft", "ifft", "rfft", "irfft"])
def test_a_case_makes_at_most_calls_per_case_calls(kind):
    """CALLS_PER_CASE bounds the calls every check of one case makes together (counted)."""
    for n in (1, 2, 7, 64):
        backend = _CountingBackend()
        rows = check_case(backend, Case(kind, "float64", n), 1)
        assert all(r.status in ("pass", "skip") for r in rows), [r for r in rows if r.status not in ("pass", "skip")]
        assert 0 < backend.calls <= budget.CALLS_PER_CASE, (kind, n, backend.calls)


# -- size classes ----------------------------------------------------------------------------

def test_size_classes():
    ran = set(range(1, 17))
    assert unclaimed.size_class({n for n in ran if n & (n - 1)}, ran) == ("size that is not a power of two",
                                                                          "sizes=pow2")
    assert unclaimed.size_class({3, 5, 7, 9, 11, 13, 15}, ran)[0] == "odd size"
    assert unclaimed.size_class({13, 14, 15, 16}, ran) == ("size above 12", "max_n=12")
    assert unclaimed.size_class({3, 4}, ran) is None            # no class
    assert unclaimed.size_class({16}, ran) is None              # one size is too few to tell
    assert unclaimed.size_class(ran, ran) is None               # nothing ran: a broken backend, not a claim
    assert unclaimed.spec_with_option("f.py:fft", "sizes=pow2") == "f.py:fft[sizes=pow2]"
    assert unclaimed.spec_with_option("f.py:fft[label=a]", "sizes=pow2") == "f.py:fft[label=a,sizes=pow2]"


def _row(n, status, message="", check="accuracy", backend="mine"):
    return {"backend": backend, "kind": "fft", "dtype": "float64", "norm": "backward", "n": n, "check": check,
            "status": status, "message": message}


def test_one_error_on_every_non_power_of_two_becomes_skip_rows_with_the_spec_option():
    rows = []
    for n in range(1, 13):
        for check in ("accuracy", "shape"):
            rows.append(_row(n, "pass", check=check) if n & (n - 1) == 0 else
                        _row(n, "error", f"the backend raised ValueError: size must be a power of two, got {n}", check))
    rows.append(_row(8, "error", "MemoryError", check="extra", backend="other"))
    backends = {"mine": {"spec": "f.py:fft", "options": {"sizes": {}, "max_n": {}}}, "other": {"spec": "other"}}
    out = unclaimed.unclaim_size_classes(rows, backends)
    skips = [r for r in out if r["status"] == "skip"]
    assert sorted(r["n"] for r in skips) == [3, 5, 6, 7, 9, 10, 11, 12] and {r["check"] for r in skips} == {"all"}
    assert len({r["message"] for r in skips}) == 1
    assert "not a power of two" in skips[0]["message"] and "'f.py:fft[sizes=pow2]'" in skips[0]["message"]
    assert [r for r in out if r["status"] != "skip"] == [r for r in rows if r["status"] != "error" or
                                                         r["backend"] == "other"]
    lines = unclaimed.not_run_lines(out)
    assert len(lines) == 1 and "8 cases" in lines[0]


def test_errors_of_different_causes_stay_errors():
    rows = [_row(n, "error", "ValueError: a" if n % 3 else "TypeError: b") for n in (3, 5, 6, 7, 9, 10)]
    rows += [_row(n, "pass") for n in (1, 2, 4, 8)]
    assert unclaimed.unclaim_size_classes(rows, {}) == rows


# -- a user's own pure-Python radix-2 from the command line ---------------------------------------

def _check(*args):
    env = {**os.environ, "PYTHONPATH": str(REPO_ROOT)}
    return subprocess.run([sys.executable, "-m", "fftgauge", "check", "--quiet", *args], cwd=REPO_ROOT, env=env,
                          capture_output=True, text=True, timeout=300)


@pytest.mark.timeout(300)
def test_user_radix2_passes_with_the_sizes_it_does_not_handle_named(tmp_path):
    """tests/data/user_radix2.py (correct, powers of two only, raises otherwise) ends in PASS
    with one line naming the sizes it does not handle and the SPEC option that claims them;
    with a budget no call can meet, its cases are skipped for time, with the estimate."""
    done = _check("--backend", "tests/data/user_radix2.py:fft", "--sizes", "1..20,64", "--dtypes", "float64",
                  "--json", str(tmp_path / "a.json"))
    assert done.returncode == 0, done.stdout + done.stderr
    assert done.stdout.startswith("PASS")
    lines = [line for line in done.stdout.splitlines() if "not claimed:" in line]
    assert len(lines) == 1 and "'tests/data/user_radix2.py:fft[sizes=pow2]'" in lines[0], done.stdout
    done = _check("--backend", "tests/data/user_radix2.py:fft", "--sizes", "16,32", "--dtypes", "float64",
                  "--case-budget", "1e-9", "--json", str(tmp_path / "b.json"))
    assert done.returncode == 0, done.stdout + done.stderr
    assert "skipped for time" in done.stdout and "n = 16, 32: skipped for time" in done.stdout, done.stdout


def test_a_size_class_extends_to_sizes_beyond_those_it_was_found_among():
    """in_size_class, by each class's definition: 3000 is no power of two (2^11 = 2048 <
    3000 < 4096 = 2^12), 4096 is one; 1025 is odd, 1 is not counted as odd; 13 > 12."""
    pow2 = ("size that is not a power of two", "sizes=pow2")
    assert unclaimed.in_size_class(pow2, 3000) and not unclaimed.in_size_class(pow2, 4096)
    odd = ("odd size", None)
    assert unclaimed.in_size_class(odd, 1025) and not unclaimed.in_size_class(odd, 1)
    assert not unclaimed.in_size_class(odd, 1024)
    above = ("size above 12", "max_n=12")
    assert unclaimed.in_size_class(above, 13) and not unclaimed.in_size_class(above, 12)
