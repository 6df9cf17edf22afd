"""Tests of fftgauge.harness.battery.reference: the ground truth checked against an independent mpmath DFT.

Source of the ground truth for the ground truth: "mpmath (arbitrary precision): direct DFT at
50 digits for small N" (the project's check-value list). The direct DFT here is written
independently of fftgauge.harness.battery.reference (mpmath.expjpi of the unreduced angle, at 50 digits).
The second reference library is "scipy.fft on clongdouble" (extended precision where
np.finfo(np.longdouble).eps is below 1e-18).
"""

from __future__ import annotations

import mpmath
import numpy as np
import pytest

from fftgauge.harness.cases import KINDS, NORMS, Case, norm_factor
from fftgauge.harness.battery.inputs import case_rng, random_input
from fftgauge.harness.battery.double_double import dd_roots
from fftgauge.harness.battery.reference import (
    LONGDOUBLE_IS_EXTENDED,
    METHOD_DOUBLE,
    METHOD_DOUBLE_DOUBLE,
    METHOD_LONGDOUBLE,
    METHOD_MPMATH,
    MPMATH_MAX_N,
    Reference,
    reference_method,
    reference_transform,
)

EPS64 = float(np.finfo(np.float64).eps)
EPS_LD = float(np.finfo(np.longdouble).eps)
needs_extended = pytest.mark.skipif(not LONGDOUBLE_IS_EXTENDED, reason="long double is not wider than double here")


# -- an independent 50-digit direct DFT ----------------------------------------------------

def _mpc(v) -> mpmath.mpc:
    """Exact mpmath value of a float64 / long double (complex) scalar."""
    v = np.clongdouble(v)
    parts = []
    for p in (v.real, v.imag):
        hi = np.float64(p)
        lo = np.float64(p - np.longdouble(hi))
        parts.append(mpmath.mpf(float(hi)) + mpmath.mpf(float(lo)))
    return mpmath.mpc(*parts)


def direct_dft(case: Case, x: np.ndarray, bins=None) -> list:
    """Return the exact transform of ``x`` for ``case`` by the defining sums, at 50 digits.

    Conventions of backends/base.py (numpy's): X[k] = sum_n x[n] exp(-2j pi k n / N), the
    inverse with +, rfft the first N//2+1 bins, irfft from the Hermitian extension of the
    half spectrum with the imaginary parts of X[0] (and X[N/2] for even N) dropped.
    """
    n = case.n
    with mpmath.workdps(50):
        vals = [_mpc(v) for v in x]
        if case.kind == "rfft":
            vals = [mpmath.mpc(v.real, 0) for v in vals]
        if case.kind == "irfft":
            full = [mpmath.mpc(0)] * n
            full[0] = mpmath.mpc(vals[0].real, 0)
            for k in range(1, (n + 1) // 2):
                full[k] = vals[k]
                full[n - k] = mpmath.conj(vals[k])
            if n % 2 == 0:
                full[n // 2] = mpmath.mpc(vals[n // 2].real, 0)
            vals = full
        sign = 1 if case.is_inverse else -1
        if case.norm == "ortho":
            factor = 1 / mpmath.sqrt(n)
        elif (case.norm == "backward") == case.is_inverse:
            factor = mpmath.mpf(1) / n
        else:
            factor = mpmath.mpf(1)
        if bins is None:
            bins = range(case.output_length)
        out = []
        for k in bins:
            s = mpmath.fsum(vals[j] * mpmath.expjpi(mpmath.mpf(sign * 2 * k * j) / n) for j in range(n))
            if case.kind == "irfft":
                s = mpmath.mpc(s.real, 0)
            out.append(s * factor)
        return out


def rel_error_vs_mp(r: Reference, exact: list, bins=None) -> float:
    """Relative 2-norm distance between hi + lo and the mpmath values, at 50 digits."""
    idx = range(len(r.hi)) if bins is None else bins
    with mpmath.workdps(50):
        num = mpmath.mpf(0)
        den = mpmath.mpf(0)
        for i, k in enumerate(idx):
            got = (mpmath.mpc(float(r.hi[k].real), float(r.hi[k].imag))
                   + mpmath.mpc(float(r.lo[k].real), float(r.lo[k].imag)))
            num += abs(got - exact[i]) ** 2
            den += abs(exact[i]) ** 2
        if den == 0:
            return float(mpmath.sqrt(num))
        return float(mpmath.sqrt(num / den))


SMALL_SIZES = (1, 2, 3, 4, 5, 7, 8, 12, 16, 17, 31, 32)


def _input(case: Case, seed: int = 0) -> np.ndarray:
    return random_input(case, case_rng(seed, case, "reference-test"))


# -- every method against the direct DFT ---------------------------------------------------

@pytest.mark.parametrize("kind", KINDS)
def test_all_methods_match_mpmath_direct_dft_float64(kind):
    """scipy-longdouble, double-double and mpmath against the 50-digit direct DFT (mpmath)."""
    worst = {}
    for n in SMALL_SIZES:
        for norm in NORMS:
            case = Case(kind, "float64", n, norm)
            x = _input(case)
            exact = direct_dft(case, x)
            methods = ["double-double", "mpmath"] + (["scipy-longdouble"] if LONGDOUBLE_IS_EXTENDED else [])
            for method in methods:
                r = reference_transform(x, case, method=method)
                assert r.hi.dtype == np.complex128 and r.lo.dtype == np.complex128
                assert r.hi.shape == (case.output_length,)
                e = rel_error_vs_mp(r, exact)
                worst[method] = max(worst.get(method, 0.0), e)
    # double-double: about 2^-104 per operation; far below long double's own 2^-64.
    assert worst["double-double"] < 1e-28, worst
    assert worst["mpmath"] < 1e-30, worst
    if LONGDOUBLE_IS_EXTENDED:
        # 1000 times finer than float64's eps at these small sizes.
        assert worst["scipy-longdouble"] < EPS64 / 1000, worst


@pytest.mark.parametrize("kind", KINDS)
def test_longdouble_cases_get_double_double_accurate_to_long_double_over_1000(kind):
    """For longdouble cases the reference is double-double, checked against the direct DFT (mpmath)."""
    for n in (1, 2, 3, 8, 13, 16, 24):
        case = Case(kind, "longdouble", n, "ortho" if n % 2 else "backward")
        x = _input(case, seed=1)
        if EPS_LD < EPS64:
            # The inputs carry bits beyond double's 53, so they exercise the lo parts.
            assert np.any(np.real(x) != np.real(x).astype(np.float64))
        r = reference_transform(x, case)
        assert r.method == reference_method("longdouble")
        e = rel_error_vs_mp(r, direct_dft(case, x))
        assert e < EPS_LD / 1000, (n, e)


def test_large_sizes_against_mpmath_at_selected_bins():
    """At N = 4096 and the prime N = 4099 (Bluestein path) a few bins against the direct DFT (mpmath)."""
    for n in (4096, 4099):
        case = Case("fft", "float64", n)
        x = _input(case, seed=2)
        bins = [0, 1, n // 3, n - 1]
        exact = direct_dft(case, x, bins)
        dd = reference_transform(x, case, method="double-double")
        assert rel_error_vs_mp(dd, exact, bins) < 1e-28
        if LONGDOUBLE_IS_EXTENDED:
            ld = reference_transform(x, case, method="scipy-longdouble")
            assert rel_error_vs_mp(ld, exact, bins) < EPS64 / 200


@needs_extended
def test_longdouble_method_margin_against_double_double():
    """Measured margin of scipy.fft on clongdouble against float64 (double-double as the truth).

    Powers of two and 3/5/7-smooth sizes: more than 1000x finer than float64's eps. Prime
    sizes (Bluestein in long double): about 700x finer than eps (measured 690-830x up to
    131071), and still more than 1000x below the actual error of numpy's float64 transform.
    """
    for n, min_margin in ((4096, 1000), (2**16, 1000), (6561, 1000), (1009, 500), (4099, 500), (9973, 500)):
        case = Case("fft", "float64", n)
        x = _input(case, seed=3)
        dd = reference_transform(x, case, method="double-double")
        ld = reference_transform(x, case)
        assert ld.method == METHOD_LONGDOUBLE
        e_ld = dd.relative_error(ld.values())
        assert 0.0 < e_ld < EPS64 / min_margin, (n, e_ld)
        e_numpy = dd.relative_error(np.fft.fft(x))
        assert e_ld < e_numpy / 1000, (n, e_ld, e_numpy)


# -- method choice and validation ----------------------------------------------------------

def test_default_method_follows_the_platform():
    expected = METHOD_LONGDOUBLE if EPS_LD < 1e-18 else METHOD_DOUBLE_DOUBLE
    assert reference_method() == expected
    assert reference_method("float32") == METHOD_DOUBLE
    assert reference_method("longdouble") in (METHOD_DOUBLE_DOUBLE, METHOD_MPMATH)
    case = Case("fft", "float64", 8)
    assert reference_transform(_input(case), case).method == expected
    assert reference_transform(_input(case), case, method="double-double").method == METHOD_DOUBLE_DOUBLE
    assert reference_transform(_input(case), case, method="mpmath").method == METHOD_MPMATH


def test_float32_reference_in_double_is_1000_times_finer_than_float32():
    """The float32 cases' reference (scipy.fft in complex128) against mpmath (arbitrary
    precision), direct DFT at 50 digits: its error must be below eps32 / 1000 (IEEE Std
    754-2019: eps = 2^-23 for binary32)."""
    for n in (7, 16, 31):
        for kind in ("fft", "ifft", "rfft", "irfft"):
            case = Case(kind, "float32", n)
            x = _input(case)
            ref = reference_transform(x, case)
            assert ref.method == METHOD_DOUBLE
            exact = reference_transform(x, case, method="mpmath")
            err = np.linalg.norm(ref.error(exact.values().astype(np.clongdouble))) / np.linalg.norm(exact.hi)
            assert err < 2.0**-23 / 1000, (kind, n, err)


def test_bad_requests_raise_clear_errors():
    case = Case("fft", "float64", 8)
    with pytest.raises(ValueError, match="unknown reference method"):
        reference_transform(_input(case), case, method="fast")
    with pytest.raises(ValueError, match="length 8"):
        reference_transform(np.zeros(7, complex), case)
    with pytest.raises(ValueError, match="length 8"):
        reference_transform(np.zeros((2, 8), complex), case)
    big = Case("fft", "float64", MPMATH_MAX_N + 1)
    with pytest.raises(ValueError, match="mpmath"):
        reference_transform(np.zeros(big.n, complex), big, method="mpmath")
    r = reference_transform(_input(case), case)
    with pytest.raises(ValueError, match="shape"):
        r.error(np.zeros(9))


# -- conventions (backends/base.py) --------------------------------------------------------

@pytest.mark.parametrize("method", ["double-double", "mpmath"]
                         + (["scipy-longdouble"] if LONGDOUBLE_IS_EXTENDED else []))
def test_irfft_ignores_the_imaginary_parts_of_dc_and_nyquist(method):
    for n in (6, 7):
        case = Case("irfft", "float64", n)
        x = _input(case)
        y = x.copy()
        y[0] += 3.5j
        if n % 2 == 0:
            y[n // 2] -= 1.25j
        a = reference_transform(x, case, method=method)
        b = reference_transform(y, case, method=method)
        assert np.array_equal(a.hi, b.hi) and np.array_equal(a.lo, b.lo)
        assert np.all(a.hi.imag == 0) and np.all(a.lo.imag == 0)


def test_rfft_is_the_first_half_of_fft_and_norms_scale_by_norm_factor():
    for n in (9, 16):
        x = _input(Case("rfft", "float64", n))
        full = reference_transform(x.astype(np.complex128), Case("fft", "float64", n), method="double-double")
        half = reference_transform(x, Case("rfft", "float64", n), method="double-double")
        np.testing.assert_array_equal(half.hi, full.hi[: n // 2 + 1])
        for kind in ("fft", "ifft"):
            xc = _input(Case(kind, "float64", n))
            base = reference_transform(xc, Case(kind, "float64", n, "backward"), method="double-double").values()
            unscaled = base / norm_factor(n, "backward", kind == "ifft")
            for norm in ("ortho", "forward"):
                got = reference_transform(xc, Case(kind, "float64", n, norm), method="double-double").values()
                want = unscaled * norm_factor(n, norm, kind == "ifft")
                assert np.max(np.abs(got - want)) < 1e-14 * np.max(np.abs(want))


# -- Reference.error -----------------------------------------------------------------------

def test_error_cancels_accurately():
    case = Case("fft", "float64", 64)
    x = _input(case)
    r = reference_transform(x, case, method="double-double")
    assert np.any(r.lo != 0)
    # y = hi exactly: the error is -lo, exactly.
    np.testing.assert_array_equal(r.error(r.hi), -r.lo)
    # A one-ulp perturbation is measured to a relative accuracy far below 1e-3.
    y = np.nextafter(r.hi.real, np.inf) + 1j * r.hi.imag
    err = r.error(y)
    want_re = (np.nextafter(r.hi.real, np.inf) - r.hi.real) - r.lo.real
    np.testing.assert_allclose(err.real, want_re, rtol=1e-6, atol=0)
    np.testing.assert_array_equal(err.imag, -r.lo.imag)
    assert err.dtype == np.complex128


def test_error_works_in_long_double():
    """A long double output is measured in long double: the reference's own value has error ~ 0."""
    case = Case("fft", "longdouble", 32)
    x = _input(case)
    r = reference_transform(x, case)
    v = r.values()
    assert v.dtype == (np.clongdouble if EPS_LD < EPS64 else np.complex128)
    e = np.abs(r.error(v))
    assert np.all(e <= 2 * EPS_LD * np.abs(r.hi) + 1e-300)
    # A long double transform (scipy on clongdouble) differs from it at the long double level.
    import scipy.fft
    y = scipy.fft.fft(x)
    rel = r.relative_error(y)
    if EPS_LD < EPS64:
        assert 0 < rel < 100 * EPS_LD


def test_relative_error_edge_cases():
    case = Case("fft", "float64", 4)
    z = reference_transform(np.zeros(4, complex), case)
    assert z.relative_error(np.zeros(4)) == 0.0
    assert z.relative_error(np.ones(4)) == float("inf")


def test_root_tables_are_accurate_for_large_and_odd_bases():
    """The double-double twiddles exp(-2j pi k / m) against mpmath at 40 digits (mpmath)."""
    for m in (2**20, 2 * 4099):
        k = np.array([1, 3, m // 8 + 1, m // 3, m // 2 - 1, m - 1], dtype=np.int64)
        w = dd_roots(k, m)
        with mpmath.workdps(40):
            for i, kk in enumerate(k):
                want = mpmath.expjpi(mpmath.mpf(-2 * int(kk)) / m)
                got = mpmath.mpc(mpmath.mpf(w.rh[i]) + mpmath.mpf(w.rl[i]), mpmath.mpf(w.ih[i]) + mpmath.mpf(w.il[i]))
                assert abs(got - want) < 1e-31


def test_reference_arrays_are_read_only():
    case = Case("fft", "float64", 8)
    r = reference_transform(_input(case), case)
    with pytest.raises(ValueError):
        r.hi[0] = 0
    with pytest.raises(ValueError):
        r.lo[0] = 0
