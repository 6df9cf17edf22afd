"""FFTs whose work is a known multiple of one numpy transform, for the instruction-count gate's
tests: ``fft`` computes numpy's forward FFT of its input :data:`BASE_PASSES` times (returning
the last), ``fft_plus1`` 1% more passes, ``fft_plus5`` 5% more. Each pass is the same work on
the same input, so the extra work is 1% or 5% of the base (less the call's own fixed overhead,
a few hundred instructions against ~4e6)."""

import numpy as np

#: numpy transforms per call of ``fft``.
BASE_PASSES = 100


def _passes(x, count):
    out = None
    for _ in range(count):
        out = np.fft.fft(x)
    return out


def fft(x):
    """Return numpy's FFT of ``x`` after :data:`BASE_PASSES` passes."""
    return _passes(x, BASE_PASSES)


def fft_plus1(x):
    """Return numpy's FFT of ``x`` after 1% more passes than :func:`fft`."""
    return _passes(x, BASE_PASSES + BASE_PASSES // 100)


def fft_plus5(x):
    """Return numpy's FFT of ``x`` after 5% more passes than :func:`fft`."""
    return _passes(x, BASE_PASSES + 5 * BASE_PASSES // 100)
