"""The structural checks of q15/q31 cases (harness/fixed/structure.py) and their limits in
LSBs (harness/fixed/bounds.py).

Sources: the bound's derivation is in harness/fixed/bounds.py (worst-case propagation of
rounding and twiddle errors, after Oppenheim & Schafer, 3rd ed., section 9.7, from memory); it
is verified here by simulation: no error of the built-in reference (every scaling, rounding,
4 widths of twiddles, N = 1..4096, three signals) exceeds it. The exact DFT is scipy on long
double (harness/battery/reference.py). Broken FFTs written here (an offset, a shared scratch
buffer, a wrong shape) and in tests/data/fixed_point_ffts.py are each caught and diagnosed.
"""

from __future__ import annotations

import sys
import time
from pathlib import Path

import numpy as np
import pytest

from fftgauge.backends.fixed_radix2 import FixedRadix2Backend
from fftgauge.harness.cases import Case
from fftgauge.harness.fixed.bounds import error_bound_lsb, headroom_level_dbfs
from fftgauge.harness.fixed.checks import FIXED_CHECKS, fixed_check_case
from fftgauge.harness.fixed.formats import FORMATS, pairs_to_complex
from fftgauge.harness.fixed.measure import exact_output
from fftgauge.harness.fixed.radix2 import SCALINGS, FixedRadix2
from fftgauge.harness.fixed.signals import test_signal as signal_of

sys.path.insert(0, str(Path(__file__).parent / "data"))
import fixed_point_ffts as twins  # noqa: E402

STRUCTURAL = ("linearity", "impulse", "time-shift", "concurrent", "shape")


def rows_of(backend, n=64, dtype="q15"):
    return {r.check: r for r in fixed_check_case(backend, Case("fft", dtype, n), 1234)}


@pytest.mark.parametrize("dtype", ["q15", "q31"])
@pytest.mark.parametrize("scaling", SCALINGS)
def test_bound_holds_for_the_reference(dtype, scaling):
    """No measured error exceeds the derived bound (every rounding rule, twiddles of the
    format's width and of 8 bits, N = 1..4096, tone/noise/impulse at the headroom level);
    with 1/2 per stage the worst measured error is at least a fifth of it (not vacuous)."""
    fmt = FORMATS[dtype]
    worst = 0.0
    for rounding in ("truncate", "round-half-up", "convergent"):
        for tb in (None, 8):
            for t in range(13):
                n = 1 << t
                bound = error_bound_lsb(scaling, n, fmt, tb)
                for signal in ("noise", "tone", "impulse"):
                    x = signal_of(signal, n, headroom_level_dbfs(scaling, n), fmt, t)
                    r = FixedRadix2(fmt, scaling, rounding, "saturate", tb).transform(x)
                    err = float(np.max(np.abs(pairs_to_complex(r.pairs) - exact_output(x, r.exponent))))
                    assert err <= bound, (rounding, tb, n, signal, err, bound)
                    worst = max(worst, err / bound if bound else 0.0)
    if scaling == "stage":
        assert worst >= 0.2, worst


def test_bound_values():
    """By hand from the recursion (harness/fixed/bounds.py), Q15, 16-bit twiddles:
    rho = sqrt 2, tau = 2, w = 1 + sqrt 2 / 2**15. 1/2 per stage, N = 2: (0 + 2 + sqrt 2)/2 +
    sqrt 2 = 3.1213; no scaling, N = 2: 2 + sqrt 2; N = 1: nothing to round."""
    q15 = FORMATS["q15"]
    assert error_bound_lsb("stage", 2, q15) == pytest.approx(1 + 1.5 * 2 ** 0.5, rel=1e-12)
    assert error_bound_lsb("none", 2, q15) == pytest.approx(2 + 2 ** 0.5, rel=1e-12)
    assert error_bound_lsb("stage", 1, q15) == 0.0
    assert error_bound_lsb("stage", 4, q15, twiddles=False) < error_bound_lsb("stage", 4, q15)
    with pytest.raises(ValueError):
        error_bound_lsb("stage", 12, q15)


def test_correct_backends_pass_every_structural_check():
    """The reference with each scaling rule and an independent scalar routine pass; the
    round trip passes where the backend has an inverse and an input level leaves signal
    (the reference with scaling), else it is a skip row saying why."""
    for backend in [FixedRadix2Backend(scaling=s) for s in SCALINGS] + [twins.ScalarQ15()]:
        rows = rows_of(backend, n=32)
        assert list(rows) == list(FIXED_CHECKS)
        assert all(rows[c].status == "pass" for c in STRUCTURAL), [rows[c].message for c in STRUCTURAL]
        trip = rows["round-trip"]
        if isinstance(backend, FixedRadix2Backend):  # without scaling too: 16 LSB of input at n = 32
            assert trip.status == "pass" and trip.value <= trip.limit, trip.message
        else:  # the scalar routine claims no ifft
            assert trip.status == "skip" and "ifft" in trip.message, trip.message
        assert all(rows[c].value <= rows[c].limit for c in ("linearity", "impulse", "time-shift"))


def test_wrong_shift_fails_impulse_with_scaling_shift():
    """Declares 1/2 per stage, does none: the impulse is right under shift 0, not log2 N."""
    for n in (16, 64):
        row = rows_of(twins.WrongShift(), n=n)["impulse"]
        assert (row.status, row.diagnosis) == ("fail", "scaling-shift"), row.message
        assert f"shift of 0 bits, not the declared {n.bit_length() - 1}" in row.message


def test_eight_bit_twiddles_fail_the_time_shift():
    row = rows_of(twins.EightBitTwiddles(), n=16)["time-shift"]
    assert (row.status, row.diagnosis) == ("fail", "precision") and row.value > row.limit


class Offset(FixedRadix2Backend):
    """Adds 100 LSB to the real part of bin 0: not linear (y(x1 + x2) - y(x1) - y(x2) = -100)."""

    def plan(self, case):
        inner = super().plan(case)
        run = inner.execute

        def execute(x):
            y = np.array(run(x), dtype=np.int64)
            y[0, 0] += 100
            return y.astype(np.int16 if case.dtype == "q15" else np.int32)
        inner.execute = execute
        return inner


class SharedScratch(FixedRadix2Backend):
    """Every plan writes its result into one module-wide buffer and reads it back a little
    later: correct alone, mixed up when threads call at once."""

    scratch = {}

    def plan(self, case):
        inner = super().plan(case)
        run = inner.execute

        def execute(x):
            SharedScratch.scratch["out"] = np.array(run(x))
            time.sleep(0.002)
            return SharedScratch.scratch["out"].copy()
        inner.execute = execute
        return inner


class Flat(FixedRadix2Backend):
    """Returns its pairs as an (n, 1, 2) array."""

    def plan(self, case):
        inner = super().plan(case)
        run = inner.execute
        inner.execute = lambda x: np.asarray(run(x))[:, None, :]
        return inner


def test_offset_fails_linearity():
    rows = rows_of(Offset(), n=16)
    assert (rows["linearity"].status, rows["linearity"].diagnosis) == ("fail", "unknown")
    assert rows["linearity"].value == pytest.approx(100.0, abs=30)


def test_shared_scratch_fails_concurrent():
    rows = rows_of(SharedScratch(), n=64)
    assert (rows["concurrent"].status, rows["concurrent"].diagnosis) == ("fail", "thread-unsafe")
    assert rows["repeatable"].status == "pass"  # alone it is right


def test_wrong_shape_fails_with_shape():
    rows = rows_of(Flat(), n=16)
    assert (rows["shape"].status, rows["shape"].diagnosis) == ("fail", "shape")


def test_cmsis_q15_wraps_at_sizes_that_are_not_powers_of_four():
    """Found by the battery and verified here without it: arm_cfft_q15 on the overload input
    (every part at full scale; bin N/8 exactly (1 + sqrt 2)/2 * 32767 = 39553.3 real) gives
    the rail 32765 at N = 64 and a wrapped -25990 (39546 - 65536) at N = 32 and 128. The exact
    value is numpy.fft.fft of the same integers over N."""
    dsp = pytest.importorskip("cmsisdsp")
    for n, wraps in ((32, True), (64, False), (128, True)):
        k = np.arange(n)
        z = (1 + 1j) * (1j ** (k // 2)) * 32767
        x = np.stack([z.real, z.imag], -1).round().astype(np.int16)
        inst = dsp.arm_cfft_instance_q15()
        assert dsp.arm_cfft_init_q15(inst, n) == 0
        y = np.asarray(dsp.arm_cfft_q15(inst, x.reshape(-1).copy(), 0, 1)).reshape(-1, 2)
        exact = np.fft.fft(x[:, 0] + 1j * x[:, 1]) / n
        assert exact[n // 8].real == pytest.approx(39553.3, abs=0.1)
        assert (y[n // 8, 0] < 0) == wraps, (n, y[n // 8])
        from fftgauge.backends.cmsis_dsp import CmsisDspBackend
        row = rows_of(CmsisDspBackend(), n=n)["overflow"]
        assert (row.status == "fail") == wraps, row.message
