"""The built-in fixed-point radix-2 FFT: decimation in time in numpy integer arithmetic.

Every value is an int64 holding a number of the chosen :class:`~.formats.QFormat`; the
arithmetic is exactly what a C routine on 16- or 32-bit integers with a 64-bit accumulator
does. One butterfly of stage ``m`` (sub-transforms of length ``m``, ``j < m/2``)::

    t   = round(b * W, twiddle_bits - 1)   # W = exp(-2 pi i j / m) quantised to twiddle_bits
    a'  = a + t,  b' = a - t               # then the scaling rule, then the overflow rule

The complex product keeps its four real products and two sums in 64 bits and rounds once
per part (``shift_right`` by ``twiddle_bits - 1``); twiddles are rounded to nearest
(``round(cos * 2**(tb-1))``) and saturated to ``+-(2**(tb-1) - 1)``.

Scaling rules (``SCALINGS``), each with the shift that turns its output into the plain DFT
of the integer input (``output = DFT / 2**shift``):

``none``    no scaling; overflow rule applied after each stage; shift 0.
``input``   the input divided by N (``shift_right`` by log2 N) before the first stage;
            shift log2 N.
``stage``   each butterfly's sum and difference divided by 2; shift log2 N. Safe from
            overflow for inputs of magnitude ``|x| < 1``.
``bfp``     block floating point: before a stage, when the largest magnitude reaches half
            of full scale, the whole block is divided by 2 and the block exponent grows by
            one; shift = the exponent of that call (:attr:`FixedResult.exponent`).

Kinds (:meth:`FixedRadix2.run`), each declared by the same output shift (``output * 2**shift``
is the unnormalised transform of the integer input):

``fft``     the above: ``X[k] = sum x[n] exp(-2 pi i k n / N)``; ``(n, 2)`` pairs in and out.
``ifft``    the same butterflies with conjugated twiddles (``W = exp(+2 pi i j / m)``, the
            quantised imaginary parts negated): ``x[n] = sum X[k] exp(+2 pi i k n / N)``, so
            with ``stage`` or ``input`` (shift log2 N) the output is numpy's ``ifft``.
``rfft``    ``n`` real integers in; the complex radix-2 of ``(x, 0)``, bins ``0 .. n/2`` kept:
            ``(n/2 + 1, 2)`` pairs out (the textbook way, every stage at size N; a library
            that runs an N/2-point complex FFT and a split stage has as many roundings).
``irfft``   ``(n/2 + 1, 2)`` pairs in (the imaginary parts of DC and Nyquist ignored, as
            numpy's irfft does); the Hermitian extension (``X[N-k] = conj X[k]``, a negated
            rail saturated or wrapped by the overflow rule), the ``ifft`` above, the real
            parts kept: ``n`` integers out.

Source: the structure is Oppenheim & Schafer, Discrete-Time Signal Processing, 3rd ed.,
section 9.3 (decimation in time) and section 9.7 (its fixed-point noise analysis and
scaling), from memory; tests/test_fixed_point.py checks the arithmetic of every kind bit for
bit against an independent exact-rational implementation at N <= 16.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from fftgauge.harness.dft import bit_reversal_permutation, hermitian_indices, is_power_of_two, real_bins
from fftgauge.harness.fixed.formats import OVERFLOWS, ROUNDINGS, QFormat, as_pairs, handle_overflow, shift_right

__all__ = ["SCALINGS", "FixedRadix2", "FixedResult", "quantised_twiddles", "real_part", "scaling_shift"]

#: Scaling rules of the reference.
SCALINGS = ("none", "input", "stage", "bfp")

#: Words for each rule in verdict messages.
SCALING_WORDS = {"none": "no scaling", "input": "1/N at the input", "stage": "1/2 per stage",
                 "bfp": "block floating point"}


def scaling_shift(scaling: str, n: int) -> int | None:
    """Return the output shift (bits) of ``scaling`` at size ``n``: 0 for ``none``,
    log2 n for ``input`` and ``stage``, None for ``bfp`` (it varies per call).

    Raises
    ------
    ValueError
        For an unknown rule.
    """
    if scaling not in SCALINGS:
        raise ValueError(f"scaling must be one of {', '.join(SCALINGS)}, got {scaling!r}")
    if scaling == "none":
        return 0
    if scaling == "bfp":
        return None
    return int(n).bit_length() - 1


def quantised_twiddles(m: int, twiddle_bits: int) -> tuple[np.ndarray, np.ndarray]:
    """Return the real and imaginary parts (int64) of ``exp(-2 pi i j / m)``, ``j < m/2``,
    rounded to ``twiddle_bits``-bit fractions (``round(c * 2**(tb-1))``, saturated to
    ``+-(2**(tb-1) - 1)``)."""
    j = np.arange(m // 2, dtype=np.float64)
    angle = -2.0 * math.pi * j / m
    one = float(1 << (twiddle_bits - 1))
    top = (1 << (twiddle_bits - 1)) - 1
    wr = np.clip(np.round(np.cos(angle) * one), -top, top).astype(np.int64)
    wi = np.clip(np.round(np.sin(angle) * one), -top, top).astype(np.int64)
    return wr, wi


def real_part(pairs: np.ndarray) -> np.ndarray:
    """Return the real parts of ``(n, 2)`` pairs (the integers of a real output), same dtype."""
    return np.ascontiguousarray(np.asarray(pairs)[:, 0])


@dataclass(frozen=True)
class FixedResult:
    """One transform's output: ``(n, 2)`` pairs in the format's dtype and the output shift
    (bits) that turns them into the plain DFT (``output * 2**exponent ~ DFT``)."""

    pairs: np.ndarray
    exponent: int


@dataclass(frozen=True)
class FixedRadix2:
    """The reference of one format with one scaling, rounding, overflow rule and twiddle width.

    Raises
    ------
    ValueError
        For an unknown rule, or twiddle bits outside ``2..fmt.bits``.
    """

    fmt: QFormat
    scaling: str = "stage"
    rounding: str = "round-half-up"
    overflow: str = "saturate"
    twiddle_bits: int | None = None

    def __post_init__(self) -> None:
        scaling_shift(self.scaling, 1)
        if self.rounding not in ROUNDINGS:
            raise ValueError(f"rounding must be one of {', '.join(ROUNDINGS)}, got {self.rounding!r}")
        if self.overflow not in OVERFLOWS:
            raise ValueError(f"overflow must be one of {', '.join(OVERFLOWS)}, got {self.overflow!r}")
        if self.twiddle_bits is not None and not 2 <= self.twiddle_bits <= self.fmt.bits:
            raise ValueError(f"twiddle bits must be from 2 to {self.fmt.bits}, got {self.twiddle_bits}")

    @property
    def twiddle_width(self) -> int:
        """Bits of the twiddle factors (the format's width unless set)."""
        return self.twiddle_bits or self.fmt.bits

    def describe(self) -> str:
        """Return the reference in words, e.g. ``'radix-2 q15, 1/2 per stage, round-half-up'``."""
        tw = "" if self.twiddle_bits is None else f", {self.twiddle_bits}-bit twiddles"
        wrap = ", wrap-around" if self.overflow == "wrap" else ""
        return f"radix-2 {self.fmt.name}, {SCALING_WORDS[self.scaling]}, {self.rounding}{tw}{wrap}"

    def run(self, kind: str, x: np.ndarray, n: int | None = None) -> FixedResult:
        """Return the transform ``kind`` (``fft``, ``ifft``, ``rfft``, ``irfft``) of ``x`` in the
        layout of the module docstring; ``n`` is the signal length (needed for ``irfft`` only,
        default ``2 * (len(x) - 1)``). A real output comes back as ``(n, 2)`` pairs with zero
        imaginary parts (:func:`real_part` gives the integers).

        Raises
        ------
        ValueError
            For an unknown kind, data of the wrong layout, or n not a power of two.
        """
        if kind in ("fft", "ifft"):
            return self.transform(x, inverse=kind == "ifft")
        if kind == "rfft":
            return self.real_forward(x)
        if kind == "irfft":
            return self.real_inverse(x, n)
        raise ValueError(f"unknown transform kind {kind!r}")

    def real_forward(self, x: np.ndarray) -> FixedResult:
        """Return bins ``0 .. n/2`` of the forward DFT of ``n`` real integers ``x``.

        Raises
        ------
        ValueError
            When ``x`` is not 1-D integers or n is not a power of two.
        """
        a = np.asarray(x)
        if a.ndim != 1 or not np.issubdtype(a.dtype, np.integer):
            raise ValueError(f"a fixed-point rfft takes n real integers, got dtype {a.dtype} shape {a.shape}")
        pairs = np.stack([a.astype(np.int64), np.zeros(a.shape[0], dtype=np.int64)], axis=-1)
        full = self.transform(pairs)
        return FixedResult(full.pairs[: a.shape[0] // 2 + 1].copy(), full.exponent)

    def real_inverse(self, x: np.ndarray, n: int | None = None) -> FixedResult:
        """Return the inverse DFT of the half spectrum ``x`` (``(n/2 + 1, 2)`` pairs) as ``(n, 2)``
        pairs whose imaginary parts are zero (the real parts of the complex inverse).

        Raises
        ------
        ValueError
            When ``x`` is not pairs, holds fewer than ``n/2 + 1`` of them, or n is not a power of two.
        """
        half = as_pairs(x)
        n = 2 * (half.shape[0] - 1) if n is None else int(n)
        if n < 1 or half.shape[0] < n // 2 + 1:
            raise ValueError(f"an irfft of size {n} takes {n // 2 + 1} pairs, got {half.shape[0]}")
        half = half[: n // 2 + 1].copy()
        for k in real_bins(n):
            half[k, 1] = 0
        source, conjugated = hermitian_indices(n)
        full = half[source]
        full[conjugated, 1] = handle_overflow(-full[conjugated, 1], self.fmt, self.overflow)
        out = self.transform(full, inverse=True)
        pairs = out.pairs.copy()
        pairs[:, 1] = 0
        return FixedResult(pairs, out.exponent)

    def transform(self, x: np.ndarray, inverse: bool = False) -> FixedResult:
        """Return the forward DFT of ``(n, 2)`` integer pairs ``x`` (n a power of two), or with
        ``inverse`` the unnormalised inverse DFT (conjugated twiddles), each under the scaling.

        Raises
        ------
        ValueError
            When ``x`` is not ``(n, 2)`` integers or n is not a power of two.
        """
        pairs = as_pairs(x)
        n = pairs.shape[0]
        if not is_power_of_two(n):
            raise ValueError(f"the fixed-point radix-2 needs a power-of-two size, got {n}")
        log2n = n.bit_length() - 1
        order = bit_reversal_permutation(n)
        re, im = pairs[order, 0].copy(), pairs[order, 1].copy()
        exponent = 0
        if self.scaling == "input":
            re, im = shift_right(re, log2n, self.rounding), shift_right(im, log2n, self.rounding)
            exponent = log2n
        m = 2
        while m <= n:
            if self.scaling == "bfp" and np.max(np.hypot(re, im), initial=0.0) >= self.fmt.one / 2:
                re, im = shift_right(re, 1, self.rounding), shift_right(im, 1, self.rounding)
                exponent += 1
            re, im = self.stage(re, im, m, inverse)
            if self.scaling == "stage":
                exponent += 1
            m *= 2
        out = np.stack([re, im], axis=-1).astype(self.fmt.dtype)
        return FixedResult(out, exponent)

    def stage(self, re: np.ndarray, im: np.ndarray, m: int, inverse: bool = False) -> tuple[np.ndarray, np.ndarray]:
        """Return the data after the butterflies of the stage merging sub-transforms of length m/2
        (conjugated twiddles when ``inverse``)."""
        half = m // 2
        tb = self.twiddle_width
        wr, wi = quantised_twiddles(m, tb)
        if inverse:
            wi = -wi
        r, i = re.reshape(-1, m), im.reshape(-1, m)
        ar, ai, br, bi = r[:, :half], i[:, :half], r[:, half:], i[:, half:]
        tr = shift_right(br * wr - bi * wi, tb - 1, self.rounding)
        ti = shift_right(br * wi + bi * wr, tb - 1, self.rounding)
        top_r, top_i, bot_r, bot_i = ar + tr, ai + ti, ar - tr, ai - ti
        if self.scaling == "stage":
            top_r, top_i, bot_r, bot_i = (shift_right(v, 1, self.rounding) for v in (top_r, top_i, bot_r, bot_i))
        out_r = np.concatenate([top_r, bot_r], axis=1).reshape(-1)
        out_i = np.concatenate([top_i, bot_i], axis=1).reshape(-1)
        return handle_overflow(out_r, self.fmt, self.overflow), handle_overflow(out_i, self.fmt, self.overflow)

