"""Worst-case error of a fixed-point radix-2 FFT, in output LSBs, from the format, the
scaling rule and the twiddle width: the limits of the structural checks of q15/q31 cases.

Derivation (worst case, any rounding rule; the form of the analysis is Oppenheim & Schafer,
Discrete-Time Signal Processing, 3rd ed., section 9.7, from memory: error sources per
butterfly, propagated through the later stages; tests/test_fixed_structure.py checks that
no measured error exceeds it). Every right shift of a part errs by less than 1 LSB whatever
the rule (truncation is the worst), so one rounding of a complex value errs by less than
``rho = sqrt 2`` LSB in magnitude. A ``tb``-bit twiddle part errs by at most one of its LSBs,
2**-(tb-1) (rounding, or saturating 1.0 to 1 - 2**-(tb-1)), so ``|W_q - W| <= sqrt 2 * 2**-(tb-1)``
and ``|W_q| <= w = 1 + sqrt 2 * 2**-(tb-1)``; applied to an operand of magnitude at most
``sqrt 2 * 2**(bits-1)`` (both parts at the rails) it errs by ``tau = 2**(bits-tb+1)`` LSB.
With ``e`` the largest error magnitude of the data before a stage, a butterfly
``a + W b`` then errs by at most ``e (1 + w) + tau + rho`` (the product rounded once), so:

``none``   ``e <- (1 + w) e + tau + rho``                              (from e = 0)
``input``  the same from ``e = rho`` (the input's shift by log2 N)
``stage``  ``e <- ((1 + w) e + tau + rho) / 2 + rho``                   (the halving rounds once more)
``bfp``    the larger of ``none``'s step and a halving first: ``(1 + w)(e/2 + rho) + tau + rho``

after log2 N stages. Without the twiddle term (``twiddles=False``) it bounds the part of the
error that is not linear in the input: the twiddles' own error is the same linear map for
every input, so it cancels in a linearity test.
"""

from __future__ import annotations

import math

from fftgauge.harness.fixed.formats import QFormat
from fftgauge.harness.fixed.radix2 import SCALINGS

__all__ = ["ROUNDING_ERROR_LSB", "error_bound_lsb", "headroom_level_dbfs"]

#: Largest error (magnitude, LSB) of one rounding of a complex value, any rule.
ROUNDING_ERROR_LSB = math.sqrt(2.0)

#: Peak level (dBFS) of the structural checks' inputs where the scaling keeps the output in range.
SAFE_LEVEL_DBFS = -6.0


def error_bound_lsb(scaling: str, n: int, fmt: QFormat, twiddle_bits: int | None = None,
                    twiddles: bool = True) -> float:
    """Return the largest error magnitude (LSB of the output) of a radix-2 of size ``n`` with
    ``scaling``, against the exact DFT of its input shifted by the output shift, for inputs
    whose outputs stay in range (see the module docstring; 0 at n = 1).

    Raises
    ------
    ValueError
        For an unknown scaling rule or a size that is not a power of two.
    """
    if scaling not in SCALINGS:
        raise ValueError(f"scaling must be one of {', '.join(SCALINGS)}, got {scaling!r}")
    if n < 1 or n & (n - 1):
        raise ValueError(f"the bound is for power-of-two sizes, got {n}")
    rho = ROUNDING_ERROR_LSB
    tb = twiddle_bits or fmt.bits
    w = 1.0 + math.sqrt(2.0) * 2.0 ** -(tb - 1)
    tau = 2.0 ** (fmt.bits - tb + 1) if twiddles else 0.0
    e = rho if scaling == "input" and n > 1 else 0.0
    for _ in range(n.bit_length() - 1):
        plain = (1.0 + w) * e + tau + rho
        if scaling == "stage":
            e = plain / 2.0 + rho
        elif scaling == "bfp":
            e = max(plain, (1.0 + w) * (e / 2.0 + rho) + tau + rho)
        else:
            e = plain
    return e


def headroom_level_dbfs(scaling: str, n: int) -> float:
    """Return the peak level (dBFS) of an input whose transform stays within half of full
    scale under ``scaling``: -6 dBFS, less 20 log10 N without scaling (the DFT of a peak A
    is at most N A)."""
    if scaling == "none":
        return SAFE_LEVEL_DBFS - 20.0 * math.log10(max(n, 1))
    return SAFE_LEVEL_DBFS
