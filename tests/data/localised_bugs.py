"""Broken FFTs for the localisation tests, one per pattern: each is a plain callable
``f(x) -> X`` (numpy's forward convention) with one bug of a kind FFT code really has.

Where the rest of the transform is right it is numpy.fft (the bug is what is under test).
"""

from __future__ import annotations

import numpy as np


def _twiddles(n: int, k: np.ndarray) -> np.ndarray:
    return np.exp(-2j * np.pi * k / n)


def radix2_last_twiddle(x):
    """Iterative radix-2 decimation-in-time FFT (powers of two) whose last stage takes the
    twiddle one past the right one for its last butterfly (j = N/2 - 1 uses W_N^(N/2)):
    the twiddle index of the last stage runs one past the table."""
    x = np.asarray(x)
    n = x.shape[0]
    bits = n.bit_length() - 1
    rev = np.array([int(format(i, f"0{bits}b")[::-1], 2) if bits else 0 for i in range(n)])
    a = x.astype(np.complex128)[rev]
    size = 2
    while size <= n:
        half = size // 2
        j = np.arange(half)
        if size == n and n >= 4:
            j = j.copy()
            j[-1] += 1  # the bug
        w = _twiddles(size, j)
        a = a.reshape(-1, size)
        top, bottom = a[:, :half].copy(), a[:, half:] * w
        a[:, :half], a[:, half:] = top + bottom, top - bottom
        a = a.reshape(-1)
        size *= 2
    return a.astype(x.dtype if x.dtype.kind == "c" else np.complex128)


def bluestein_padding(x):
    """numpy.fft, except at primes above 64, where Bluestein's chirp-z convolution runs with a
    chirp filter whose wrap-around part is one value short (``range(1, n - 1)`` for
    ``range(1, n)``): the term k - n = -(N - 1) is dropped, so X[0] misses x[N - 1]."""
    x = np.asarray(x)
    n = x.shape[0]
    if n <= 64 or any(n % p == 0 for p in range(2, int(n ** 0.5) + 1)):
        return np.fft.fft(x).astype(x.dtype if x.dtype.kind == "c" else np.complex128)
    m = 1 << (2 * n - 2).bit_length()
    idx = np.arange(n)
    chirp = np.exp(-1j * np.pi * (idx * idx % (2 * n)) / n)
    a = np.zeros(m, complex)
    a[:n] = x * chirp
    b = np.zeros(m, complex)
    b[:n] = np.conj(chirp)
    for j in range(1, n - 1):  # the bug: range(1, n)
        b[m - j] = np.conj(chirp[j])
    conv = np.fft.ifft(np.fft.fft(a) * np.fft.fft(b))[:n]
    return (chirp * conv).astype(x.dtype if x.dtype.kind == "c" else np.complex128)


def radix3_pass(x):
    """numpy.fft, except at n divisible by 3, where one radix-3 decimation-in-time pass
    combines the three sub-transforms with the third leg's twiddle W^k in place of W^(2k)."""
    x = np.asarray(x)
    n = x.shape[0]
    out_dtype = x.dtype if x.dtype.kind == "c" else np.complex128
    if n % 3:
        return np.fft.fft(x).astype(out_dtype)
    m = n // 3
    subs = [np.fft.fft(x[r::3].astype(np.complex128)) for r in range(3)]
    k = np.arange(n)
    out = subs[0][k % m] + _twiddles(n, k) * subs[1][k % m] + _twiddles(n, k) * subs[2][k % m]  # bug: 2k
    return out.astype(out_dtype)


#: The size from which :func:`large_path` takes its large-size path.
LARGE_FROM = 4096


def large_path(x):
    """numpy.fft, except from LARGE_FROM points up, where a "blocked" path combines two
    half-length transforms with a twiddle table built for half the length (W_(N/2)^k)."""
    x = np.asarray(x)
    n = x.shape[0]
    out_dtype = x.dtype if x.dtype.kind == "c" else np.complex128
    if n < LARGE_FROM or n % 2:
        return np.fft.fft(x).astype(out_dtype)
    even, odd = np.fft.fft(x[0::2].astype(np.complex128)), np.fft.fft(x[1::2].astype(np.complex128))
    k = np.arange(n // 2)
    w = _twiddles(n // 2, k)  # bug: the table of N/2, not N
    return np.concatenate([even + w * odd, even - w * odd]).astype(out_dtype)


def half_sample(x):
    """numpy.fft times exp(-j pi k / N): the transform of the input delayed by half a sample
    (a half-sample offset in the twiddles)."""
    x = np.asarray(x)
    n = x.shape[0]
    k = np.arange(n)
    return (np.fft.fft(x) * np.exp(-1j * np.pi * k / n)).astype(x.dtype if x.dtype.kind == "c" else np.complex128)


_BUFFERS: dict = {}


def aliased_output(x):
    """A right transform written into one module-level buffer per length and dtype, which is
    returned: the caller's previous result changes on the next call."""
    x = np.asarray(x)
    dtype = x.dtype if x.dtype.kind == "c" else np.complex128
    out = _BUFFERS.setdefault((x.shape[0], np.dtype(dtype).str), np.empty(x.shape[0], dtype))
    out[:] = np.fft.fft(x)
    return out


def odd_real(x):
    """A real-input transform (``kind=rfft``) that, at odd n, treats the last bin as a
    Nyquist bin and keeps only its real part (right only at even n)."""
    x = np.asarray(x)
    n = x.shape[0]
    out = np.fft.rfft(x)
    if n % 2:
        out[-1] = out[-1].real
    return out.astype(np.complex64 if x.dtype == np.float32 else np.complex128)


#: The sizes :func:`no_rule` fails at: they share none of the rules (5, 22, 39, 56 = 5 mod 17).
NO_RULE_SIZES = (5, 22, 39, 56)


def no_rule(x):
    """numpy.fft, except at NO_RULE_SIZES, where the output is reversed in time order of the
    upper half (X[k] for k > N/2 swapped with a neighbour): a bug tied to no size rule."""
    x = np.asarray(x)
    out = np.fft.fft(x).astype(x.dtype if x.dtype.kind == "c" else np.complex128)
    if x.shape[0] in NO_RULE_SIZES:
        out[1], out[2] = out[2].copy(), out[1].copy()
    return out


def aliased_output_slow(x):
    """:func:`aliased_output` that waits 20 ms between writing its buffer and returning it, so
    that threads calling it at once overwrite each other's results before they return."""
    import time

    x = np.asarray(x)
    dtype = x.dtype if x.dtype.kind == "c" else np.complex128
    out = _BUFFERS.setdefault(("slow", x.shape[0], np.dtype(dtype).str), np.empty(x.shape[0], dtype))
    out[:] = np.fft.fft(x)
    time.sleep(0.02)
    return out


def real_fast_path(x):
    """numpy.fft for complex inputs; for an input whose imaginary part is zero a "fast path"
    that builds the upper half from the lower one without conjugating (X[N-k] = X[k])."""
    x = np.asarray(x)
    n = x.shape[0]
    out_dtype = x.dtype if x.dtype.kind == "c" else np.complex128
    if x.dtype.kind == "c" and np.any(x.imag != 0):
        return np.fft.fft(x).astype(out_dtype)
    half = np.fft.rfft(np.real(x))
    out = np.empty(n, np.complex128)
    out[: half.shape[0]] = half
    k = np.arange(half.shape[0], n)
    out[k] = half[n - k]  # the bug: conj(half[n - k])
    return out.astype(out_dtype)


def radix2_dif_twiddle(x):
    """Radix-2 decimation-in-frequency FFT (powers of two) whose first stage multiplies the
    difference x[3] - x[3 + N/2] by W_N^4 in place of W_N^3 (one wrong twiddle of stage 1)."""
    x = np.asarray(x)
    n = x.shape[0]
    a = x.astype(np.complex128).copy()
    size, first = n, True
    while size >= 2:
        half = size // 2
        j = np.arange(half)
        if first and n >= 8:
            j = j.copy()
            j[3] = 4  # the bug
        a = a.reshape(-1, size)
        top, bottom = a[:, :half].copy(), a[:, half:].copy()
        a[:, :half], a[:, half:] = top + bottom, (top - bottom) * _twiddles(size, j)
        a = a.reshape(-1)
        size, first = half, False
    bits = n.bit_length() - 1
    rev = np.array([int(format(i, f"0{bits}b")[::-1], 2) if bits else 0 for i in range(n)])
    return a[rev].astype(x.dtype if x.dtype.kind == "c" else np.complex128)


#: sin(2 pi / 3) written with four digits, as a hand-written radix-3 butterfly may have it.
SIN_60_SHORT = 0.8660


def radix3_rounded(x):
    """numpy.fft, except at n divisible by 3, where the last decimation-in-time pass is a
    radix-3 butterfly on the twiddled sub-transforms whose constant sin(2 pi / 3) is written
    as 0.8660 (right to 2.5e-5): every bin but those of the first block N/3 is off by a little."""
    x = np.asarray(x)
    n = x.shape[0]
    out_dtype = x.dtype if x.dtype.kind == "c" else np.complex128
    if n % 3:
        return np.fft.fft(x).astype(out_dtype)
    m = n // 3
    q = np.arange(m)
    a, b, c = (np.fft.fft(x[r::3].astype(np.complex128)) * _twiddles(n, r * q) for r in range(3))
    mid = a - 0.5 * (b + c)
    rot = -1j * SIN_60_SHORT * (b - c)  # w_3 = -1/2 - j sin(2 pi/3)
    return np.concatenate([a + b + c, mid + rot, mid - rot]).astype(out_dtype)


def half_sample_ifft(x):
    """numpy.fft.ifft with the time index offset by half a sample in its exponent
    (exp(+2j pi k (t + 1/2) / N) read as exp(+2j pi (k + 1/2) t / N)): the output times
    exp(+j pi t / N), the inverse's sign."""
    x = np.asarray(x)
    n = x.shape[0]
    t = np.arange(n)
    return (np.fft.ifft(x) * np.exp(1j * np.pi * t / n)).astype(x.dtype if x.dtype.kind == "c" else np.complex128)


def half_sample_irfft(x, n):
    """numpy.fft.irfft of the half spectrum times exp(-j pi k / N): the output delayed by half a
    sample (a half-sample offset in the twiddles of a real inverse)."""
    x = np.asarray(x)
    k = np.arange(x.shape[0])
    out = np.fft.irfft(x * np.exp(-1j * np.pi * k / n), n)
    return out.astype(np.float32 if x.dtype == np.complex64 else np.float64)
