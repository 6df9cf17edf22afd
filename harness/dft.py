"""The DFT conventions, in one place: norms and their factors, the Hermitian extension of a
half spectrum, bit reversal, machine epsilon and unit roundoff per precision, size labels.

The conventions are numpy's and the array API standard's (see :mod:`fftgauge.backends.base`):
the forward transform is ``X[k] = sum_n x[n] exp(-2j pi k n / N)``, the inverse has the
opposite sign, and ``norm`` says which side carries the 1/N (or both a 1/sqrt(N)).
Every engine (numpy arrays, long double, mpmath numbers, double-double pairs, Python lists)
takes its convention from here, evaluated in its own number type.
"""

from __future__ import annotations

import math
from functools import lru_cache
from typing import Any, Callable

import numpy as np

#: The array API standard's normalisations.
NORMS = ("backward", "ortho", "forward")

#: Significand bits (the leading bit included) of each real precision: IEEE Std 754-2019
#: binary16, binary32, binary64; long double as the platform has it (64 for the x87
#: 80-bit format, 53 where long double is double, 113 for binary128).
SIGNIFICAND_BITS = {
    "float16": 11,
    "float32": 24,
    "float64": 53,
    "longdouble": int(np.finfo(np.longdouble).nmant) + 1,
}

#: True where long double carries more bits than double.
LONGDOUBLE_IS_WIDER = SIGNIFICAND_BITS["longdouble"] > SIGNIFICAND_BITS["float64"]
#: The widest complex dtype: ``clongdouble`` where long double is wider than double, else ``complex128``.
WIDE_COMPLEX = np.dtype(np.clongdouble) if LONGDOUBLE_IS_WIDER else np.dtype(np.complex128)


# -- sizes -------------------------------------------------------------------------------------

def is_power_of_two(n: int) -> bool:
    """Return True when ``n`` is 1, 2, 4, 8, ..."""
    return n >= 1 and (n & (n - 1)) == 0


def size_label(n: int, mathtext: bool = False) -> str:
    """Return ``n`` as a reader sees it: ``"2^10"`` for a power of two >= 2, else ``"1000"``.

    ``mathtext`` True gives matplotlib's ``"$2^{10}$"`` instead.
    """
    if n >= 2 and is_power_of_two(n):
        k = n.bit_length() - 1
        return f"$2^{{{k}}}$" if mathtext else f"2^{k}"
    return str(n)


# -- normalisation -------------------------------------------------------------------------

def norm_power(norm: str, inverse: bool) -> float:
    """Return p with the normalisation factor ``N^-p``: 0 (none), 0.5 (1/sqrt(N)) or 1 (1/N).

    The array API standard (and numpy): ``backward`` scales the inverse by 1/N, ``forward``
    the forward transform by 1/N, ``ortho`` both by 1/sqrt(N).

    Raises
    ------
    ValueError
        For a norm not in :data:`NORMS`.
    """
    if norm not in NORMS:
        raise ValueError(f"unknown normalisation {norm!r}; expected one of {', '.join(NORMS)}")
    if norm == "ortho":
        return 0.5
    return 1.0 if (norm == "backward") == inverse else 0.0


def norm_factor(n: int, norm: str, inverse: bool, real: Callable[[Any], Any] = float,
                sqrt: Callable[[Any], Any] = math.sqrt) -> Any:
    """Return the factor the unscaled sum is multiplied by under ``norm`` (see :func:`norm_power`).

    ``real`` and ``sqrt`` evaluate it in another number type: ``np.longdouble`` and ``np.sqrt``
    for long double, ``mpmath.mpf`` and ``mpmath.sqrt`` for an exact-to-the-digits value.
    The result is ``real(1)``, ``real(1) / real(n)`` or ``real(1) / sqrt(real(n))``, each a
    correctly rounded operation in the number type.

    Raises
    ------
    ValueError
        For a norm not in :data:`NORMS`.
    """
    return _power_factor(n, norm_power(norm, inverse), real, sqrt)


def _power_factor(n: int, p: float, real: Callable[[Any], Any], sqrt: Callable[[Any], Any]) -> Any:
    """Return ``n^-p`` for p in (0, 0.5, 1), each a correctly rounded operation in ``real``'s type."""
    one = real(1)
    if p == 0.0:
        return one
    return one / real(n) if p == 1.0 else one / sqrt(real(n))


# -- real transforms: the half spectrum ---------------------------------------------------------

def hermitian_indices(n: int) -> tuple[np.ndarray, np.ndarray]:
    """Return ``(source, conjugated)`` of the Hermitian extension of a half spectrum to length n.

    Entry ``j`` of the full spectrum is ``half[source[j]]``, conjugated where ``conjugated[j]``:
    ``X[n - k] = conj(X[k])`` for k = 1 .. (n - 1) // 2 (the spectrum of a real signal).
    ``source`` indexes the ``n // 2 + 1`` values of the half spectrum.
    """
    j = np.arange(n, dtype=np.int64)
    conjugated = j > n // 2
    source = np.where(conjugated, n - j, j)
    return source, conjugated


def real_bins(n: int) -> tuple[int, ...]:
    """Return the bins of a half spectrum whose imaginary part a real transform ignores:
    DC, and Nyquist (``n // 2``) for even n >= 2."""
    return (0, n // 2) if n % 2 == 0 and n >= 2 else (0,)


def clean_half_spectrum(half: np.ndarray, n: int) -> np.ndarray:
    """Return a copy of ``half`` with the imaginary parts :func:`real_bins` names set to zero
    (what irfft reads of them)."""
    out = np.array(half, copy=True)
    for k in real_bins(n):
        out[k] = out[k].real
    return out


def hermitian_full(half: np.ndarray, n: int, dtype: Any = None) -> np.ndarray:
    """Return the length-n Hermitian spectrum that the half spectrum ``half`` stands for.

    ``half`` holds at least ``n // 2 + 1`` values; the imaginary parts of DC and, for even n,
    Nyquist are dropped, as irfft does. The result has ``dtype`` (default: the complex type of
    ``half``'s precision). Source: numpy.fft.irfft's convention (tested against numpy.fft).
    """
    half = np.asarray(half)
    if dtype is None:
        dtype = np.result_type(half.dtype, np.complex64)
    clean = clean_half_spectrum(np.asarray(half[: n // 2 + 1], dtype=dtype), n)
    source, conjugated = hermitian_indices(n)
    full = clean[source]
    full[conjugated] = np.conj(full[conjugated])
    return full


# -- radix-2 ordering ----------------------------------------------------------------------------

@lru_cache(maxsize=32)
def bit_reversal_permutation(n: int) -> np.ndarray:
    """Return the bit-reversal permutation of ``0 .. n-1`` (int64, read-only) for ``n = 2^t``.

    Entry ``i`` is ``i`` with its t binary digits in reverse order; for n = 8 it is
    ``[0, 4, 2, 6, 1, 5, 3, 7]``. The permutation is its own inverse.

    Raises
    ------
    ValueError
        When ``n`` is not a power of two.
    """
    if not is_power_of_two(n):
        raise ValueError(f"bit reversal needs a power of two, got n = {n}")
    bits = n.bit_length() - 1
    idx = np.arange(n, dtype=np.int64)
    rev = np.zeros(n, dtype=np.int64)
    for _ in range(bits):
        rev = (rev << 1) | (idx & 1)
        idx >>= 1
    rev.setflags(write=False)
    return rev


# -- precision -----------------------------------------------------------------------------------

def unit_roundoff(dtype: str) -> float:
    """Return the unit roundoff u = 2^-p of a precision, p its significand bits
    (:data:`SIGNIFICAND_BITS`): 2^-11 float16, 2^-24 float32, 2^-53 float64.

    Source: IEEE Std 754-2019 (round to nearest gives u = 2^-p).

    Raises
    ------
    ValueError
        For a precision not in :data:`SIGNIFICAND_BITS`.
    """
    try:
        return math.ldexp(1.0, -SIGNIFICAND_BITS[dtype])
    except KeyError:
        raise ValueError(f"unknown precision {dtype!r}; expected one of {', '.join(SIGNIFICAND_BITS)}") from None


def machine_epsilon(dtype: str) -> float:
    """Return the machine epsilon eps = 2u of a precision (IEEE Std 754-2019).

    Raises
    ------
    ValueError
        For an unknown precision.
    """
    return 2.0 * unit_roundoff(dtype)


# -- declared conventions ------------------------------------------------------------------------

#: Exponent signs of the forward transform: numpy's (-1) and the opposite one.
SIGNS = (-1, 1)
#: Factors a routine may apply to the plain (unscaled) sum.
SCALES = ("1", "1/n", "1/sqrt(n)")
#: Output orders of a complex transform: natural, bit-reversed (a radix-2 FFT without its
#: reordering), centred (DC at index n // 2, numpy.fft.fftshift's order).
ORDERS = ("natural", "bit-reversed", "centred")

_SCALE_POWERS = {"1": 0.0, "1/n": 1.0, "1/sqrt(n)": 0.5}

#: Layouts of a real transform's half spectrum X[0 .. n//2]: ``complex``, numpy's n//2 + 1
#: complex values; ``dc-nyquist``, n reals (even n) Re X0, Re X[n/2], Re X1, Im X1, ...,
#: Re X[n/2-1], Im X[n/2-1], DC and Nyquist sharing the first pair; ``halfcomplex``, n reals
#: Re X0, Re X1, ..., Re X[n//2], Im X[(n-1)//2], ..., Im X1 (the imaginary parts backwards).
PACKINGS = ("complex", "dc-nyquist", "halfcomplex")


def pack_half_spectrum(half: np.ndarray, n: int, packing: str) -> np.ndarray:
    """Return the half spectrum ``half`` (n//2 + 1 complex values, numpy's layout) in
    ``packing`` (:data:`PACKINGS`): a copy for ``complex``, else n reals of ``half``'s
    precision. The imaginary parts of DC and even-n Nyquist are dropped (a real signal has
    none there).

    Raises
    ------
    ValueError
        For an unknown packing, ``dc-nyquist`` at odd n, or a ``half`` of the wrong length.
    """
    half = np.asarray(half)
    _check_packing(packing, n, half.shape[0], n // 2 + 1)
    if packing == "complex":
        return half.copy()
    re, im = np.real(half), np.imag(half)
    if packing == "halfcomplex":
        return np.concatenate([re[: n // 2 + 1], im[1: (n + 1) // 2][::-1]])
    out = np.empty(n, dtype=re.dtype)
    out[0], out[1] = re[0], re[n // 2]
    out[2::2], out[3::2] = re[1: n // 2], im[1: n // 2]
    return out


def unpack_half_spectrum(packed: np.ndarray, n: int, packing: str) -> np.ndarray:
    """Return numpy's half spectrum (n//2 + 1 complex values) that ``packed`` holds in
    ``packing``: the inverse of :func:`pack_half_spectrum`.

    Raises
    ------
    ValueError
        For an unknown packing, ``dc-nyquist`` at odd n, or a ``packed`` of the wrong length.
    """
    packed = np.asarray(packed)
    _check_packing(packing, n, packed.shape[0], n // 2 + 1 if packing == "complex" else n)
    if packing == "complex":
        return packed.copy()
    half = np.zeros(n // 2 + 1, dtype=np.result_type(packed.dtype, np.complex64))
    if packing == "halfcomplex":
        half.real = packed[: n // 2 + 1]
        half.imag[1: (n + 1) // 2] = packed[n // 2 + 1:][::-1]
        return half
    half.real[0], half.real[n // 2] = packed[0], packed[1]
    half.real[1: n // 2], half.imag[1: n // 2] = packed[2::2], packed[3::2]
    return half


def _check_packing(packing: str, n: int, length: int, due: int) -> None:
    """Raise ValueError for an unknown packing, dc-nyquist at odd n, or a length other than ``due``."""
    if packing not in PACKINGS:
        raise ValueError(f"unknown packing {packing!r}; expected one of {', '.join(PACKINGS)}")
    if packing == "dc-nyquist" and n % 2:
        raise ValueError(f"the dc-nyquist packing needs an even n (DC and Nyquist share a pair), got n = {n}")
    if length != due:
        raise ValueError(f"{packing} packing of n = {n} holds {due} values, got {length}")


def scale_factor(n: int, scale: str, real: Callable[[Any], Any] = float,
                 sqrt: Callable[[Any], Any] = math.sqrt) -> Any:
    """Return the factor a declared scale (one of :data:`SCALES`) stands for, in ``real``'s
    number type (see :func:`norm_factor`).

    Raises
    ------
    ValueError
        For a scale not in :data:`SCALES`.
    """
    if scale not in _SCALE_POWERS:
        raise ValueError(f"unknown scale {scale!r}; expected one of {', '.join(SCALES)}")
    return _power_factor(n, _SCALE_POWERS[scale], real, sqrt)


def to_convention(y: np.ndarray, kind: str, n: int, norm: str = "backward", sign: int | None = None,
                  scale: str | None = None, order: str | None = None) -> np.ndarray:
    """Return ``y``, the output of ``kind`` in numpy's convention with ``norm`` (natural order),
    as a routine with the declared convention gives it; None keeps numpy's for that field.

    ``sign``: the exponent sign of the routine's *forward* transform (+1: the opposite of
    numpy's). A complex output then comes reversed in frequency, ``Y[-k mod n]``; an rfft
    half spectrum conjugated; an irfft signal reversed in time, ``y[-j mod n]`` (the DFT's
    definition: the opposite sign of a real signal's spectrum is its conjugate).
    ``scale``: the factor the routine applies to the plain sum of this kind (one of
    :data:`SCALES`), in place of the one ``norm`` asks for (:func:`norm_factor`).
    ``order``: for ``fft`` and ``ifft`` outputs, ``bit-reversed`` (n a power of two, entry
    ``i`` is ``Y[rev(i)]``) or ``centred`` (``numpy.fft.fftshift(Y)``). (The battery reads a
    declared order as that of the spectrum: an ``ifft`` *input* in that order, permuted as an
    ``fft`` output is; see :mod:`fftgauge.harness.battery.conventions`.)

    The result has ``y``'s dtype; the scale is applied in long double for long double arrays.

    Raises
    ------
    ValueError
        For an unknown kind, sign, scale or order, an order on a real kind, or
        ``bit-reversed`` at a size that is not a power of two.
    """
    _check_convention(kind, sign, scale, order)
    y = np.asarray(y)
    out = y.copy()
    if sign == 1:
        out = np.conj(out) if kind == "rfft" else out[(-np.arange(n)) % n]
    if scale is not None:
        out = (out * _rescale(y.dtype, kind, n, norm, scale)).astype(y.dtype)
    if order == "bit-reversed":
        out = out[bit_reversal_permutation(n)]
    elif order == "centred":
        out = np.roll(out, n // 2)  # numpy.fft.fftshift's order: a roll by n // 2
    return out


def from_convention(y: np.ndarray, kind: str, n: int, norm: str = "backward", sign: int | None = None,
                    scale: str | None = None, order: str | None = None) -> np.ndarray:
    """Return the output in numpy's convention with ``norm`` (natural order) that a routine with
    the declared convention gave as ``y``: the inverse of :func:`to_convention`, so that every
    check applies to it unchanged (a convention other than the declared one stays visible).

    Raises
    ------
    ValueError
        As :func:`to_convention`.
    """
    _check_convention(kind, sign, scale, order)
    y = np.asarray(y)
    out = y.copy()
    if order == "bit-reversed":
        out = out[bit_reversal_permutation(n)]  # an involution
    elif order == "centred":
        out = np.roll(out, -(n // 2))  # numpy.fft.ifftshift's order
    if scale is not None:
        out = (out / _rescale(y.dtype, kind, n, norm, scale)).astype(y.dtype)
    if sign == 1:
        out = np.conj(out) if kind == "rfft" else out[(-np.arange(n)) % n]
    return out


def _check_convention(kind: str, sign: int | None, scale: str | None, order: str | None) -> None:
    """Raise ValueError for an unknown kind, sign, scale or order, or an order on a real kind."""
    if kind not in ("fft", "ifft", "rfft", "irfft"):
        raise ValueError(f"unknown transform kind {kind!r}")
    if sign is not None and sign not in SIGNS:
        raise ValueError(f"sign must be -1 or 1, got {sign!r}")
    if scale is not None and scale not in SCALES:
        raise ValueError(f"unknown scale {scale!r}; expected one of {', '.join(SCALES)}")
    if order is not None and order not in ORDERS:
        raise ValueError(f"unknown output order {order!r}; expected one of {', '.join(ORDERS)}")
    if order not in (None, "natural") and kind in ("rfft", "irfft"):
        raise ValueError(f"an output order applies to complex outputs (fft, ifft), not to {kind}")


def _rescale(dtype: np.dtype, kind: str, n: int, norm: str, scale: str) -> Any:
    """Return the declared ``scale`` over the factor ``norm`` asks for, in long double for long double arrays."""
    inverse = kind in ("ifft", "irfft")
    wide = dtype in (np.dtype(np.longdouble), np.dtype(np.clongdouble))
    real, root = (np.longdouble, np.sqrt) if wide else (float, math.sqrt)
    return scale_factor(n, scale, real, root) / norm_factor(n, norm, inverse, real, root)
