"""The mpmath engine of the ground truth: a direct DFT at ``MPMATH_DIGITS`` digits, and the
exact conversions between numpy arrays, mpmath numbers and double-double pairs that the
double-double engine shares.
"""

from __future__ import annotations

import mpmath
import numpy as np

from fftgauge.harness.cases import Case
from fftgauge.harness.dft import WIDE_COMPLEX, hermitian_indices, norm_factor, real_bins

#: Decimal digits of the mpmath method.
MPMATH_DIGITS = 50


def mpmath_transform(x: np.ndarray, case: Case) -> tuple[np.ndarray, np.ndarray]:
    """Return (hi, lo) of the transform as a direct DFT in mpmath at ``MPMATH_DIGITS`` digits.

    O(n^2): the caller limits n (:data:`fftgauge.harness.battery.reference.MPMATH_MAX_N`).
    """
    n = case.n
    with mpmath.workdps(MPMATH_DIGITS):
        vals = to_mpc_list(x)
        if case.kind == "irfft":
            vals = mp_hermitian_full(vals, n)
        sign = 1 if case.is_inverse else -1
        out = mp_dft(vals, sign)
        if case.kind == "rfft":
            out = out[: n // 2 + 1]
        if case.kind == "irfft":
            out = [mpmath.mpc(v.real, 0) for v in out]
        factor = mp_norm_factor(n, case.norm, case.is_inverse)
        out = [v * factor for v in out]
        return mpc_list_to_hi_lo(out)


def mp_dft(values: list, sign: int) -> list:
    """Return the direct DFT ``X[k] = sum_n v[n] exp(sign 2j pi k n / N)`` of mpmath numbers.

    Works at the current mpmath precision; the roots of unity come from ``mpmath.cospi`` /
    ``mpmath.sinpi`` of the exact ratio ``2 (k n mod N) / N``, so no angle is ever large.
    """
    n = len(values)
    roots = [mpmath.mpc(mpmath.cospi(mpmath.mpf(2 * m) / n), sign * mpmath.sinpi(mpmath.mpf(2 * m) / n))
             for m in range(n)]
    return [mpmath.fsum(values[j] * roots[(k * j) % n] for j in range(n)) for k in range(n)]


def mp_norm_factor(n: int, norm: str, inverse: bool):
    """Return :func:`fftgauge.harness.dft.norm_factor` as an mpmath number at the current precision."""
    return norm_factor(n, norm, inverse, mpmath.mpf, mpmath.sqrt)


def to_mpc_list(x: np.ndarray) -> list:
    """Return the entries of ``x`` as exact mpmath complex numbers (long double included)."""
    xc = x.astype(WIDE_COMPLEX) if np.iscomplexobj(x) or x.dtype == np.longdouble else x.astype(np.complex128)
    re_hi, re_lo = split_wide(np.real(xc))
    im_hi, im_lo = split_wide(np.imag(xc))
    return [mpmath.mpc(mpmath.mpf(float(a)) + mpmath.mpf(float(b)), mpmath.mpf(float(c)) + mpmath.mpf(float(d)))
            for a, b, c, d in zip(re_hi, re_lo, im_hi, im_lo)]


def split_wide(v: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Return float64 (hi, lo) with ``hi + lo == v`` exactly for a float64 or long double array."""
    hi = v.astype(np.float64)
    lo = (v - hi).astype(np.float64) if v.dtype != np.float64 else np.zeros_like(hi)
    return hi, lo


def mp_hermitian_full(half: list, n: int) -> list:
    """Return the length-n Hermitian spectrum that a half spectrum of mpmath numbers stands for
    (:func:`fftgauge.harness.dft.hermitian_indices`; the ignored imaginary parts dropped)."""
    half = list(half[: n // 2 + 1])
    for k in real_bins(n):
        half[k] = mpmath.mpc(half[k].real, 0)
    source, conjugated = hermitian_indices(n)
    return [mpmath.conj(half[s]) if c else half[s] for s, c in zip(source.tolist(), conjugated.tolist())]


def mpc_list_to_hi_lo(values: list) -> tuple[np.ndarray, np.ndarray]:
    """Return complex128 (hi, lo) arrays whose sum is each mpmath complex value to ~2^-106."""
    re = [mpf_to_dd(v.real) for v in values]
    im = [mpf_to_dd(v.imag) for v in values]
    hi = np.array([a for a, _ in re], dtype=np.float64) + 1j * np.array([a for a, _ in im], dtype=np.float64)
    lo = np.array([b for _, b in re], dtype=np.float64) + 1j * np.array([b for _, b in im], dtype=np.float64)
    return hi.astype(np.complex128), lo.astype(np.complex128)


def mpf_to_dd(v) -> tuple[float, float]:
    """Return (hi, lo): ``hi`` the nearest double to ``v``, ``lo`` the nearest double to ``v - hi``."""
    hi = float(v)
    return hi, float(v - hi)
