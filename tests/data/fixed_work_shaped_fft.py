"""Array FFTs whose work is a known multiple of one numpy transform, for the instruction counts of
shaped cases (loaded as ``tests/data/fixed_work_shaped_fft.py:fftn[kind=fftn]``, called
``f(x, axes)``): ``fftn`` computes numpy's N-D FFT of its input over ``axes``
:data:`BASE_PASSES` times (returning the last), ``fftn_plus5`` 5% more passes. Each pass is the
same work on the same input, so the extra work is 5% of the base, less the call's own fixed
overhead."""

import numpy as np

#: numpy transforms per call of ``fftn``.
BASE_PASSES = 100


def _passes(x, axes, count):
    out = None
    for _ in range(count):
        out = np.fft.fftn(x, axes=axes)
    return out


def fftn(x, axes):
    """Return numpy's FFT of ``x`` over ``axes`` after :data:`BASE_PASSES` passes."""
    return _passes(x, axes, BASE_PASSES)


def fftn_plus5(x, axes):
    """Return numpy's FFT of ``x`` over ``axes`` after 5% more passes than :func:`fftn`."""
    return _passes(x, axes, BASE_PASSES + 5 * BASE_PASSES // 100)
