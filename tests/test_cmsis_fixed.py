"""CMSIS-DSP's fixed-point inverse and real FFTs (optional: pip install 'fftgauge[cmsis]'),
called directly through ``cmsisdsp`` and judged against numpy.fft of the same integers
(the outside source), then through the battery.

What is verified here: the output shift the documentation gives (log2 N, for the inverse
CFFT, the RFFT and the RIFFT), the documented real-FFT sizes, and what the battery found: the
real FFTs go wrong on a full-scale real input whose exact spectrum is only 0.54 of full scale.
"""

from __future__ import annotations

import numpy as np
import pytest

dsp = pytest.importorskip("cmsisdsp")

from fftgauge.backends.cmsis_dsp import CmsisDspBackend  # noqa: E402
from fftgauge.harness.cases import Case  # noqa: E402
from fftgauge.harness.fixed.checks import fixed_check_case  # noqa: E402

FORMATS = {"q15": (16, np.int16), "q31": (32, np.int32)}


def sqnr_db(exact, got):
    return 10 * np.log10(np.sum(np.abs(exact) ** 2) / np.sum(np.abs(got - exact) ** 2))


def best_shift(exact, got):
    """The k for which got * 2**k is closest to exact (largest SQNR), and that SQNR."""
    scores = {k: sqnr_db(exact, got * 2.0 ** k) for k in range(-2, 16)}
    k = max(scores, key=scores.get)
    return k, scores[k]


def rfft_call(dtype, n, x, inverse=False):
    inst = getattr(dsp, f"arm_rfft_instance_{dtype}")()
    assert getattr(dsp, f"arm_rfft_init_{dtype}")(inst, n, 1 if inverse else 0, 1) == 0
    return np.asarray(getattr(dsp, f"arm_rfft_{dtype}")(inst, x.copy())).astype(np.float64)


@pytest.mark.parametrize("dtype", ["q15", "q31"])
def test_documented_output_shift_of_inverse_and_real_ffts(dtype):
    """CMSIS-DSP documents 'number of bits to upscale' log2 N for the CFFT/CIFFT and the
    RFFT/RIFFT (from memory); numerically, against numpy.fft.ifft * N, numpy.fft.rfft and
    numpy.fft.irfft * N of the same integers, the best shift is log2 N at every size tried
    (noise at half of full scale)."""
    bits, dt = FORMATS[dtype]
    rng = np.random.default_rng(2)
    half_scale = 0.5 * 2 ** (bits - 1)
    for n in (32, 256, 4096):
        t = n.bit_length() - 1
        z = rng.standard_normal(n) + 1j * rng.standard_normal(n)
        x = np.stack([z.real, z.imag], -1) * half_scale / np.max(np.abs(z))
        x = x.round().astype(dt)
        inst = getattr(dsp, f"arm_cfft_instance_{dtype}")()
        assert getattr(dsp, f"arm_cfft_init_{dtype}")(inst, n) == 0
        y = np.asarray(getattr(dsp, f"arm_cfft_{dtype}")(inst, x.reshape(-1).copy(), 1, 1)).astype(float)
        assert best_shift(np.fft.ifft(x[:, 0] + 1j * x[:, 1].astype(float)) * n, y[0::2] + 1j * y[1::2])[0] == t
        r = (rng.standard_normal(n) * half_scale / 4).clip(-half_scale, half_scale).round().astype(dt)
        y = rfft_call(dtype, n, r)
        assert y.shape == (2 * n,)  # the whole spectrum; the adapter keeps bins 0..N/2
        assert best_shift(np.fft.rfft(r.astype(float)), (y[0::2] + 1j * y[1::2])[: n // 2 + 1])[0] == t
        h = x[: n // 2 + 1].copy()
        h[0, 1] = h[n // 2, 1] = 0
        y = rfft_call(dtype, n, h.reshape(-1), inverse=True)
        assert y.shape == (n,)
        assert best_shift(np.fft.irfft(h[:, 0] + 1j * h[:, 1].astype(float), n) * n, y)[0] == t


@pytest.mark.parametrize("dtype", ["q15", "q31"])
def test_documented_real_fft_sizes(dtype):
    """arm_rfft_init_q15/q31 take fftLenReal 32..8192 (the documented list) and refuse 16 and
    16384; the adapter claims exactly that."""
    for n, ok in ((16, False), (32, True), (8192, True), (16384, False)):
        for inverse in (0, 1):
            inst = getattr(dsp, f"arm_rfft_instance_{dtype}")()
            assert (getattr(dsp, f"arm_rfft_init_{dtype}")(inst, n, inverse, 1) == 0) == ok, (n, inverse)
    rule = CmsisDspBackend().capabilities().size_rule("rfft", dtype)
    assert (rule.min_n, rule.max_n) == (32, 8192)


def real_corners(n, bits, dt):
    """n real samples, each at +-full scale: the complex corners (1 + j) j**floor(m/2) of
    length n/2, interleaved (harness/fixed/signals.py, kind rfft)."""
    k = np.arange(n // 2)
    z = (1 + 1j) * (1j ** (k // 2)) * (2 ** (bits - 1) - 1)
    return np.stack([z.real, z.imag], -1).round().astype(dt).reshape(-1)


def test_cmsis_real_ffts_go_wrong_on_a_full_scale_real_input():
    """Found by the battery's overflow check and verified here without it: on a real input of
    samples at +-full scale (the sample pairs at the corners, which the N/2-point complex FFT
    inside arm_rfft_* sees as values of magnitude sqrt 2), the exact spectrum (numpy.fft.rfft
    over N) peaks at only 0.543 of full scale, yet arm_rfft_q15 gives SQNR -3.0 dB at
    N = 64, 256, 1024 (bin 7N/16 comes out (-12767, 341) where the exact value is
    (9888.3, -14798.9): the inner CFFT of N/2 = 32, 128, 512 points, not powers of 4, wraps
    around) and 13.7 dB at N = 32, 128, 512 (it saturates inside); arm_rfft_q31 -3.0 dB at
    every size. A textbook real radix-2 with 1/2 per stage does not overflow on it."""
    for dtype, n, want_db in (("q15", 32, 13.7), ("q15", 64, -3.0), ("q15", 128, 13.7), ("q15", 256, -3.0),
                              ("q31", 32, -3.0), ("q31", 256, -3.0)):
        bits, dt = FORMATS[dtype]
        x = real_corners(n, bits, dt)
        exact = np.fft.rfft(x.astype(float)) / n
        assert np.max(np.abs(exact)) / 2 ** (bits - 1) == pytest.approx(0.543, abs=0.001)
        y = rfft_call(dtype, n, x)
        got = (y[0::2] + 1j * y[1::2])[: n // 2 + 1]
        assert sqnr_db(exact, got) == pytest.approx(want_db, abs=0.2), (dtype, n)
    y = rfft_call("q15", 64, real_corners(64, 16, np.int16))
    assert y[2 * 28: 2 * 28 + 2].tolist() == [-12767, 341]
    row = {r.check: r for r in fixed_check_case(CmsisDspBackend(), Case("rfft", "q15", 64), 1234)}["overflow"]
    assert (row.status, row.diagnosis) == ("fail", "overflow") and "sums wrap around inside" in row.message
    row = {r.check: r for r in fixed_check_case(CmsisDspBackend(), Case("rfft", "q15", 32), 1234)}["overflow"]
    assert (row.status, row.diagnosis) == ("fail", "overflow") and "overflows inside where the reference" in row.message


def test_cmsis_q15_irfft_is_noisier_than_a_radix2():
    """Measured: arm_rfft_q15 with ifftFlagR = 1 at N = 64 on half-spectrum noise at -6 dBFS
    gets an SQNR (against numpy.fft.irfft * N / 2**log2 N of the same integers) more than 10 dB
    below the built-in radix-2 with 1/2 per stage (measured: 45.9 dB against 63.7 dB, the mean
    of four draws; 39.7/56.2 at N = 256, 32.0/48.2 at 1024; the forward arm_rfft_q15 is
    5-7 dB below the reference on the same kind of input)."""
    from fftgauge.harness.fixed.formats import FORMATS as Q
    from fftgauge.harness.fixed.radix2 import FixedRadix2
    from fftgauge.harness.fixed.signals import test_signal

    n = 64
    mine, ref = [], []
    for seed in range(4):
        h = test_signal("noise", n, -6.0, Q["q15"], seed, "irfft")
        exact = np.fft.irfft(h[:, 0] + 1j * h[:, 1].astype(float), n)
        mine.append(sqnr_db(exact, rfft_call("q15", n, h.reshape(-1), inverse=True)))
        ref.append(sqnr_db(exact, FixedRadix2(Q["q15"], "stage").run("irfft", h, n).pairs[:, 0].astype(float)))
    assert np.mean(ref) - np.mean(mine) > 10.0, (mine, ref)
    row = {r.check: r for r in fixed_check_case(CmsisDspBackend(), Case("irfft", "q15", n), 1234)}["sqnr"]
    assert row.status == "fail" and row.value > 10.0


def test_cmsis_fixed_kinds_pass_the_behaviour_and_shape_checks():
    """ifft, rfft, irfft in q15: the caller's input kept, bit-for-bit repeats, the right shapes,
    concurrent calls right; round-trip rows are measured (not skipped)."""
    for kind in ("ifft", "rfft", "irfft"):
        rows = {r.check: r for r in fixed_check_case(CmsisDspBackend(), Case(kind, "q15", 256), 1234)}
        for check in ("input-intact", "repeatable", "shape", "concurrent", "impulse"):
            assert rows[check].status == "pass", (kind, check, rows[check].message)
        assert rows["round-trip"].status in ("pass", "fail") and rows["round-trip"].limit > 0
