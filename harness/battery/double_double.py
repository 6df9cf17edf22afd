"""The double-double engine of the ground truth: a radix-2 FFT (Bluestein's algorithm for
other lengths) carried in double-double arithmetic, about 106 significant bits.

Each value is an unevaluated sum ``hi + lo`` of two doubles; TwoSum (Knuth) and TwoProduct
with Dekker's splitting are error-free transformations on which the sums and products are
built. Twiddle factors are products of two tables computed by mpmath to 40 digits, never a
recurrence (Schatzman 1996). See :mod:`fftgauge.harness.battery.reference` for the measured
accuracy.
"""

from __future__ import annotations

from functools import lru_cache

import mpmath
import numpy as np

from fftgauge.harness.battery.mpmath_engine import mp_norm_factor, mpf_to_dd, split_wide
from fftgauge.harness.cases import Case
from fftgauge.harness.dft import bit_reversal_permutation, hermitian_indices, is_power_of_two, real_bins

# Values are pairs (hi, lo) of float64 arrays with |lo| <= ulp(hi)/2. TwoSum (Knuth) and
# TwoProduct with Dekker's splitting are error-free transformations; the double-double sum
# and product built on them have relative error of a few units of 2^-106 (the sum's bound
# is relative to |a| + |b|, which is what a normwise FFT error analysis needs).

_SPLITTER = 134217729.0  # 2**27 + 1, Dekker's splitting constant for binary64


def _two_sum(a, b):
    s = a + b
    bb = s - a
    return s, (a - (s - bb)) + (b - bb)


def _quick_two_sum(a, b):
    s = a + b
    return s, b - (s - a)


def _split(a):
    t = _SPLITTER * a
    hi = t - (t - a)
    return hi, a - hi


def _two_prod(a, b):
    p = a * b
    ah, al = _split(a)
    bh, bl = _split(b)
    return p, ((ah * bh - p) + ah * bl + al * bh) + al * bl


def _dd_add(ah, al, bh, bl):
    s, e = _two_sum(ah, bh)
    return _quick_two_sum(s, e + (al + bl))


def _dd_mul(ah, al, bh, bl):
    p, e = _two_prod(ah, bh)
    return _quick_two_sum(p, e + (ah * bl + al * bh))


def _dd_mul_presplit(ah, a_split, al, bh, b_split, bl):
    """:func:`_dd_mul` with the Dekker splits of ``ah`` and ``bh`` given."""
    (a1, a2), (b1, b2) = a_split, b_split
    p = ah * bh
    e = ((a1 * b1 - p) + a1 * b2 + a2 * b1) + a2 * b2
    return _quick_two_sum(p, e + (ah * bl + al * bh))


class DDArray:
    """A complex double-double array: real part ``rh + rl``, imaginary part ``ih + il``."""

    __slots__ = ("rh", "rl", "ih", "il")

    def __init__(self, rh, rl, ih, il):
        self.rh, self.rl, self.ih, self.il = rh, rl, ih, il

    @classmethod
    def from_array(cls, x: np.ndarray) -> "DDArray":
        """Return the exact double-double form of a real or complex (long double included) array."""
        rh, rl = split_wide(np.ascontiguousarray(np.real(x)))
        if np.iscomplexobj(x):
            ih, il = split_wide(np.ascontiguousarray(np.imag(x)))
        else:
            ih, il = np.zeros_like(rh), np.zeros_like(rh)
        return cls(rh, rl, ih, il)

    def conj(self) -> "DDArray":
        return DDArray(self.rh, self.rl, -self.ih, -self.il)

    def __getitem__(self, idx) -> "DDArray":
        return DDArray(self.rh[idx], self.rl[idx], self.ih[idx], self.il[idx])

    def __setitem__(self, idx, v: "DDArray") -> None:
        self.rh[idx], self.rl[idx], self.ih[idx], self.il[idx] = v.rh, v.rl, v.ih, v.il

    def add(self, o: "DDArray") -> "DDArray":
        rh, rl = _dd_add(self.rh, self.rl, o.rh, o.rl)
        ih, il = _dd_add(self.ih, self.il, o.ih, o.il)
        return DDArray(rh, rl, ih, il)

    def sub(self, o: "DDArray") -> "DDArray":
        rh, rl = _dd_add(self.rh, self.rl, -o.rh, -o.rl)
        ih, il = _dd_add(self.ih, self.il, -o.ih, -o.il)
        return DDArray(rh, rl, ih, il)

    def mul(self, o: "DDArray") -> "DDArray":
        """Complex product, schoolbook: four double-double products and two sums.

        Each leading part is split (Dekker) once and used in two products.
        """
        sr, si, orr, oi = _split(self.rh), _split(self.ih), _split(o.rh), _split(o.ih)
        a, b = _dd_mul_presplit(self.rh, sr, self.rl, o.rh, orr, o.rl)
        c, d = _dd_mul_presplit(self.ih, si, self.il, o.ih, oi, o.il)
        rh, rl = _dd_add(a, b, -c, -d)
        a, b = _dd_mul_presplit(self.rh, sr, self.rl, o.ih, oi, o.il)
        c, d = _dd_mul_presplit(self.ih, si, self.il, o.rh, orr, o.rl)
        ih, il = _dd_add(a, b, c, d)
        return DDArray(rh, rl, ih, il)

    def scale(self, fh: float, fl: float) -> "DDArray":
        """Product with the real double-double scalar ``fh + fl``."""
        rh, rl = _dd_mul(self.rh, self.rl, fh, fl)
        ih, il = _dd_mul(self.ih, self.il, fh, fl)
        return DDArray(rh, rl, ih, il)

    def hi_lo(self) -> tuple[np.ndarray, np.ndarray]:
        """Return complex128 (hi, lo), renormalised so that ``hi`` is the rounded value."""
        rh, rl = _quick_two_sum(self.rh, self.rl)
        ih, il = _quick_two_sum(self.ih, self.il)
        return (rh + 1j * ih).astype(np.complex128), (rl + 1j * il).astype(np.complex128)


def _zeros_dd(n: int) -> DDArray:
    return DDArray(*(np.zeros(n) for _ in range(4)))


@lru_cache(maxsize=64)
def _root_tables(m: int) -> tuple[int, DDArray, DDArray]:
    """Return (B, T0, T1): ``T0[j] = exp(-2j pi j / m)`` for j < B, ``T1[i] = exp(-2j pi i B / m)``.

    Entries are computed by mpmath at 40 digits and rounded to double-double.
    """
    b = 1 << max(0, (int(m - 1).bit_length() + 1) // 2)
    count1 = -(-m // b)
    with mpmath.workdps(40):
        def table(step: int, count: int) -> DDArray:
            re = [mpf_to_dd(mpmath.cospi(mpmath.mpf(2 * step * j) / m)) for j in range(count)]
            im = [mpf_to_dd(-mpmath.sinpi(mpmath.mpf(2 * step * j) / m)) for j in range(count)]
            return DDArray(np.array([a for a, _ in re]), np.array([c for _, c in re]),
                       np.array([a for a, _ in im]), np.array([c for _, c in im]))
        return b, table(1, b), table(b, count1)


def dd_roots(k: np.ndarray, m: int) -> DDArray:
    """Return ``exp(-2j pi k / m)`` in double-double for integers ``0 <= k < m``.

    Each value is the product of two accurately tabulated roots (``k = k1 B + k0``), so its
    error is a few units of 2^-106 for every ``k``: no recurrence (Schatzman 1996).
    """
    b, t0, t1 = _root_tables(m)
    return t1[k // b].mul(t0[k % b])


@lru_cache(maxsize=4)
def _twiddle_table(n: int) -> DDArray:
    """Return ``exp(-2j pi k / n)``, k < n/2, in double-double (cached: the FFT only reads it)."""
    return dd_roots(np.arange(n // 2), n)


#: Elements per chunk of the double-double FFT: small enough that a chunk's temporaries stay
#: in cache (the FFT runs about three times faster at 2^20 than stage-by-stage on whole arrays).
_CHUNK = 1 << 13


def _butterflies(a: DDArray, b: DDArray, w: DDArray | None) -> tuple[DDArray, DDArray]:
    """Return the radix-2 butterfly ``(a + w b, a - w b)`` (``w = None`` for a unit twiddle)."""
    t = b if w is None else b.mul(w)
    return a.add(t), a.sub(t)


def _dd_fft_pow2(z: DDArray) -> DDArray:
    """Return the forward DFT (exponent sign -1) of ``z``, length a power of two.

    Iterative radix-2 decimation in time after a bit-reversal permutation. The stages whose
    butterflies lie within a chunk of ``_CHUNK`` elements run chunk by chunk; the later
    stages run over chunks of their butterfly columns. Every stage's twiddles are taken from
    one table of accurately computed roots (:func:`dd_roots`).
    """
    n = z.rh.shape[0]
    if n == 1:
        return DDArray(z.rh.copy(), z.rl.copy(), z.ih.copy(), z.il.copy())
    z = z[bit_reversal_permutation(n)]
    table = _twiddle_table(n)
    chunk = min(n, _CHUNK)
    small = []
    h = 1
    while 2 * h <= chunk:
        small.append((h, None if h == 1 else table[:: n // (2 * h)]))
        h *= 2
    for c0 in range(0, n, chunk):
        part = z[c0:c0 + chunk]
        for h, w in small:
            shape = (chunk // (2 * h), 2, h)
            v = DDArray(part.rh.reshape(shape), part.rl.reshape(shape), part.ih.reshape(shape), part.il.reshape(shape))
            v[:, 0, :], v[:, 1, :] = _butterflies(v[:, 0, :], v[:, 1, :], w)
    h = chunk
    while h < n:
        w_all = table[:: n // (2 * h)]
        shape = (n // (2 * h), 2, h)
        v = DDArray(z.rh.reshape(shape), z.rl.reshape(shape), z.ih.reshape(shape), z.il.reshape(shape))
        step = chunk // 2
        for blk in range(shape[0]):
            for j0 in range(0, h, step):
                cols = slice(j0, j0 + step)
                v[blk, 0, cols], v[blk, 1, cols] = _butterflies(v[blk, 0, cols], v[blk, 1, cols], w_all[cols])
        h *= 2
    return z


def _dd_fft(z: DDArray) -> DDArray:
    """Return the forward DFT of ``z`` of any length: radix-2 for powers of two, else Bluestein."""
    n = z.rh.shape[0]
    if is_power_of_two(n):
        return _dd_fft_pow2(z)
    # Bluestein: k n = (n^2 + k^2 - (k - n)^2) / 2, so X = c * ((x c) (*) conj(c)), c[n] = exp(-j pi n^2 / N).
    idx = np.arange(n, dtype=np.int64)
    chirp = dd_roots((idx * idx) % (2 * n), 2 * n)
    m = 1 << int(2 * n - 2).bit_length()
    a = _zeros_dd(m)
    a[:n] = z.mul(chirp)
    b = _zeros_dd(m)
    cc = chirp.conj()
    b[:n] = cc
    b[m - n + 1:] = cc[1:][::-1]
    conv = _dd_fft_pow2(_dd_fft_pow2(a).mul(_dd_fft_pow2(b)).conj()).conj().scale(1.0 / m, 0.0)
    return conv[:n].mul(chirp)


def _dd_norm_factor(n: int, norm: str, inverse: bool) -> tuple[float, float]:
    with mpmath.workdps(40):
        return mpf_to_dd(mp_norm_factor(n, norm, inverse))


def double_double_transform(x: np.ndarray, case: Case) -> tuple[np.ndarray, np.ndarray]:
    """Return (hi, lo) of the transform computed in double-double arithmetic."""
    return double_double_pair_transform(DDArray.from_array(x), case)


def double_double_pair_transform(z: DDArray, case: Case) -> tuple[np.ndarray, np.ndarray]:
    """Return (hi, lo) of the transform of the double-double input ``z`` (1-D, ``case.input_length``).

    The entry point for inputs that are themselves double-double values (the shaped ground
    truth's later axes: :mod:`fftgauge.harness.shapes.reference`).
    """
    n = case.n
    if case.kind == "irfft":
        z = _dd_hermitian_full(z, n)
    if case.is_inverse:
        out = _dd_fft(z.conj()).conj()
    else:
        out = _dd_fft(z)
    if case.kind == "rfft":
        out = out[: n // 2 + 1]
    if case.kind == "irfft":
        out = DDArray(out.rh, out.rl, np.zeros(n), np.zeros(n))
    fh, fl = _dd_norm_factor(n, case.norm, case.is_inverse)
    if (fh, fl) != (1.0, 0.0):
        out = out.scale(fh, fl)
    return out.hi_lo()


def _dd_hermitian_full(half: DDArray, n: int) -> DDArray:
    """Return the length-n Hermitian spectrum of a half spectrum
    (:func:`fftgauge.harness.dft.hermitian_indices`; the ignored imaginary parts dropped)."""
    source, conjugated = hermitian_indices(n)
    full = half[source]
    full.ih[conjugated] = -full.ih[conjugated]
    full.il[conjugated] = -full.il[conjugated]
    for k in real_bins(n):
        full.ih[k] = full.il[k] = 0.0
    return full
