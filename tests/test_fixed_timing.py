"""Timing of q15/q31 cases: the row of a fixed-point case on a fake clock, and its rate shown
as integer operations per second (Gop/s) in the summary table, not GFLOP/s.

Source: the conventional count 5 N log2 N per complex transform (common practice in FFT
benchmarking), the same for fixed point; N = 1024 at 10 us: 51200 / 1e-5 / 1e9 = 5.12 (by hand).
"""

from __future__ import annotations

import numpy as np
import pytest

from fake_clock import FakeBackend, FakeClock
from fftgauge.harness.report.time_tables import TIMING_SUMMARY_HEADER, timing_summary
from fftgauge.harness.timing.case_job import time_case

EXACT = dict(samples=9, min_samples=5, budget_seconds=None, warmup_seconds=0.0, measure_memory=False)


class InputKeeping(FakeBackend):
    """The fake backend, remembering the input its plans were given."""

    def plan(self, case):
        plan = super().plan(case)
        run = plan.execute

        def execute(x):
            self.seen = x
            return run(x)
        plan.execute = execute
        return plan


def test_q15_case_is_timed_on_integer_pairs():
    """A q15 fft of N = 1024 at 10 us per call: the row holds 5.12 (5 N log2 N / s / 1e9), and
    the plan was given (n, 2) int16 pairs (noise at -6 dBFS: largest magnitude 10**(-6/20) = 0.501 of full scale)."""
    clock = FakeClock()
    backend = InputKeeping(clock, 10_000)
    row = time_case(backend, ("fft", "q15", 1024, "backward"), dict(EXACT), clock)
    assert row["seconds"] == pytest.approx(1e-5, rel=1e-12)
    assert row["gflops"] == pytest.approx(5.12, rel=1e-12)
    x = np.asarray(backend.seen)
    assert x.shape == (1024, 2) and x.dtype == np.int16
    assert np.max(np.hypot(x[:, 0], x[:, 1])) == pytest.approx(10 ** (-6 / 20) * 32768, abs=1.0)


def test_summary_says_gop_for_fixed_point_and_gflops_for_floats():
    rows = [{"backend": "b", "kind": "fft", "dtype": d, "n": 1024, "seconds": 1e-5, "gflops": 5.12,
             "plan_seconds": 0.0, "status": "ok"} for d in ("q15", "float64")]
    lines = {line[2]: line for line in timing_summary(rows)}
    rate = TIMING_SUMMARY_HEADER.index("GFLOP/s at largest N")
    assert lines["q15"][rate] == "5.12 Gop/s" and lines["q15"][rate + 1] == "5.12 Gop/s"
    assert lines["float64"][rate] == "5.12"


@pytest.mark.parametrize("kind,shape", [("rfft", (1024,)), ("irfft", (513, 2)), ("ifft", (1024, 2))])
def test_real_and_inverse_q15_cases_are_timed_on_their_own_layouts(kind, shape):
    """A q15 rfft is given n int16 reals, an irfft n/2 + 1 pairs, an ifft n pairs
    (docs/fixed-point.md layouts); the rate is 2.5 N log2 N for the real kinds (the
    contract's count): 25600 / 1e-5 / 1e9 = 2.56 (by hand)."""
    clock = FakeClock()
    backend = InputKeeping(clock, 10_000)
    row = time_case(backend, (kind, "q15", 1024, "backward"), dict(EXACT), clock)
    x = np.asarray(backend.seen)
    assert x.shape == shape and x.dtype == np.int16
    assert row["gflops"] == pytest.approx(2.56 if kind != "ifft" else 5.12, rel=1e-12)


def test_cmsis_irfft_q15_is_timed_without_the_float_packing():
    """cmsis-dsp declares packing=dc-nyquist for its float32 real FFTs; its q15 irfft plan gets
    the fixed-point half spectrum as pairs, not repacked (it once raised in pack_half_spectrum)."""
    pytest.importorskip("cmsisdsp")
    from fftgauge.backends.cmsis_dsp import CmsisDspBackend
    from fftgauge.harness.battery.conventions import declared_input_plan
    from fftgauge.harness.cases import Case

    backend = CmsisDspBackend()
    plan = backend.plan(Case("irfft", "q15", 64))
    assert declared_input_plan(backend, plan) is plan
    assert np.asarray(plan.execute(np.zeros((33, 2), dtype=np.int16))).shape == (64,)
