"""FFT routines that follow a convention other than numpy's on purpose, as firmware, DSP and
physics code does: for the declared-convention tests (tests/test_conventions.py).

Each is a plain callable a SPEC can name (``tests/data/convention_ffts.py:bitreversed_dit``);
:class:`CentredBackend` is an adapter class that declares its convention in its capabilities.
numpy's convention, which the others are told apart from: X[k] = sum_j x[j] exp(-2j pi k j / N),
no scaling on the forward transform, natural order, N//2 + 1 complex values for rfft.
"""

from __future__ import annotations

import numpy as np

from fftgauge.backends.base import Backend, Capabilities, Conventions, FunctionPlan, SizeRule
from fftgauge.harness.cases import Case


def _complex(x):
    x = np.asarray(x)
    return x.astype(np.complex64 if x.dtype in (np.float32, np.complex64) else np.complex128)


def _bit_reverse(i: int, bits: int) -> int:
    out = 0
    for _ in range(bits):
        out, i = (out << 1) | (i & 1), i >> 1
    return out


def bitreversed_dit(x):
    """Radix-2 decimation-in-time FFT, in place, natural-order input, output left in
    bit-reversed order (entry k holds X[bitrev(k)]): the in-place Cooley-Tukey algorithm
    without its final reordering (Cooley & Tukey, Math. Comp. 19 (1965) 297-301; the flow
    graph with input in normal order and output in bit-reversed order is Oppenheim & Schafer,
    Discrete-Time Signal Processing, 3rd ed., Fig. 9.15, from memory; verified against
    numpy.fft.fft with the permutation in tests/test_conventions.py).

    Stage s (s = 0 .. t-1) has 2^s groups of span m = N / 2^s; group g multiplies the lower
    half of its span by W_N^(bitrev_s(g) N / 2^(s+1)) before the butterfly (a + w b, a - w b).
    Raises ValueError when the length is not a power of two.
    """
    y = _complex(x).copy()
    n = y.shape[0]
    if n < 1 or n & (n - 1):
        raise ValueError(f"size must be a power of two, got {n}")
    groups, span, stage = 1, n, 0
    while span > 1:
        half = span // 2
        for g in range(groups):
            w = np.exp(-2j * np.pi * _bit_reverse(g, stage) / (2 * groups)).astype(y.dtype)
            top = slice(g * span, g * span + half)
            low = slice(g * span + half, (g + 1) * span)
            a, b = y[top].copy(), w * y[low]
            y[top], y[low] = a + b, a - b
        groups, span, stage = 2 * groups, half, stage + 1
    return y


def scaled_fft(x):
    """The forward DFT scaled by 1/N (as many DSP libraries and textbooks define it)."""
    x = np.asarray(x)
    return (np.fft.fft(x) / x.shape[0]).astype(_complex(x).dtype)


def sqrt_scaled_fft(x):
    """The forward DFT scaled by 1/sqrt(N) (a unitary transform)."""
    x = np.asarray(x)
    return (np.fft.fft(x) / np.sqrt(x.shape[0])).astype(_complex(x).dtype)


def unscaled_ifft(x):
    """The inverse DFT without the 1/N: sum_k X[k] exp(+2j pi k j / N) (companion of scaled_fft)."""
    x = np.asarray(x)
    return (np.fft.ifft(x) * x.shape[0]).astype(_complex(x).dtype)


def plus_sign_fft(x):
    """The forward DFT with the exponent sign +1, sum_j x[j] exp(+2j pi k j / N), unscaled
    (common in physics codes): N times numpy.fft.ifft."""
    x = np.asarray(x)
    return (np.fft.ifft(x) * x.shape[0]).astype(_complex(x).dtype)


def plus_sign_ifft(x):
    """Its inverse: (1/N) sum_k X[k] exp(-2j pi k j / N), numpy.fft.fft / N."""
    x = np.asarray(x)
    return (np.fft.fft(x) / x.shape[0]).astype(_complex(x).dtype)


def centred_fft(x):
    """The forward DFT with DC in the middle: numpy.fft.fftshift(numpy.fft.fft(x))."""
    return np.fft.fftshift(np.fft.fft(x)).astype(_complex(x).dtype)


def centred_ifft(x):
    """Its inverse, taking a centred spectrum: numpy.fft.ifft(numpy.fft.ifftshift(X))."""
    return np.fft.ifft(np.fft.ifftshift(x)).astype(_complex(x).dtype)


def plus_sign_rfft(x):
    """A real FFT with the exponent sign +1: the conjugate of numpy.fft.rfft (x real)."""
    return np.conj(np.fft.rfft(x)).astype(_complex(x).dtype)


def plus_sign_irfft(p, n):
    """Its inverse, taking the +1-sign half spectrum: numpy.fft.irfft of its conjugate."""
    return np.fft.irfft(np.conj(p), n).astype(_real_dtype(p))


def dsp_style_fft(x):
    """Three conventions at once: the +1 sign, 1/N on the forward transform, bit-reversed
    output, from the DIT above (F+(x) = conj(F(conj(x))))."""
    x = _complex(x)
    return (np.conj(bitreversed_dit(np.conj(x))) / x.shape[0]).astype(x.dtype)


def _real_dtype(x):
    return np.float32 if np.asarray(x).dtype in (np.float32, np.complex64) else np.float64


def dc_nyquist_rfft(x):
    """A real FFT in the packed layout of n reals: Re X0, Re X[N/2], Re X1, Im X1, ...,
    Re X[N/2-1], Im X[N/2-1] (DC and Nyquist sharing the first pair), N even."""
    x = np.asarray(x)
    n = x.shape[0]
    half = np.fft.rfft(x)
    out = np.empty(n, dtype=_real_dtype(x))
    out[0], out[1] = half[0].real, half[n // 2].real
    out[2::2], out[3::2] = half[1:n // 2].real, half[1:n // 2].imag
    return out


def dc_nyquist_irfft(p, n):
    """The inverse of :func:`dc_nyquist_rfft`: n reals in that layout to the real signal (1/N)."""
    p = np.asarray(p)
    half = np.zeros(n // 2 + 1, dtype=np.complex128)
    half[0], half[n // 2] = p[0], p[1]
    half[1:n // 2] = p[2::2] + 1j * p[3::2]
    return np.fft.irfft(half, n).astype(_real_dtype(p))


def halfcomplex_rfft(x):
    """A real FFT in the halfcomplex layout: Re X0, Re X1, ..., Re X[N//2], Im X[(N-1)//2], ..., Im X1."""
    x = np.asarray(x)
    n = x.shape[0]
    half = np.fft.rfft(x)
    return np.concatenate([half.real, half.imag[1:(n + 1) // 2][::-1]]).astype(_real_dtype(x))


def halfcomplex_irfft(p, n):
    """The inverse of :func:`halfcomplex_rfft` (1/N)."""
    p = np.asarray(p)
    half = np.zeros(n // 2 + 1, dtype=np.complex128)
    half.real = p[:n // 2 + 1]
    half.imag[1:(n + 1) // 2] = p[n // 2 + 1:][::-1]
    return np.fft.irfft(half, n).astype(_real_dtype(p))


class CentredBackend(Backend):
    """An adapter class whose fft gives a centred spectrum and whose ifft takes one, declared
    in its capabilities (``Conventions(order="centred")``)."""

    name = "centred-numpy"
    description = "numpy.fft with DC in the middle of the spectrum"

    @property
    def version(self) -> str:
        return "0.0-test"

    def capabilities(self) -> Capabilities:
        return Capabilities(kinds=("fft", "ifft"), norms=("backward",), sizes=SizeRule("any"),
                            conventions=Conventions(order="centred"))

    def plan(self, case: Case) -> FunctionPlan:
        return FunctionPlan(case, centred_fft if case.kind == "fft" else centred_ifft)
