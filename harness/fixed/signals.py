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


def test_signal(name: str, n: int, level_dbfs: float, fmt: QFormat, seed: int) -> np.ndarray:
    """Return signal ``name`` of length ``n`` at ``level_dbfs`` quantised to ``fmt`` (convergent
    rounding, saturated), as ``(n, 2)`` pairs.

    Raises
    ------
    ValueError
        For an unknown signal name.
    """
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


def random_pairs(rng: np.random.Generator, n: int, dtype: str) -> np.ndarray:
    """Return complex Gaussian noise of length ``n`` at -6 dBFS peak in precision ``dtype``
    (``q15``/``q31``) as ``(n, 2)`` pairs: the input of timing runs of fixed-point cases."""
    from fftgauge.harness.fixed.formats import fixed_format

    z = rng.standard_normal(n) + 1j * rng.standard_normal(n)
    peak = np.max(np.abs(z), initial=0.0) or 1.0
    return quantise(z * (level_amplitude(-6.0) / peak), fixed_format(dtype), "convergent")
