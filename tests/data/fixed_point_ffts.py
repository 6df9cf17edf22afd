"""Fixed-point FFTs written for the tests, in plain Python integers (no numpy arithmetic):
a scalar radix-2 decimation in time whose every rounding is an exact rational operation
(``fractions.Fraction``) and whose twiddles come from mpmath at 50 digits, with the design
choices of a real routine as parameters, and backends around it: a correct one and broken
twins (wrong declared shift, no saturation, truncation where rounding is declared, 8-bit
twiddles).

It is independent of fftgauge's own fixed-point code (tests/test_fixed_point.py compares
the two bit for bit at N <= 16).
"""

from __future__ import annotations

import math
from fractions import Fraction

import mpmath
import numpy as np

from fftgauge import Backend, Capabilities, FunctionPlan
from fftgauge.harness.fixed.declared import FixedScaling

mpmath.mp.dps = 50


def rshift(v: int, s: int, rounding: str) -> int:
    """Return v / 2**s rounded by ``rounding``, computed on exact rationals."""
    if s == 0:
        return v
    q = Fraction(v, 1 << s)
    if rounding == "truncate":
        return math.floor(q)
    if rounding == "round-half-up":
        return math.floor(q + Fraction(1, 2))
    return round(q)  # Python rounds a Fraction half to even (convergent)


def fit(v: int, bits: int, overflow: str) -> int:
    """Return v saturated to, or wrapped modulo 2**bits into, the signed range of ``bits``."""
    lo, hi = -(1 << (bits - 1)), (1 << (bits - 1)) - 1
    if overflow == "saturate":
        return max(lo, min(hi, v))
    return (v - lo) % (1 << bits) + lo


def twiddle(j: int, m: int, tb: int) -> tuple[int, int]:
    """Return exp(-2 pi i j/m) rounded to tb-bit fractions (mpmath, 50 digits), saturated."""
    one, top = 1 << (tb - 1), (1 << (tb - 1)) - 1
    ang = -2 * mpmath.pi * j / m
    c, s = (int(mpmath.nint(mpmath.cos(ang) * one)), int(mpmath.nint(mpmath.sin(ang) * one)))
    return max(-top, min(top, c)), max(-top, min(top, s))


def scalar_fft(x: list[tuple[int, int]], bits: int, scaling: str, rounding: str, overflow: str = "saturate",
               twiddle_bits: int | None = None) -> tuple[list[tuple[int, int]], int]:
    """Return the radix-2 DIT of integer pairs ``x`` and the output shift (exponent)."""
    n = len(x)
    t = n.bit_length() - 1
    tb = twiddle_bits or bits
    data = [list(x[int(format(i, f"0{t}b")[::-1], 2) if t else 0]) for i in range(n)]
    exponent = 0
    if scaling == "input":
        data = [[rshift(re, t, rounding), rshift(im, t, rounding)] for re, im in data]
        exponent = t
    m = 2
    while m <= n:
        if scaling == "bfp":
            half = 1 << (bits - 2)
            if max(re * re + im * im for re, im in data) >= half * half:
                data = [[rshift(re, 1, rounding), rshift(im, 1, rounding)] for re, im in data]
                exponent += 1
        for k in range(0, n, m):
            for j in range(m // 2):
                wr, wi = twiddle(j, m, tb)
                (ar, ai), (br, bi) = data[k + j], data[k + j + m // 2]
                tr = rshift(br * wr - bi * wi, tb - 1, rounding)
                ti = rshift(br * wi + bi * wr, tb - 1, rounding)
                out = [ar + tr, ai + ti, ar - tr, ai - ti]
                if scaling == "stage":
                    out = [rshift(v, 1, rounding) for v in out]
                out = [fit(v, bits, overflow) for v in out]
                data[k + j], data[k + j + m // 2] = out[:2], out[2:]
        if scaling == "stage":
            exponent += 1
        m *= 2
    return [tuple(p) for p in data], exponent


class ScalarQ15(Backend):
    """A Q15 backend around :func:`scalar_fft`; subclasses declare one thing and do another."""

    name = "scalar-q15"
    description = "a scalar Q15 radix-2 written for the tests"
    declared = FixedScaling(output_shift="log2n", scaling="stage", rounding="round-half-up")
    computes = {"scaling": "stage", "rounding": "round-half-up", "overflow": "saturate", "twiddle_bits": None}

    def capabilities(self):
        return Capabilities(kinds=("fft",), dtypes=("q15",), sizes="pow2", norms=("backward",), fixed=self.declared)

    def plan(self, case):
        def run(x):
            pairs = [(int(a), int(b)) for a, b in np.asarray(x)]
            out, _ = scalar_fft(pairs, 16, **self.computes)
            return np.array(out, dtype=np.int16)
        return FunctionPlan(case, run)


class ScalarQ15Convergent(ScalarQ15):
    """Correct: rounds half to even, as it declares."""

    name = "scalar-q15-convergent"
    declared = FixedScaling(output_shift="log2n", scaling="stage", rounding="convergent")
    computes = {**ScalarQ15.computes, "rounding": "convergent"}


class WrongShift(ScalarQ15):
    """Declares 1/2 per stage (shift log2 N) but does no scaling (shift 0)."""

    name = "wrong-shift"
    computes = {**ScalarQ15.computes, "scaling": "none"}


class NoSaturation(ScalarQ15):
    """Declares and does no scaling, and lets sums wrap around instead of saturating."""

    name = "no-saturation"
    declared = FixedScaling(output_shift=0, scaling="none", rounding="round-half-up")
    computes = {**ScalarQ15.computes, "scaling": "none", "overflow": "wrap"}


class Truncating(ScalarQ15):
    """Declares round-half-up but truncates every shift."""

    name = "truncating"
    computes = {**ScalarQ15.computes, "rounding": "truncate"}


class EightBitTwiddles(ScalarQ15):
    """Quantises its twiddle factors to 8 bits."""

    name = "eight-bit-twiddles"
    computes = {**ScalarQ15.computes, "twiddle_bits": 8}


class ReturnsFloats(ScalarQ15):
    """Returns its output as float64."""

    name = "returns-floats"

    def plan(self, case):
        inner = super().plan(case)
        return FunctionPlan(case, lambda x: inner.execute(x).astype(np.float64))


class OutOfRange(ScalarQ15):
    """Returns int32 values beyond the Q15 rails."""

    name = "out-of-range"

    def plan(self, case):
        return FunctionPlan(case, lambda x: np.full((case.n, 2), 40000, dtype=np.int32))


class Undeclared(ScalarQ15):
    """Declares no fixed-point scaling."""

    name = "undeclared"
    declared = None


class ModifiesInput(ScalarQ15):
    """Correct output, but it works in the caller's buffer."""

    name = "modifies-input"

    def plan(self, case):
        inner = super().plan(case)

        def run(x):
            out = inner.execute(x)
            x[...] = out
            return out.copy()
        return FunctionPlan(case, run)


class Nondeterministic(ScalarQ15):
    """Adds 1 LSB to bin 0 on every other call."""

    name = "nondeterministic"

    def plan(self, case):
        inner = super().plan(case)
        calls = [0]

        def run(x):
            out = inner.execute(x)
            calls[0] += 1
            if calls[0] % 2 == 0:
                out[0, 0] += 1
            return out
        return FunctionPlan(case, run)
