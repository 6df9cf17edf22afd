"""Q formats, rounding rules, overflow rules and the complex layout of fixed-point data.

A Q15 number is a 16-bit two's-complement integer ``v`` standing for ``v / 2**15`` (range
[-1, 1 - 2**-15]); a Q31 number is the same with 32 bits and ``2**31``. Complex data is a
numpy integer array of shape ``(n, 2)``: ``[..., 0]`` the real parts, ``[..., 1]`` the
imaginary parts. In C order this is exactly the interleaved ``re, im, re, im, ...`` layout of
embedded libraries (``x.reshape(-1)`` gives it, :func:`from_interleaved` undoes it).

Rounding rules of a right shift by ``s`` bits (dropping ``s`` fraction bits):

``truncate``       floor (an arithmetic shift ``>>`` in two's complement): bias -1/2 LSB
                   minus 2**-(s+1), error in (-1, 0] LSB.
``round-half-up``  add 2**(s-1), then floor: error in (-1/2, 1/2], ties up.
``convergent``     round half to even: error in [-1/2, 1/2], ties to the even result, no bias.

Overflow rules: ``saturate`` clips to the rails ``[-2**(b-1), 2**(b-1) - 1]``; ``wrap`` keeps
the low ``b`` bits (two's-complement wrap-around, what plain C integer arithmetic does).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from fftgauge.harness.cases import FIXED_DTYPES

__all__ = ["FIXED_DTYPES", "FORMATS", "OVERFLOWS", "QFormat", "ROUNDINGS", "as_pairs", "fixed_format",
           "from_interleaved", "handle_overflow", "pairs_to_complex", "quantise", "shift_right"]

#: Rounding rules of :func:`shift_right` and :func:`quantise`.
ROUNDINGS = ("truncate", "round-half-up", "convergent")

#: Overflow rules of :func:`handle_overflow`.
OVERFLOWS = ("saturate", "wrap")


@dataclass(frozen=True)
class QFormat:
    """A signed fractional format of ``bits`` bits with ``bits - 1`` fraction bits (Q15, Q31)."""

    name: str
    bits: int

    @property
    def frac_bits(self) -> int:
        """Number of fraction bits (15 for Q15)."""
        return self.bits - 1

    @property
    def min_int(self) -> int:
        """The lower rail, -2**(bits-1)."""
        return -(1 << (self.bits - 1))

    @property
    def max_int(self) -> int:
        """The upper rail, 2**(bits-1) - 1."""
        return (1 << (self.bits - 1)) - 1

    @property
    def one(self) -> int:
        """The integer that 1.0 would be (2**frac_bits; not representable itself)."""
        return 1 << self.frac_bits

    @property
    def dtype(self) -> np.dtype:
        """The numpy integer dtype of the format (int16, int32)."""
        return np.dtype(f"int{self.bits}")


#: The fixed-point precisions of ``--dtypes``.
FORMATS = {"q15": QFormat("q15", 16), "q31": QFormat("q31", 32)}
assert tuple(FORMATS) == FIXED_DTYPES


def fixed_format(dtype: str) -> QFormat:
    """Return the :class:`QFormat` of precision name ``dtype`` (``q15``, ``q31``).

    Raises
    ------
    ValueError
        For a name that is not a fixed-point precision.
    """
    try:
        return FORMATS[dtype]
    except KeyError:
        raise ValueError(f"{dtype!r} is not a fixed-point precision ({', '.join(FORMATS)})") from None


def shift_right(values: np.ndarray, shift: int, rounding: str) -> np.ndarray:
    """Return int64 ``values`` divided by ``2**shift`` and rounded by ``rounding`` (int64).

    ``shift`` 0 returns a copy; a negative shift is a left shift (exact).

    Raises
    ------
    ValueError
        For an unknown rounding rule.
    """
    a = np.asarray(values, dtype=np.int64)
    if rounding not in ROUNDINGS:
        raise ValueError(f"rounding must be one of {', '.join(ROUNDINGS)}, got {rounding!r}")
    if shift <= 0:
        return a << np.int64(-shift)
    s = np.int64(shift)
    half = np.int64(1) << (s - 1)
    if rounding == "truncate":
        return a >> s
    if rounding == "round-half-up":
        return (a + half) >> s
    q = a >> s
    r = a - (q << s)
    return q + ((r > half) | ((r == half) & ((q & 1) == 1))).astype(np.int64)


def handle_overflow(values: np.ndarray, fmt: QFormat, overflow: str) -> np.ndarray:
    """Return int64 ``values`` brought into ``fmt``'s range: clipped (``saturate``) or
    reduced modulo 2**bits into the range (``wrap``).

    Raises
    ------
    ValueError
        For an unknown overflow rule.
    """
    a = np.asarray(values, dtype=np.int64)
    if overflow == "saturate":
        return np.clip(a, fmt.min_int, fmt.max_int)
    if overflow == "wrap":
        span = np.int64(1) << np.int64(fmt.bits)
        return ((a - fmt.min_int) % span) + fmt.min_int
    raise ValueError(f"overflow must be one of {', '.join(OVERFLOWS)}, got {overflow!r}")


def quantise(values: np.ndarray, fmt: QFormat, rounding: str = "convergent") -> np.ndarray:
    """Return complex (or real) float ``values`` (1.0 = full scale) in ``fmt`` as pairs.

    Each part is multiplied by 2**frac_bits, rounded by ``rounding`` (``round-half-up`` is
    ``floor(v + 1/2)``, ``convergent`` numpy's round half to even, ``truncate`` floor) and
    saturated to the rails. Returns an array of shape ``(n, 2)`` and dtype ``fmt.dtype``.

    Raises
    ------
    ValueError
        For an unknown rounding rule.
    """
    z = np.asarray(values, dtype=np.complex128)
    parts = np.stack([z.real, z.imag], axis=-1) * float(fmt.one)
    if rounding == "truncate":
        q = np.floor(parts)
    elif rounding == "round-half-up":
        q = np.floor(parts + 0.5)
    elif rounding == "convergent":
        q = np.round(parts)
    else:
        raise ValueError(f"rounding must be one of {', '.join(ROUNDINGS)}, got {rounding!r}")
    return np.clip(q, fmt.min_int, fmt.max_int).astype(fmt.dtype)


def as_pairs(values: np.ndarray) -> np.ndarray:
    """Return ``values`` of shape ``(n, 2)`` as int64 pairs (a copy).

    Raises
    ------
    ValueError
        When the array is not made of integers or its shape is not ``(n, 2)`` (or ``(2n,)``
        interleaved, which is accepted and reshaped).
    """
    a = np.asarray(values)
    if not np.issubdtype(a.dtype, np.integer):
        raise ValueError(f"fixed-point data must be integers, got dtype {a.dtype}")
    if a.ndim == 1 and a.size % 2 == 0:
        a = a.reshape(-1, 2)
    if a.ndim != 2 or a.shape[1] != 2:
        raise ValueError(f"complex fixed-point data is an (n, 2) array of (re, im) pairs, got shape {a.shape}")
    return a.astype(np.int64)


def from_interleaved(values: np.ndarray) -> np.ndarray:
    """Return interleaved ``re, im, re, im, ...`` integers as an ``(n, 2)`` view of them."""
    return np.asarray(values).reshape(-1, 2)


def pairs_to_complex(pairs: np.ndarray) -> np.ndarray:
    """Return ``(n, 2)`` integer pairs as complex values in LSBs (longdouble complex, exact
    for Q31: a long double holds 64 bits of mantissa on x86, 53 elsewhere, both enough)."""
    a = np.asarray(pairs)
    return a[..., 0].astype(np.longdouble) + 1j * a[..., 1].astype(np.longdouble)
