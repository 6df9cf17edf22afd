"""A user's own FFT, as a newcomer writes it: a correct recursive radix-2 decimation in time
in pure Python (Cooley & Tukey 1965), for powers of two only.

Checked from the command line with ``fftgauge check --backend tests/data/user_radix2.py:fft``
and no other option: the battery finds that every other size raises the same error, treats
those sizes as not claimed (suggesting ``[sizes=pow2]``), and skips for time the sizes whose
case would exceed the per-case budget.
"""

import cmath

import numpy as np


def _fft(values: list) -> list:
    n = len(values)
    if n == 1:
        return values
    even = _fft(values[0::2])
    odd = _fft(values[1::2])
    out = [0j] * n
    half = n // 2
    for k in range(half):
        t = cmath.exp(-2j * cmath.pi * k / n) * odd[k]
        out[k] = even[k] + t
        out[k + half] = even[k] - t
    return out


def fft(x):
    """Return the forward DFT of the 1-D array ``x`` (numpy's sign, no scaling).

    Raises ValueError when the length is not a power of two.
    """
    x = np.asarray(x)
    n = x.shape[0]
    if n < 1 or n & (n - 1):
        raise ValueError(f"size must be a power of two, got {n}")
    dtype = np.complex64 if x.dtype in (np.float32, np.complex64) else np.complex128
    return np.array(_fft([complex(v) for v in x.tolist()]), dtype=dtype)
