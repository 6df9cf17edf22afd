"""Test signals of the fixed-point checks, at levels in dBFS.

A level of L dBFS puts the signal's largest magnitude ``|x[n]|`` at ``10**(L/20)`` of full
scale (1.0, the format's ``2**frac_bits``). The signals:

``tone``     ``A exp(2 pi i k0 n / N)`` with ``k0 = N/4 + 1`` (mod N): every sample at the peak
             magnitude, all the energy in one bin.
``noise``    complex Gaussian noise (seeded), scaled so its largest magnitude is ``A``.
``impulse``  ``A`` at n = 0 (real), zero elsewhere: a flat spectrum.
``corners``  ``A (1 + j) j**floor(n/2)``: every part at +-A (magnitude sqrt 2 A), the even
             and the odd samples each a tone at bin N/8 of their half, so a radix-2's last
             stage adds a corner to a corner rotated by 45 degrees: with 1/2 per stage the
             sum is (1 + sqrt 2)/2 = 1.207 A, an overload at 0 dBFS a transform must
             saturate (not in :data:`SIGNALS`; the overflow check's).

Each signal in the input layout of a kind (``kind=``):

``fft``, ``ifft``  the complex signals above, ``(n, 2)`` pairs (for ``ifft`` the tone lands in
                   one output sample, the impulse gives a constant).
``rfft``           ``n`` real integers: the tone ``A cos(2 pi k0 n / N)``, real noise, the impulse;
                   ``corners`` the complex corners of length N/2 interleaved (``re, im, ...``),
                   every sample at +-A: what a real FFT that runs an N/2-point complex FFT on
                   the sample pairs (x[2m], x[2m+1]) feeds it.
``irfft``          a half spectrum, ``(n/2 + 1, 2)`` pairs with zero imaginary parts at DC and
                   Nyquist: the tone ``A`` in bin ``min(N/4 + 1, N/2)``, complex noise, the
                   impulse ``A`` at DC (a constant output), ``corners`` the complex corners'
                   first N/2 + 1 values.
"""

from __future__ import annotations

import numpy as np

from fftgauge.harness.fixed.formats import QFormat, quantise

__all__ = ["LEVELS_DBFS", "SIGNALS", "level_amplitude", "random_pairs", "test_signal"]

#: The signals of the checks.
SIGNALS = ("tone", "noise", "impulse")

#: The levels of the checks (dBFS).
LEVELS_DBFS = (0.0, -6.0, -20.0, -40.0)


def level_amplitude(level_dbfs: float) -> float:
    """Return the peak magnitude (full scale 1.0) of a level in dBFS: 10**(L/20)."""
    return float(10.0 ** (level_dbfs / 20.0))


def test_signal(name: str, n: int, level_dbfs: float, fmt: QFormat, seed: int, kind: str = "fft") -> np.ndarray:
    """Return signal ``name`` of length ``n`` at ``level_dbfs`` quantised to ``fmt`` (convergent
    rounding, saturated) in the input layout of ``kind`` (module docstring): ``(n, 2)`` pairs,
    ``n`` real integers (``rfft``) or ``n/2 + 1`` pairs (``irfft``).

    Raises
    ------
    ValueError
        For an unknown signal name or kind.
    """
    if kind == "rfft":
        return real_signal(name, n, level_dbfs, fmt, seed)
    if kind == "irfft":
        return half_spectrum_signal(name, n, level_dbfs, fmt, seed)
    if kind not in ("fft", "ifft"):
        raise ValueError(f"unknown transform kind {kind!r}")
    amp = level_amplitude(level_dbfs)
    k = np.arange(n)
    if name == "tone":
        z = amp * np.exp(2j * np.pi * ((n // 4 + 1) % n) * k / n)
    elif name == "noise":
        rng = np.random.default_rng(seed)
        z = rng.standard_normal(n) + 1j * rng.standard_normal(n)
        z *= amp / np.max(np.abs(z))
    elif name == "corners":
        z = amp * (1 + 1j) * (1j ** (k // 2))
    elif name == "impulse":
        z = np.zeros(n, dtype=complex)
        z[0] = amp
    else:
        raise ValueError(f"unknown test signal {name!r}; expected one of {', '.join(SIGNALS)}")
    return quantise(z, fmt, "convergent")


def real_signal(name: str, n: int, level_dbfs: float, fmt: QFormat, seed: int) -> np.ndarray:
    """Return the real form of signal ``name`` (module docstring) as ``n`` integers of ``fmt``.

    Raises
    ------
    ValueError
        For an unknown signal name.
    """
    amp = level_amplitude(level_dbfs)
    k = np.arange(n)
    if name == "tone":
        v = amp * np.cos(2 * np.pi * ((n // 4 + 1) % n) * k / n)
    elif name == "noise":
        v = np.random.default_rng(seed).standard_normal(n)
        v *= amp / (np.max(np.abs(v)) or 1.0)
    elif name == "corners":
        half = test_signal("corners", max(n // 2, 1), level_dbfs, fmt, seed)
        return half.reshape(-1)[:n].copy()
    elif name == "impulse":
        v = np.zeros(n)
        v[0] = amp
    else:
        raise ValueError(f"unknown test signal {name!r}; expected one of {', '.join(SIGNALS)}")
    return quantise(v, fmt, "convergent")[:, 0].copy()


def half_spectrum_signal(name: str, n: int, level_dbfs: float, fmt: QFormat, seed: int) -> np.ndarray:
    """Return the half-spectrum form of signal ``name`` (module docstring): ``n/2 + 1`` pairs
    of ``fmt`` with zero imaginary parts at DC and Nyquist.

    Raises
    ------
    ValueError
        For an unknown signal name.
    """
    m = n // 2 + 1
    amp = level_amplitude(level_dbfs)
    if name == "tone":
        z = np.zeros(m, dtype=complex)
        z[min(n // 4 + 1, n // 2)] = amp
    elif name == "noise":
        rng = np.random.default_rng(seed)
        z = rng.standard_normal(m) + 1j * rng.standard_normal(m)
        z *= amp / np.max(np.abs(z))
    elif name == "corners":
        z = amp * (1 + 1j) * (1j ** (np.arange(m) // 2))
    elif name == "impulse":
        z = np.zeros(m, dtype=complex)
        z[0] = amp
    else:
        raise ValueError(f"unknown test signal {name!r}; expected one of {', '.join(SIGNALS)}")
    pairs = quantise(z, fmt, "convergent")
    pairs[0, 1] = 0
    if n % 2 == 0 and n >= 2:
        pairs[n // 2, 1] = 0
    return pairs


def random_pairs(rng: np.random.Generator, n: int, dtype: str, real: bool = False) -> np.ndarray:
    """Return complex Gaussian noise of length ``n`` at -6 dBFS peak in precision ``dtype``
    (``q15``/``q31``) as ``(n, 2)`` pairs, or with ``real`` real noise as ``n`` integers (an
    rfft's input): the input of timing runs of fixed-point cases."""
    from fftgauge.harness.fixed.formats import fixed_format

    if real:
        v = rng.standard_normal(n)
        peak = np.max(np.abs(v), initial=0.0) or 1.0
        return quantise(v * (level_amplitude(-6.0) / peak), fixed_format(dtype), "convergent")[:, 0].copy()
    z = rng.standard_normal(n) + 1j * rng.standard_normal(n)
    peak = np.max(np.abs(z), initial=0.0) or 1.0
    return quantise(z * (level_amplitude(-6.0) / peak), fixed_format(dtype), "convergent")
