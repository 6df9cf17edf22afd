"""A 50-digit direct DFT for the reference backends' tests.

Source: mpmath (arbitrary precision), direct DFT at 50 digits (check-values.md): the
defining sum X[k] = sum_m x[m] exp(-+2j pi k m / n) of the exact values a backend receives,
with the numpy / array API conventions for the real kinds and the norms written out here,
independently of the code under test.
"""

from __future__ import annotations

import functools

import mpmath
import numpy as np

from fftgauge.harness.cases import DTYPES, KINDS, Case


def signal(case: Case) -> np.ndarray:
    """Return a seeded random input of the case's dtype and input length."""
    rng = np.random.default_rng([KINDS.index(case.kind), case.n, DTYPES.index(case.dtype)])
    re = rng.standard_normal(case.input_length)
    if case.kind == "rfft":
        return re.astype(case.input_dtype)
    # Non-zero imaginary parts everywhere: for irfft the DC (and even-n Nyquist) ones
    # must be ignored.
    return (re + 1j * rng.standard_normal(case.input_length)).astype(case.input_dtype)


@functools.lru_cache(maxsize=None)
def _mp_unscaled(kind: str, dtype: str, n: int) -> tuple:
    """Return (input, 50-digit unscaled transform) for the seeded input of (kind, dtype, n).

    The reference is the DFT of the exact values the backend receives (the rounded input),
    X[k] = sum_m x[m] exp(-+2j pi k m / n), with the numpy/array API conventions for the
    real kinds written out independently of the code under test.
    """
    case = Case(kind, dtype, n)
    x = signal(case)
    with mpmath.workdps(50):
        values = [mpmath.mpc(complex(v)) for v in x]
        if kind == "irfft":  # full Hermitian spectrum; Im X[0] and, for even n, Im X[n/2] ignored
            spectrum = [mpmath.mpc(0)] * n
            for k in range(n):
                j = k if k <= n // 2 else n - k
                v = values[j]
                if j == 0 or (n % 2 == 0 and j == n // 2):
                    v = mpmath.mpc(v.real, 0)
                spectrum[k] = v if k <= n // 2 else mpmath.conj(v)
            values = spectrum
        sign = 1 if kind in ("ifft", "irfft") else -1
        roots = [mpmath.exp(sign * 2j * mpmath.pi * r / n) for r in range(n)]
        rows = n // 2 + 1 if kind == "rfft" else n
        out = [mpmath.fsum(values[m] * roots[(k * m) % n] for m in range(n)) for k in range(rows)]
        if kind == "irfft":
            out = [mpmath.mpc(v.real, 0) for v in out]
    return x, tuple(out)


def mp_scale(kind: str, n: int, norm: str):
    """Return the array API standard's normalisation factor at 50 digits."""
    inverse = kind in ("ifft", "irfft")
    with mpmath.workdps(50):
        if norm == "ortho":
            return 1 / mpmath.sqrt(n)
        if (norm == "backward" and inverse) or (norm == "forward" and not inverse):
            return mpmath.mpf(1) / n
        return mpmath.mpf(1)


def relative_error_vs_mpmath(backend, case: Case) -> float:
    """Return norm2(y - reference) / norm2(reference), evaluated at 50 digits."""
    x, unscaled = _mp_unscaled(case.kind, case.dtype, case.n)
    plan = backend.plan(case)
    y = np.asarray(plan.execute(plan.prepare(x.copy())))  # a device result (cupy) is read back here
    assert y.dtype == case.output_dtype and y.shape == (case.output_length,)
    with mpmath.workdps(50):
        scale = mp_scale(case.kind, case.n, case.norm)
        ref = [scale * v for v in unscaled]
        diff = mpmath.sqrt(mpmath.fsum(abs(mpmath.mpc(complex(a)) - b) ** 2 for a, b in zip(y, ref)))
        size = mpmath.sqrt(mpmath.fsum(abs(b) ** 2 for b in ref))
        return float(diff / size)
