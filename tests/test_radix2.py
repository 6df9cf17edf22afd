"""The pure-Python radix-2 references (decimation in time and in frequency).

Outside checks, with their sources:

- every kind, norm and precision against a direct DFT evaluated by mpmath at 50 digits
  (check-values.md: "mpmath (arbitrary precision): direct DFT at 50 digits for small N");
- against numpy.fft for N = 2^1 .. 2^12 (check-values.md: numpy.fft, "an independent
  double-precision implementation (not ground truth)");
- operation counts against Cooley & Tukey, "An algorithm for the machine calculation of
  complex Fourier series", Math. Comp. 19 (1965) 297-301; common practice;
- the bit-reversal table for N = 8 (common practice: the definition of bit reversal).
"""

from __future__ import annotations


import mpmath
import numpy as np
import pytest

from fftgauge.backends.radix2 import MAX_N, Radix2DifBackend, Radix2DitBackend, bit_reverse_permutation
from fftgauge.backends.registry import load_backend
from fftgauge.harness.cases import DTYPES, KINDS, NORMS, Case
from mpmath_dft import relative_error_vs_mpmath, signal

BACKENDS = {"radix2-dit": Radix2DitBackend(), "radix2-dif": Radix2DifBackend()}
EPS = {"float32": float(np.finfo(np.float32).eps), "float64": float(np.finfo(np.float64).eps)}


# -- an independent ground truth: the defining sum in 50-digit arithmetic ---------------------

def fft_tolerance(dtype: str, n: int) -> float:
    """Return the accepted relative 2-norm error of a double-precision radix-2 FFT rounded to ``dtype``.

    Higham, Accuracy and Stability of Numerical Algorithms, 2nd ed., SIAM 2002, Theorem 24.2
    (from memory): norm2(y_hat - y)/norm2(y) <= t eta / (1 - t eta), t = log2 N,
    eta = mu + gamma_4 (sqrt(2) + mu), where mu bounds the twiddle error. In double, with
    twiddles from cmath.exp of an angle rounded a few times (mu <= ~4 u), eta is below
    10 u = 5 eps_64, so 8 eps_64 * max(1, t) leaves margin (and covers the norm factor's
    rounding). The computation is in double for both precisions; a float32 case is then
    rounded once to float32, which adds at most u_32 = eps_32 / 2 relative to every output
    (IEEE Std 754-2019): we allow eps_32.
    """
    t = max(1, n.bit_length() - 1)
    bound = 8 * EPS["float64"] * t
    return bound + (EPS["float32"] if dtype == "float32" else 0.0)


@pytest.mark.parametrize("name", BACKENDS)
@pytest.mark.parametrize("kind", KINDS)
@pytest.mark.parametrize("norm", NORMS)
@pytest.mark.parametrize("dtype", ["float32", "float64"])
def test_agrees_with_mpmath_direct_dft(name, kind, norm, dtype):
    """Every kind/norm/precision for N = 1, 2, 4, ..., 32 against the 50-digit mpmath DFT."""
    backend = BACKENDS[name]
    failures = []
    for t in range(6):
        case = Case(kind, dtype, 2**t, norm)
        err = relative_error_vs_mpmath(backend, case)
        if not err <= fft_tolerance(dtype, case.n):
            failures.append(f"n={case.n}: relative error {err:.3g} > {fft_tolerance(dtype, case.n):.3g}")
    assert not failures, f"{name} {kind} {dtype} {norm}: " + "; ".join(failures)


@pytest.mark.parametrize("name", BACKENDS)
@pytest.mark.parametrize("kind", KINDS)
def test_agrees_with_numpy_fft(name, kind):
    """N = 2^1 .. 2^12 against numpy.fft (check-values.md: an independent double-precision
    implementation). Both have an error within the bound of :func:`fft_tolerance` (Higham,
    Theorem 24.2, from memory), so by the triangle inequality their difference is within twice it.
    """
    backend = BACKENDS[name]
    failures = []
    for t in range(1, 13):
        case = Case(kind, "float64", 2**t)
        x = signal(case)
        y = backend.plan(case).execute(x)
        expected = getattr(np.fft, kind)(x, n=case.n)
        err = np.linalg.norm(y - expected) / np.linalg.norm(expected)
        if not err <= 2 * fft_tolerance("float64", case.n):
            failures.append(f"n={case.n}: {err:.3g}")
    assert not failures, f"{name} {kind} differs from numpy.fft: " + "; ".join(failures)


def test_float32_case_rounds_a_double_computation():
    """A float32 case returns complex64, within eps_32 of numpy.fft in double (common practice)."""
    case = Case("fft", "float32", 1024)
    x = signal(case)
    for backend in BACKENDS.values():
        y = backend.plan(case).execute(x)
        assert y.dtype == np.complex64
        expected = np.fft.fft(x.astype(np.complex128))
        assert np.linalg.norm(y - expected) / np.linalg.norm(expected) <= EPS["float32"]


def test_input_left_intact_and_registry_names():
    """The plan works on its own copy (capabilities say not in place); the registry names load."""
    assert isinstance(load_backend("radix2-dit"), Radix2DitBackend)
    assert isinstance(load_backend("radix2-dif"), Radix2DifBackend)
    case = Case("fft", "float64", 64)
    x = signal(case)
    before = x.copy()
    for backend in BACKENDS.values():
        assert backend.capabilities().in_place is False
        backend.plan(case).execute(x)
        np.testing.assert_array_equal(x, before)


# -- bit reversal ----------------------------------------------------------------------------

def test_bit_reversal_table_n8():
    """N = 8: [0, 4, 2, 6, 1, 5, 3, 7] (common practice: 3-bit reversal, e.g. 1 = 001 -> 100 = 4)."""
    assert bit_reverse_permutation(8) == [0, 4, 2, 6, 1, 5, 3, 7]


@pytest.mark.parametrize("t", range(0, 13))
def test_bit_reversal_is_an_involution_and_reverses_bits(t):
    """Reversing twice is the identity; each entry is the binary string reversed (common practice)."""
    n = 2**t
    p = bit_reverse_permutation(n)
    assert sorted(p) == list(range(n))
    assert [p[p[i]] for i in range(n)] == list(range(n))
    if t:
        assert p == [int(format(i, f"0{t}b")[::-1], 2) for i in range(n)]


def test_bit_reversal_refuses_non_power_of_two():
    with pytest.raises(ValueError, match="power of two"):
        bit_reverse_permutation(12)


# -- claims ----------------------------------------------------------------------------------

@pytest.mark.parametrize("name", BACKENDS)
def test_cases_outside_the_claims_are_refused_with_a_reason(name):
    backend = BACKENDS[name]
    reason = backend.unsupported_reason(Case("fft", "float64", 12))
    assert reason is not None and "powers of two" in reason
    assert backend.unsupported_reason(Case("fft", "float64", 2 * MAX_N)) is not None
    assert backend.unsupported_reason(Case("fft", "longdouble", 8)) is not None
    assert backend.unsupported_reason(Case("irfft", "float32", MAX_N, "ortho")) is None


# -- operation counts ------------------------------------------------------------------------

def unit_twiddle_butterflies(n: int) -> int:
    """Count the radix-2 butterflies whose twiddle is W^0, by enumerating butterflies.

    Independent of the loops under test: in the stage of span m = 2^s an index i is the top
    of a butterfly when (i mod m) < m/2, and its twiddle is W_N^((i mod m) N/m); that is
    W^0 exactly when i mod m == 0.
    """
    count = 0
    m = 2
    while m <= n:
        for i in range(n):
            j = i % m
            if j < m // 2 and (j * (n // m)) % n == 0:
                count += 1
        m *= 2
    return count


@pytest.mark.parametrize("name", BACKENDS)
def test_counts_match_cooley_tukey(name):
    """Instrumented counts, N = 2 .. 2^12: (N/2) log2 N complex mults and N log2 N complex adds
    (Cooley & Tukey, Math. Comp. 19 (1965) 297-301; common practice); real equivalents 4 mults
    and 2 adds per complex mult, 2 adds per complex add, so 5 N log2 N real operations in all
    (the pseudo-flop convention, common practice in FFT benchmarking)."""
    backend = BACKENDS[name]
    for t in range(1, 13):
        n = 2**t
        count = backend.count_operations(Case("fft", "float64", n))
        assert (count.complex_mults, count.complex_adds) == (n // 2 * t, n * t), n
        assert (count.real_mults, count.real_adds) == (2 * n * t, 3 * n * t), n
        assert count.real_flops == 5 * n * t
        assert count.trivial_twiddles_counted is True


@pytest.mark.parametrize("name", BACKENDS)
def test_counts_without_unit_twiddles_match_an_independent_count(name):
    """count_trivial=False skips W^0 multiplications: (N/2) log2 N minus the W^0 butterflies,
    enumerated independently; the enumeration also confirms the closed form N - 1 (ours)."""
    backend = BACKENDS[name]
    for t in range(0, 13):
        n = 2**t
        count = backend.count_operations(Case("fft", "float64", n), count_trivial=False)
        skipped = unit_twiddle_butterflies(n)
        assert skipped == n - 1
        assert count.complex_mults == n // 2 * t - skipped, n
        assert count.complex_adds == n * t, n
        assert count.trivial_twiddles_counted is False


def test_counting_mode_computes_the_same_transform():
    """The counted run is the same arithmetic: its output equals the plain execution exactly,
    and skipping W^0 (exact: x * 1 = x for finite x) changes nothing (IEEE Std 754-2019)."""
    for backend in BACKENDS.values():
        for kind in KINDS:
            case = Case(kind, "float64", 256, "ortho")
            x = signal(case)
            plan = backend.plan(case)
            plain = plan.execute(x)
            counted, _ = plan.execute_counted(x)
            skipped, _ = plan.execute_counted(x, count_trivial=False)
            np.testing.assert_array_equal(counted, plain)
            np.testing.assert_array_equal(skipped, plain)


def test_counts_of_other_kinds_include_scaling():
    """ifft backward: the same butterflies plus the 1/N scaling, 2 real mults per complex output;
    irfft: 1 per real output; rfft backward: no scaling (array API standard conventions)."""
    backend = BACKENDS["radix2-dit"]
    n, t = 64, 6
    ifft = backend.count_operations(Case("ifft", "float64", n))
    assert (ifft.complex_mults, ifft.complex_adds) == (n // 2 * t, n * t)
    assert ifft.real_mults == 4 * (n // 2 * t) + 2 * n
    irfft = backend.count_operations(Case("irfft", "float64", n))
    assert irfft.real_mults == 4 * (n // 2 * t) + n
    rfft = backend.count_operations(Case("rfft", "float64", n))
    assert (rfft.complex_mults, rfft.real_mults) == (n // 2 * t, 4 * (n // 2 * t))
    ortho = backend.count_operations(Case("rfft", "float64", n, "ortho"))
    assert ortho.real_mults == 4 * (n // 2 * t) + 2 * (n // 2 + 1)
