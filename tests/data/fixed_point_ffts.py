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
               twiddle_bits: int | None = None, inverse: bool = False) -> tuple[list[tuple[int, int]], int]:
    """Return the radix-2 DIT of integer pairs ``x`` and the output shift (exponent); with
    ``inverse`` the twiddles are exp(+2 pi i j/m) (the quantised sine negated)."""
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
                if inverse:
                    wi = -wi
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


def scalar_rfft(x: list[int], bits: int, scaling: str, rounding: str, overflow: str = "saturate",
                twiddle_bits: int | None = None) -> tuple[list[tuple[int, int]], int]:
    """Return bins 0..n/2 of the radix-2 of the real integers ``x`` (imaginary parts 0)."""
    out, exponent = scalar_fft([(int(v), 0) for v in x], bits, scaling, rounding, overflow, twiddle_bits)
    return out[: len(x) // 2 + 1], exponent


def scalar_irfft(half: list[tuple[int, int]], n: int, bits: int, scaling: str, rounding: str,
                 overflow: str = "saturate", twiddle_bits: int | None = None) -> tuple[list[int], int]:
    """Return the real parts of the inverse radix-2 of the Hermitian extension of ``half``:
    X[k] for k <= n/2 (imaginary parts of DC and Nyquist dropped), conj X[n - k] above (the
    negated part brought into range by ``overflow``)."""
    h = [[int(a), int(b)] for a, b in half[: n // 2 + 1]]
    h[0][1] = 0
    if n % 2 == 0 and n >= 2:
        h[n // 2][1] = 0
    full = [tuple(h[k]) if k <= n // 2 else (h[n - k][0], fit(-h[n - k][1], bits, overflow)) for k in range(n)]
    out, exponent = scalar_fft(full, bits, scaling, rounding, overflow, twiddle_bits, inverse=True)
    return [re for re, _ in out], exponent


def scalar_run(kind: str, x: np.ndarray, n: int, bits: int, conjugate: bool = True,
               **computes) -> np.ndarray:
    """Return the transform ``kind`` of ``x`` in fftgauge's fixed-point layouts (docs/fixed-point.md):
    pairs for complex data, integers for real data. ``conjugate=False`` leaves the inverse
    kinds with the forward twiddles (a broken inverse)."""
    a = np.asarray(x)
    dtype = np.int16 if bits == 16 else np.int32
    if kind in ("fft", "ifft"):
        out, _ = scalar_fft([(int(p), int(q)) for p, q in a], bits, inverse=kind == "ifft" and conjugate, **computes)
        return np.array(out, dtype=dtype)
    if kind == "rfft":
        out, _ = scalar_rfft([int(v) for v in a], bits, **computes)
        return np.array(out, dtype=dtype)
    if conjugate:
        out, _ = scalar_irfft([(int(p), int(q)) for p, q in a], n, bits, **computes)
    else:
        h = [(int(p), int(q)) for p, q in a]
        full = [h[k] if k <= n // 2 else (h[n - k][0], -h[n - k][1]) for k in range(n)]
        out = [re for re, _ in scalar_fft(full, bits, **computes)[0]]
    return np.array(out, dtype=dtype)


class ScalarQ15(Backend):
    """A Q15 backend around :func:`scalar_fft`; subclasses declare one thing and do another."""

    name = "scalar-q15"
    description = "a scalar Q15 radix-2 written for the tests"
    declared = FixedScaling(output_shift="log2n", scaling="stage", rounding="round-half-up")
    computes = {"scaling": "stage", "rounding": "round-half-up", "overflow": "saturate", "twiddle_bits": None}

    kinds = ("fft",)
    conjugate = True

    def capabilities(self):
        return Capabilities(kinds=self.kinds, dtypes=("q15",), sizes="pow2", norms=("backward",), fixed=self.declared)

    def plan(self, case):
        return FunctionPlan(case, lambda x: scalar_run(case.kind, x, case.n, 16, self.conjugate, **self.computes))


class AllKindsQ15(ScalarQ15):
    """Correct in every kind (fft, ifft, rfft, irfft), 1/2 per stage, round-half-up."""

    name = "all-kinds-q15"
    kinds = ("fft", "ifft", "rfft", "irfft")


class InverseWrongShift(AllKindsQ15):
    """Its inverses do no scaling while it declares 1/2 per stage (the forward ones are right)."""

    name = "inverse-wrong-shift"

    def plan(self, case):
        computes = {**self.computes, "scaling": "none"} if case.is_inverse else self.computes
        return FunctionPlan(case, lambda x: scalar_run(case.kind, x, case.n, 16, True, **computes))


class NoConjugation(AllKindsQ15):
    """Its inverses keep the forward twiddles (the conjugation is missing)."""

    name = "no-conjugation"
    conjugate = False


class RealTruncating(AllKindsQ15):
    """Declares round-half-up but truncates every shift (in every kind)."""

    name = "real-truncating"
    computes = {**ScalarQ15.computes, "rounding": "truncate"}


class RealNoSaturation(AllKindsQ15):
    """Declares and does no scaling and lets sums wrap around (in every kind)."""

    name = "real-no-saturation"
    declared = FixedScaling(output_shift=0, scaling="none", rounding="round-half-up")
    computes = {**ScalarQ15.computes, "scaling": "none", "overflow": "wrap"}


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
