"""Figures of merit of a fixed-point transform's output against its exact value.

Every function takes the output as ``(n, 2)`` integer pairs and the exact value as complex
numbers in the same units (LSBs of the output format), i.e. the extended-precision DFT of
the *quantised* input divided by 2**output_shift, so the input's own quantisation is not
charged to the transform.
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass

import numpy as np

from fftgauge.harness.fixed.formats import QFormat, pairs_to_complex

__all__ = ["FixedMetrics", "enob_from_sinad", "ideal_sqnr_db", "measure", "sqnr_db"]

#: SQNR reported when the output is exact (no error at all).
EXACT_SQNR_DB = math.inf


def sqnr_db(exact: np.ndarray, output: np.ndarray) -> float:
    """Return 10 log10(sum |exact|^2 / sum |output - exact|^2) in dB (inf when exact, -inf
    for a zero exact signal with a nonzero error, nan when both are zero)."""
    e = np.asarray(exact, dtype=np.clongdouble)
    err = np.sum(np.abs(np.asarray(output, dtype=np.clongdouble) - e) ** 2)
    sig = np.sum(np.abs(e) ** 2)
    if err == 0:
        return EXACT_SQNR_DB if sig > 0 else math.nan
    if sig == 0:
        return -math.inf
    return float(10.0 * np.log10(np.longdouble(sig) / np.longdouble(err)))


def enob_from_sinad(sinad_db: float) -> float:
    """Return the effective number of bits ENOB = (SINAD - 1.76) / 6.02 of a sine's SINAD in dB.

    Source: IEEE Std 1241 (ADC terminology and test methods), the sine-wave form of ENOB
    (from memory; 1.76 = 10 log10(3/2) and 6.02 = 20 log10 2 are checked in the tests).
    """
    return (sinad_db - 1.76) / 6.02


def ideal_sqnr_db(bits: int) -> float:
    """Return 6.02 b + 1.76 dB, the SQNR of an ideal b-bit quantiser for a full-scale sine
    (common practice; the inverse of :func:`enob_from_sinad`)."""
    return 6.02 * bits + 1.76


@dataclass(frozen=True)
class FixedMetrics:
    """What one output says: SQNR (dB), ENOB from it, the largest error of a part in output
    LSBs, the number of output parts clipped at the rails, the number that wrapped around."""

    sqnr_db: float
    enob: float
    max_error_lsb: float
    at_rails: int
    wrapped: int

    def as_dict(self) -> dict:
        """Return the metrics as JSON-able values."""
        return asdict(self)


def measure(output: np.ndarray, exact: np.ndarray, fmt: QFormat) -> FixedMetrics:
    """Return the :class:`FixedMetrics` of ``output`` pairs against ``exact`` (complex, LSBs).

    A part is *at the rails* when it equals the format's lowest or highest integer and lies
    more than 1 LSB from its exact value (clipped: an exact value that is itself at the rail,
    as a full-scale tone's bin or an inverse's sample is, is the right answer there). A part
    is counted as *wrapped* when it lies more than half the format's range (2**(bits-1) LSBs)
    from the exact value clipped to the rails: a two's-complement wrap moves a part by the
    whole range; saturation of the output alone moves none that far, but saturation inside
    an early stage of a heavily overflowing transform (no scaling) can garble later parts as
    much, so the checks compare this count with the saturating reference's, never with 0.
    """
    y = np.asarray(output)
    got = pairs_to_complex(y)
    ex = np.asarray(exact, dtype=np.clongdouble)
    parts_err = np.concatenate([np.abs(got.real - ex.real), np.abs(got.imag - ex.imag)])
    clipped_r = np.clip(ex.real, fmt.min_int, fmt.max_int)
    clipped_i = np.clip(ex.imag, fmt.min_int, fmt.max_int)
    far = np.concatenate([np.abs(got.real - clipped_r), np.abs(got.imag - clipped_i)]) > (1 << (fmt.bits - 1))
    on_rail = np.concatenate([(y[..., 0] == fmt.min_int) | (y[..., 0] == fmt.max_int),
                              (y[..., 1] == fmt.min_int) | (y[..., 1] == fmt.max_int)])
    rails = int(np.count_nonzero(on_rail & (parts_err > 1.0)))
    s = sqnr_db(ex, got)
    return FixedMetrics(sqnr_db=s, enob=enob_from_sinad(s), max_error_lsb=float(np.max(parts_err, initial=0.0)),
                        at_rails=rails, wrapped=int(np.count_nonzero(far)))
