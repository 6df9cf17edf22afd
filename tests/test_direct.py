"""The direct DFT reference (defining sum, matrix method).

Outside checks, with their sources:

- every kind, norm and precision for N = 1 .. 32 against the defining sum evaluated by
  mpmath at 50 digits (check-values.md: "mpmath (arbitrary precision): direct DFT at 50
  digits for small N");
- against numpy.fft at larger and awkward sizes (check-values.md: numpy.fft, an independent
  double-precision implementation, not ground truth);
- operation counts: N^2 complex multiplications and N(N-1) complex additions, N = 4 -> 16
  and 12, N = 16 -> 256 and 240 (common practice, textbook derivation).
"""

from __future__ import annotations

import math

import mpmath
import numpy as np
import pytest

import fftgauge.backends.direct as direct_module
from fftgauge.backends.direct import MAX_N, DirectBackend
from fftgauge.backends.registry import load_backend
from fftgauge.harness.cases import DTYPES, KINDS, NORMS, Case
from mpmath_dft import relative_error_vs_mpmath, signal

BACKEND = DirectBackend()
EPS = {"float32": float(np.finfo(np.float32).eps), "float64": float(np.finfo(np.float64).eps)}


def direct_tolerance(dtype: str, n: int) -> float:
    """Return the accepted relative 2-norm error of the double-precision direct DFT rounded to ``dtype``.

    Each matrix entry is one of the n values exp(-2j pi r / n), r < n, from an angle in
    [0, 2 pi) rounded a few times: error a few u (IEEE Std 754-2019 for the roundings). A sum
    of n products has rounding errors whose rms grows like u sqrt(n) for random data (common
    practice: independent rounding errors add like a random walk; the worst case grows like
    n u). We accept 8 eps_64 (sqrt(n) + 1), the rms estimate with a factor for the twiddle
    errors and for the tail of the distribution; a float32 case adds its one rounding of the
    output, at most u_32 = eps_32 / 2 relative, allowed as eps_32.
    """
    bound = 8 * EPS["float64"] * (math.sqrt(n) + 1)
    return bound + (EPS["float32"] if dtype == "float32" else 0.0)


@pytest.mark.parametrize("kind", KINDS)
@pytest.mark.parametrize("norm", NORMS)
@pytest.mark.parametrize("dtype", ["float32", "float64"])
def test_agrees_with_mpmath_direct_dft(kind, norm, dtype):
    """N = 1 .. 32, every kind/norm/precision, against the 50-digit mpmath defining sum."""
    failures = []
    for n in range(1, 33):
        case = Case(kind, dtype, n, norm)
        err = relative_error_vs_mpmath(BACKEND, case)
        if not err <= direct_tolerance(dtype, n):
            failures.append(f"n={n}: {err:.3g} > {direct_tolerance(dtype, n):.3g}")
    assert not failures, f"direct {kind} {dtype} {norm}: " + "; ".join(failures)


@pytest.mark.parametrize("n", [33, 97, 360, 1000, 1024, 2047])
@pytest.mark.parametrize("kind", KINDS)
def test_agrees_with_numpy_fft(n, kind):
    """Larger and odd sizes (2047 is above the one-block size, so the blocked path runs),
    against numpy.fft (check-values.md: an independent double-precision implementation).
    numpy's error is O(eps log N) (Gentleman & Sande 1966, from memory), below ours."""
    case = Case(kind, "float64", n)
    x = signal(case)
    plan = BACKEND.plan(case)
    assert (plan.matrix is None) == (n == 2047 and kind != "rfft")
    y = plan.execute(x)
    expected = getattr(np.fft, kind)(x, n=n)
    assert np.linalg.norm(y - expected) / np.linalg.norm(expected) <= 2 * direct_tolerance("float64", n)


def test_blocked_path_equals_the_one_block_path(monkeypatch):
    """Building the matrix in blocks of a few rows gives the same transform as one block."""
    case = Case("fft", "float64", 45, "ortho")
    x = signal(case)
    whole = BACKEND.plan(case).execute(x)
    monkeypatch.setattr(direct_module, "BLOCK_BYTES", 16 * 45 * 4)  # 4 rows per block
    plan = BACKEND.plan(case)
    assert plan.matrix is None
    # Equal up to the rounding of the matrix-vector product, whose summation order BLAS
    # may choose by block shape.
    assert np.linalg.norm(plan.execute(x) - whole) <= 4 * EPS["float64"] * np.linalg.norm(whole)


def test_twiddle_exponent_is_reduced_before_the_angle():
    """Entry [k, m] equals exp(-2j pi k m / n) from mpmath to a few eps even where k m is
    large (mpmath at 30 digits, check-values.md's reference library). The reduced angle lies
    in [0, 2 pi) and is rounded about three times (error <= 3 * 2 pi * u, about 4.7 eps),
    cos and sin add about an ulp (IEEE Std 754-2019 roundings): we allow 8 eps."""
    n = 4096
    rows = np.array([1, 1000, 4095])
    w = direct_module.dft_matrix_rows(n, rows, inverse=False)
    with mpmath.workdps(30):
        for i, k in enumerate(rows):
            for m in (1, 777, 4095):
                exact = complex(mpmath.exp(-2j * mpmath.pi * mpmath.mpf(int(k) * m) / n))
                assert abs(w[i, m] - exact) <= 8 * EPS["float64"]


def test_registry_name_and_claims():
    assert isinstance(load_backend("direct"), DirectBackend)
    assert BACKEND.unsupported_reason(Case("fft", "float64", 12)) is None
    assert BACKEND.unsupported_reason(Case("rfft", "float32", 97)) is None
    reason = BACKEND.unsupported_reason(Case("fft", "float64", MAX_N + 1))
    assert reason is not None and str(MAX_N) in reason
    assert BACKEND.unsupported_reason(Case("fft", "longdouble", 8)) is not None


# -- operation counts ------------------------------------------------------------------------

def test_counts_common_practice_values():
    """N = 4: 16 mults, 12 adds; N = 16: 256, 240 (common practice, textbook derivation)."""
    four = BACKEND.count_operations(Case("fft", "float64", 4))
    assert (four.complex_mults, four.complex_adds) == (16, 12)
    sixteen = BACKEND.count_operations(Case("fft", "float64", 16))
    assert (sixteen.complex_mults, sixteen.complex_adds) == (256, 240)
    assert (sixteen.real_mults, sixteen.real_adds) == (4 * 256, 2 * 256 + 2 * 240)


def test_counts_every_size_to_64():
    """N^2 and N(N-1) for N = 1 .. 64 (common practice)."""
    for n in range(1, 65):
        count = BACKEND.count_operations(Case("fft", "float64", n))
        assert (count.complex_mults, count.complex_adds) == (n * n, n * (n - 1)), n


def test_counts_without_unit_twiddles():
    """With W^0 skipped, N^2 minus the pairs (k, m) with k m = 0 mod N, counted here by brute
    force, and equal to sum over k of gcd(k, N) (elementary number theory: for fixed k,
    N | k m has gcd(k, N) solutions m in 0 .. N-1)."""
    for n in range(1, 41):
        unit = sum(1 for k in range(n) for m in range(n) if (k * m) % n == 0)
        assert unit == sum(math.gcd(k, n) for k in range(n))
        count = BACKEND.count_operations(Case("fft", "float64", n), count_trivial=False)
        assert count.complex_mults == n * n - unit, n
        assert count.complex_adds == n * (n - 1), n
        assert count.trivial_twiddles_counted is False


def test_counted_sum_computes_the_same_transform():
    """The Python double loop that counts is a real DFT: it agrees with the matrix path."""
    for kind in KINDS:
        case = Case(kind, "float64", 24, "forward")
        x = signal(case)
        plan = BACKEND.plan(case)
        plain = plan.execute(x)
        for trivial in (True, False):
            counted, _ = plan.execute_counted(x, count_trivial=trivial)
            assert np.linalg.norm(counted - plain) <= 8 * EPS["float64"] * np.linalg.norm(plain)


def test_counts_of_real_kinds_are_what_the_code_does():
    """rfft computes N//2 + 1 rows: (N//2 + 1) N mults; irfft the full N x N sum, plus the
    1/N scaling (1 real mult per real output) under backward (array API standard)."""
    n = 10
    rfft = BACKEND.count_operations(Case("rfft", "float64", n))
    assert (rfft.complex_mults, rfft.complex_adds) == ((n // 2 + 1) * n, (n // 2 + 1) * (n - 1))
    irfft = BACKEND.count_operations(Case("irfft", "float64", n))
    assert (irfft.complex_mults, irfft.real_mults) == (n * n, 4 * n * n + n)
    ifft = BACKEND.count_operations(Case("ifft", "float64", n))
    assert ifft.real_mults == 4 * n * n + 2 * n
