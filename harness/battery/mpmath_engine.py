"""The mpmath engine of the ground truth: a direct DFT at ``MPMATH_DIGITS`` digits, and the
exact conversions between numpy arrays, mpmath numbers and double-double pairs that the
double-double engine shares.
"""

from __future__ import annotations

import mpmath
import numpy as np

from fftgauge.harness.cases import Case

#: Decimal digits of the mpmath method.
MPMATH_DIGITS = 50

#: The widest complex dtype: ``clongdouble`` where long double is wider than double, else ``complex128``.
WIDE_COMPLEX = np.dtype(np.clongdouble) if float(np.finfo(np.longdouble).eps) < float(np.finfo(np.float64).eps) \
    else np.dtype(np.complex128)

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
    """Return :func:`fftgauge.harness.cases.norm_factor` exactly, as an mpmath number (its exact twin;
    the tests check that the two agree)."""
    if norm == "ortho":
        return 1 / mpmath.sqrt(n)
    if (norm == "backward") == inverse:
        return mpmath.mpf(1) / n
    return mpmath.mpf(1)


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
    """Return the length-n Hermitian spectrum that a half spectrum stands for (ignored parts dropped)."""
    full = [mpmath.mpc(0)] * n
    full[0] = mpmath.mpc(half[0].real, 0)
    for k in range(1, (n + 1) // 2):
        full[k] = half[k]
        full[n - k] = mpmath.conj(half[k])
    if n % 2 == 0:
        full[n // 2] = mpmath.mpc(half[n // 2].real, 0)
    return full


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
