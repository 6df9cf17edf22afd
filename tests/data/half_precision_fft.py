"""A forward FFT that computes in float16 and returns float64: the kind of routine a
fixed-point or half-precision DSP path stands for (an invented test subject).

``fft(x)`` rounds the input to float16, runs the iterative radix-2 decimation-in-time FFT
(bit-reversed input order, log2 N butterfly stages) with every sum, product and twiddle
factor rounded to float16, and returns the result as complex128. Powers of two only (a
ValueError otherwise). Source of the algorithm: Cooley & Tukey, Math. Comp. 19 (1965) 297-301;
the in-place form as in Oppenheim & Schafer, Discrete-Time Signal Processing, 3rd ed., ch. 9.
"""

import numpy as np

HALF = np.float16


def _bit_reversed(n):
    bits = n.bit_length() - 1
    idx = np.arange(n)
    rev = np.zeros(n, dtype=np.int64)
    for b in range(bits):
        rev |= ((idx >> b) & 1) << (bits - 1 - b)
    return rev


def fft(x):
    """Return the forward DFT of ``x`` (numpy's sign, no scaling) computed in float16, as complex128."""
    x = np.asarray(x)
    n = x.shape[0]
    if n & (n - 1):
        raise ValueError(f"half_precision_fft needs a power of two, got n = {n}")
    order = _bit_reversed(n)
    re = np.real(x).astype(HALF)[order]
    im = np.imag(x).astype(HALF)[order] if np.iscomplexobj(x) else np.zeros(n, dtype=HALF)
    size = 2
    while size <= n:
        half = size // 2
        angle = -2.0 * np.pi * np.arange(half) / size
        wr, wi = np.cos(angle).astype(HALF), np.sin(angle).astype(HALF)
        re = re.reshape(-1, size)
        im = im.reshape(-1, size)
        ar, ai = re[:, :half], im[:, :half]
        br, bi = re[:, half:], im[:, half:]
        tr = (br * wr - bi * wi).astype(HALF)
        ti = (br * wi + bi * wr).astype(HALF)
        re = np.concatenate([ar + tr, ar - tr], axis=1).astype(HALF).reshape(-1)
        im = np.concatenate([ai + ti, ai - ti], axis=1).astype(HALF).reshape(-1)
        size *= 2
    return re.astype(np.float64) + 1j * im.astype(np.float64)
