"""Q15 FFTs written for the pick tests: one whose only error is the rounding of its output
to the Q15 grid (the exact DFT / N, rounded half to even once per part, saturated), and its
twin that keeps one bit fewer (rounded to a grid of 2 LSBs).

An output rounded once to a grid of step q carries an error uniform over [-q/2, q/2) per part,
of variance q**2 / 12 (the uniform model of rounding noise, common practice), so the twin's
SQNR is 20 log10 2 = 6.02 dB below the first's: one bit is 6.02 dB (common practice; the same
6.02 as in an ideal b-bit quantiser's 6.02 b + 1.76 dB on a full-scale sine).
"""

from __future__ import annotations

import numpy as np

from fftgauge import Backend, Capabilities, FunctionPlan
from fftgauge.harness.fixed.declared import FixedScaling


def rounded_dft(x: np.ndarray, step_lsb: int) -> np.ndarray:
    """Return the DFT / N of ``(n, 2)`` int16 pairs rounded half to even to a grid of
    ``step_lsb`` LSBs, saturated to int16, as ``(n, 2)`` int16 pairs (numpy's float64 FFT:
    its error, about 1e-12 LSB here, is far below the rounding)."""
    a = np.asarray(x, dtype=np.float64)
    n = a.shape[0]
    y = np.fft.fft(a[:, 0] + 1j * a[:, 1]) / n
    parts = np.stack([y.real, y.imag], axis=-1) / step_lsb
    return np.clip(np.round(parts) * step_lsb, -32768, 32767).astype(np.int16)


class RoundedQ15(Backend):
    """The exact DFT / N, rounded once to Q15 (output shift log2 n)."""

    name = "rounded-q15"
    description = "the exact DFT / N rounded once to Q15, written for the tests"
    step_lsb = 1

    def capabilities(self):
        return Capabilities(kinds=("fft",), dtypes=("q15",), sizes="pow2", norms=("backward",),
                            fixed=FixedScaling(output_shift="log2n", scaling="stage", rounding="convergent"))

    def plan(self, case):
        return FunctionPlan(case, lambda x: rounded_dft(x, self.step_lsb))


class CoarseQ15(RoundedQ15):
    """The same, rounded to a grid of 2 LSBs (one bit fewer)."""

    name = "coarse-q15"
    description = "the exact DFT / N rounded to 2 LSBs, written for the tests"
    step_lsb = 2
