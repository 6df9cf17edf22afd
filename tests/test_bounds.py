"""Tests of fftgauge.harness.battery.bounds: the formulas by hand, no false alarms on real libraries, and detection.

Sources (as the project's check-value list names them):
- "IEEE Std 754-2019": unit roundoff u = 2^-24 (binary32), 2^-53 (binary64), eps = 2u.
- "Higham, Accuracy and Stability of Numerical Algorithms, 2nd ed., SIAM 2002, Theorem 24.2
  (from memory)": the radix-2 bound t eta / (1 - t eta), eta = mu + gamma_4 (sqrt(2) + mu);
  verified here by recomputing it by hand and with mpmath, and empirically: it lies above the
  errors of numpy.fft, scipy.fft and pyFFTW and below those of degraded transforms.
- "Schatzman, Accuracy of the discrete Fourier transform and the fast Fourier transform,
  SIAM J. Sci. Comput. 17(5) (1996) 1150-1166": twiddles by recurrence make the error grow
  much faster with N (measured below: the recurrence-twiddle FFT exceeds the bound from
  N = 2^10 on, by about 6x at 2^10, 20x at 2^12, 100x at 2^14, 200x at 2^16, while the same
  code with accurate twiddles stays near 0.05 of it).
Ground truth: fftgauge.harness.battery.reference (scipy.fft on clongdouble / double-double), itself checked
against mpmath in tests/test_reference.py.
"""

from __future__ import annotations

import math

import mpmath
import numpy as np
import pytest
import scipy.fft

from fftgauge.harness.battery.bounds import (
    accuracy_limit,
    effective_stages,
    eps_units,
    gamma,
    higham_bound,
    higham_radix2_bound,
    machine_epsilon,
    unit_roundoff,
)
from fftgauge.harness.cases import Case
from fftgauge.harness.battery.inputs import case_rng, random_input
from fftgauge.harness.battery.reference import reference_transform

pyfftw_fft = pytest.importorskip("pyfftw.interfaces.numpy_fft")


# -- the formulas --------------------------------------------------------------------------

def test_unit_roundoff_and_epsilon_follow_ieee_754():
    """IEEE Std 754-2019: u = 2^-24 (binary32), 2^-53 (binary64); eps = 2u (numpy's finfo agrees)."""
    assert unit_roundoff("float32") == 2.0**-24
    assert unit_roundoff("float64") == 2.0**-53
    assert machine_epsilon("float32") == float(np.finfo(np.float32).eps)
    assert machine_epsilon("float64") == float(np.finfo(np.float64).eps)
    assert unit_roundoff("longdouble") == float(np.finfo(np.longdouble).eps) / 2
    assert machine_epsilon("longdouble") == float(np.finfo(np.longdouble).eps)
    assert unit_roundoff("float16") == 2.0**-11 and machine_epsilon("float16") == float(np.finfo(np.float16).eps)
    with pytest.raises(ValueError, match="unknown precision"):
        unit_roundoff("bfloat16")


def test_eps_units():
    assert eps_units(2.0**-52, "float64") == 1.0
    assert eps_units(3 * 2.0**-23, "float32") == 3.0


def test_gamma_by_hand():
    """Higham 2002: gamma_k = k u / (1 - k u)."""
    u = 2.0**-53
    assert gamma(4, u) == (4 * u) / (1 - 4 * u)
    assert gamma(1, 0.25) == 0.25 / 0.75
    with pytest.raises(ValueError):
        gamma(4, 0.25)


def test_higham_bound_n1024_float64_by_hand_and_with_mpmath():
    """Higham 2002, Theorem 24.2 (from memory) at N = 1024, float64, mu = u, recomputed two ways."""
    u = 2.0**-53
    mu = u
    gamma4 = 4 * u / (1 - 4 * u)
    eta = mu + gamma4 * (math.sqrt(2) + mu)
    t = 10
    by_hand = t * eta / (1 - t * eta)
    with mpmath.workdps(50):
        U = mpmath.mpf(2) ** -53
        G4 = 4 * U / (1 - 4 * U)
        E = U + G4 * (mpmath.sqrt(2) + U)
        exact = float(10 * E / (1 - 10 * E))
    got = higham_radix2_bound(1024, "float64")
    assert got == pytest.approx(by_hand, rel=1e-14)
    assert got == pytest.approx(exact, rel=1e-14)
    # The figure the contracts show for numpy fft float64 n=1024.
    assert f"{got:.1e}" == "7.4e-15"
    # With an explicit mu and in float32.
    u32 = 2.0**-24
    eta32 = 3 * u32 + (4 * u32 / (1 - 4 * u32)) * (math.sqrt(2) + 3 * u32)
    assert higham_radix2_bound(256, "float32", mu=3 * u32) == pytest.approx(8 * eta32 / (1 - 8 * eta32), rel=1e-14)
    assert higham_radix2_bound(1, "float64") == 0.0
    assert higham_bound(1e30, u, u) == math.inf
    with pytest.raises(ValueError, match="power of two"):
        higham_radix2_bound(12, "float64")


def test_accuracy_limit_structure():
    u = 2.0**-53
    gamma2 = 2 * u / (1 - 2 * u)
    # Powers of two, backward forward transform: exactly Higham's bound (t = log2 N).
    assert accuracy_limit(Case("fft", "float64", 1024)) == higham_radix2_bound(1024, "float64")
    # N = 1: t = 1, not 0.
    assert accuracy_limit(Case("fft", "float64", 1)) == higham_radix2_bound(2, "float64")
    assert effective_stages(Case("fft", "float64", 1)) == 1
    # Scaled results (ortho, backward inverse, forward-norm forward) add one scaling rounding.
    b = higham_radix2_bound(1024, "float64")
    for case in (Case("fft", "float64", 1024, "ortho"), Case("ifft", "float64", 1024),
                 Case("fft", "float64", 1024, "forward")):
        assert accuracy_limit(case) == pytest.approx((1 + b) * (1 + gamma2) - 1, rel=1e-14)
    assert accuracy_limit(Case("ifft", "float64", 1024, "forward")) == b
    # Real kinds: two more stages. Other sizes: 4 (ceil(log2 N) + 1) stages.
    assert effective_stages(Case("rfft", "float64", 1024)) == 12
    assert effective_stages(Case("fft", "float64", 1000)) == 4 * (10 + 1)
    assert effective_stages(Case("irfft", "float64", 9973)) == 4 * (14 + 1) + 2
    assert accuracy_limit(Case("fft", "float32", 1000)) > accuracy_limit(Case("fft", "float64", 1000)) * 1e8


# -- no false alarm: correct libraries stay below the limit --------------------------------

POW2 = tuple(2**k for k in range(0, 17))
PRIMES = (3, 5, 7, 11, 13, 17, 31, 61, 127, 257, 1009, 4099, 7919, 9973)
SMOOTH = (6, 12, 60, 360, 1000, 1536, 5040, 6561, 10000)
ODD = (9, 15, 21, 105, 169, 225, 289, 323, 999, 1331, 2197, 3375, 19946)
NORM_SIZES = (1, 2, 3, 12, 1009, 4096)

LIBRARIES = {"numpy": np.fft, "scipy": scipy.fft, "pyfftw": pyfftw_fft}


@pytest.mark.parametrize("dtype", ["float32", "float64"])
@pytest.mark.parametrize("kind", ["fft", "ifft", "rfft", "irfft"])
def test_correct_libraries_stay_below_the_limit(kind, dtype):
    """numpy.fft, scipy.fft and pyFFTW, random inputs, 3 seeds: every relative error <= limit.

    Sizes: powers of two 1 .. 2^16, primes to 9973 (Bluestein/Rader paths), 3/5/7-smooth,
    odd composites (generic radices 13, 17, 19) and 2 x 9973; all three norms at a few sizes.
    The worst ratio seen when this was written: 0.23 (numpy ifft float64 N = 2 ortho, where
    the limit is smallest), below 0.06 for N >= 16.
    """
    worst = (0.0, None)
    for n in POW2 + PRIMES + SMOOTH + ODD:
        for norm in (("backward", "ortho", "forward") if n in NORM_SIZES else ("backward",)):
            case = Case(kind, dtype, n, norm)
            limit = accuracy_limit(case)
            for seed in range(3):
                x = random_input(case, case_rng(seed, case, "no-false-alarm"))
                ref = reference_transform(x, case)
                for name, lib in LIBRARIES.items():
                    y = getattr(lib, kind)(x, n=n, norm=norm)
                    ratio = ref.relative_error(y) / limit
                    assert ratio <= 1.0, f"{name} {case.label()} seed {seed}: error/limit = {ratio:.3g}"
                    if ratio > worst[0]:
                        worst = (ratio, f"{name} {case.label()}")
    assert worst[0] > 0.0  # the errors were really measured


@pytest.mark.skipif(not float(np.finfo(np.longdouble).eps) < 1e-18, reason="long double is not extended here")
def test_long_double_libraries_stay_below_the_limit():
    """numpy.fft and scipy.fft on long double against the double-double reference."""
    for kind in ("fft", "ifft", "rfft", "irfft"):
        for n in (1, 2, 16, 1024, 17, 1009, 360):
            case = Case(kind, "longdouble", n)
            x = random_input(case, case_rng(0, case, "no-false-alarm"))
            ref = reference_transform(x, case)
            for lib in (np.fft, scipy.fft):
                y = getattr(lib, kind)(x, n=n)
                assert y.dtype in (np.longdouble, np.clongdouble)
                assert ref.relative_error(y) <= accuracy_limit(case), (lib.__name__, case.label())


# -- detection: degraded transforms land above the limit -----------------------------------

def test_float32_arithmetic_for_a_float64_case_is_far_above_the_limit():
    """The `precision` bug: float32 computation for a float64 case. Measured ratio >= 8e5."""
    for n in (2, 3, 16, 1009, 1024, 4099, 9973, 6561, 2**16):
        for kind in ("fft", "irfft"):
            case = Case(kind, "float64", n)
            x = random_input(case, case_rng(0, case, "precision-bug"))
            ref = reference_transform(x, case)
            low = x.astype(np.complex64)
            y = getattr(np.fft, kind)(low, n=n).astype(np.complex128 if kind == "fft" else np.float64)
            ratio = ref.relative_error(y) / accuracy_limit(case)
            assert ratio > 1e4, (case.label(), ratio)


def test_float64_arithmetic_for_a_long_double_case_is_above_the_limit():
    """Double computation for a longdouble case (where long double is extended): measured ratio 32 .. 77."""
    if not float(np.finfo(np.longdouble).eps) < 1e-18:
        pytest.skip("long double is double here")
    for n in (16, 1024, 1009):
        case = Case("fft", "longdouble", n)
        x = random_input(case, case_rng(0, case, "precision-bug"))
        ref = reference_transform(x, case)
        y = np.fft.fft(x.astype(np.complex128))
        assert ref.relative_error(y) / accuracy_limit(case) > 5, n


def _radix2_fft(x: np.ndarray, twiddles: np.ndarray) -> np.ndarray:
    """Plain iterative radix-2 DIT FFT in complex128 with the given table w^k, k < N/2."""
    n = len(x)
    bits = n.bit_length() - 1
    idx = np.arange(n)
    rev = np.zeros(n, dtype=np.int64)
    for _ in range(bits):
        rev = (rev << 1) | (idx & 1)
        idx >>= 1
    z = x[rev].astype(np.complex128)
    h = 1
    while h < n:
        v = z.reshape(n // (2 * h), 2, h)
        w = twiddles[:: n // (2 * h)][:h]
        a = v[:, 0, :].copy()
        b = v[:, 1, :] * w
        v[:, 0, :] = a + b
        v[:, 1, :] = a - b
        h *= 2
    return z


def test_recurrence_twiddles_exceed_the_limit_at_large_n():
    """Schatzman 1996: twiddles by recurrence w_k = w_(k-1) w_1 degrade the FFT as N grows.

    At N = 2^12 .. 2^16 the recurrence version exceeds the limit (measured 20x .. 220x), while
    the same code with accurately computed twiddles stays below it (measured ~0.05). At small
    N it does not: at N = 2^8 it was measured at 0.97 of the limit, at 2^4 at 0.08.
    """
    for t in (12, 14, 16):
        n = 2**t
        case = Case("fft", "float64", n)
        x = random_input(case, case_rng(0, case, "recurrence"))
        ref = reference_transform(x, case)
        limit = accuracy_limit(case)
        k = np.arange(n // 2)
        accurate = np.exp(-2j * np.pi * k / n)
        recurrence = np.concatenate([[1.0 + 0j], np.cumprod(np.full(n // 2 - 1, np.exp(-2j * np.pi / n)))])
        assert ref.relative_error(_radix2_fft(x, accurate)) < 0.2 * limit
        assert ref.relative_error(_radix2_fft(x, recurrence)) > limit, n
    # Below 2^8 the recurrence's damage stays inside the bound.
    case = Case("fft", "float64", 16)
    x = random_input(case, case_rng(0, case, "recurrence"))
    recurrence = np.cumprod(np.concatenate([[1.0 + 0j], np.full(7, np.exp(-2j * np.pi / 16))]))
    assert reference_transform(x, case).relative_error(_radix2_fft(x, recurrence)) < accuracy_limit(case)
