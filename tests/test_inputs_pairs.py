"""Tests of fftgauge.harness.battery.inputs (seeded inputs, structured signals) and fftgauge.harness.battery.pairs (closed forms).

Every closed form is checked against a 50-digit direct DFT in mpmath of the stored signal
("mpmath (arbitrary precision): direct DFT at 50 digits for small N", the project's
check-value list), including those the list marks "from memory" (the Oppenheim & Schafer
pairs, the Gauss sum, the periodised Gaussian): each is verified numerically here, not
trusted. At larger N they are compared with numpy.fft ("an independent double-precision
implementation (not ground truth)").
"""

from __future__ import annotations

import math
import subprocess
import sys

import mpmath
import numpy as np
import pytest

from fftgauge.harness.battery.bounds import accuracy_limit
from fftgauge.harness.cases import Case
from fftgauge.harness.errors import UsageError
from fftgauge.harness.battery import inputs
from fftgauge.harness.battery.inputs import case_rng, random_input, root_of_unity
from fftgauge.harness.battery.pairs import (
    CLOSED_FORM_UNITS,
    PAIRS,
    chirp_dft,
    closed_form_allowance,
    gauss_sum,
    pair_error,
    pair_named,
)

U64 = 2.0**-53


# -- case_rng and random_input -------------------------------------------------------------

def test_case_rng_is_deterministic_and_separates_its_arguments():
    case = Case("fft", "float64", 64)
    draw = lambda *a: case_rng(*a).standard_normal(4)
    np.testing.assert_array_equal(draw(7, case, "p"), draw(7, case, "p"))
    others = [draw(8, case, "p"), draw(7, case, "q"), draw(7, case),
              draw(7, Case("ifft", "float64", 64), "p"), draw(7, Case("fft", "float32", 64), "p"),
              draw(7, Case("fft", "float64", 65), "p"), draw(7, Case("fft", "float64", 64, "ortho"), "p")]
    for o in others:
        assert not np.array_equal(o, draw(7, case, "p"))


def test_case_rng_is_the_same_in_another_process():
    """The string hashes are stable across processes (Python's hash() is salted per process)."""
    code = ("from fftgauge.harness.cases import Case; from fftgauge.harness.battery.inputs import case_rng; "
            "print(repr(case_rng(5, Case('rfft', 'float32', 100, 'ortho'), 'x').integers(0, 2**62, 3).tolist()))")
    outs = set()
    for salt in ("1", "2"):
        env = {"PYTHONHASHSEED": salt, "PATH": ""}
        res = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, env=env,
                             cwd=str(__import__("pathlib").Path(__file__).resolve().parents[1]), check=True)
        outs.add(res.stdout.strip())
    here = repr(case_rng(5, Case("rfft", "float32", 100, "ortho"), "x").integers(0, 2**62, 3).tolist())
    assert outs == {here}


def test_case_rng_rejects_bad_seeds():
    case = Case("fft", "float64", 8)
    for bad in (-1, 1.5, "3", True):
        with pytest.raises(UsageError, match="seed"):
            case_rng(bad, case)


@pytest.mark.parametrize("kind", ["fft", "ifft", "rfft", "irfft"])
@pytest.mark.parametrize("dtype", ["float32", "float64", "longdouble"])
def test_random_input_shape_dtype_and_hermitian_half(kind, dtype):
    for n in (1, 2, 7, 8):
        case = Case(kind, dtype, n)
        for dist in ("gaussian", "uniform"):
            x = random_input(case, case_rng(0, case), dist)
            assert x.shape == (case.input_length,) and x.dtype == case.input_dtype
            if kind == "irfft":
                assert x[0].imag == 0
                if n % 2 == 0:
                    assert x[n // 2].imag == 0
            if dist == "uniform":
                parts = [x] if kind == "rfft" else [x.real, x.imag]
                for p in parts:
                    assert np.all(p >= -1) and np.all(p < 1)


def test_random_input_distributions():
    """Standard normal and uniform [-1, 1) moments, independent real and imaginary parts (common practice)."""
    case = Case("fft", "float64", 200_000)
    g = random_input(case, case_rng(1, case))
    assert abs(g.real.mean()) < 0.01 and abs(g.real.var() - 1) < 0.02 and abs(g.imag.var() - 1) < 0.02
    assert abs(np.corrcoef(g.real, g.imag)[0, 1]) < 0.01
    u = random_input(case, case_rng(1, case), "uniform")
    assert abs(u.real.var() - 1 / 3) < 0.01 and u.real.min() >= -1 and u.real.max() < 1
    with pytest.raises(UsageError, match="distribution"):
        random_input(case, case_rng(1, case), "cauchy")


def test_long_double_inputs_use_bits_beyond_double():
    if not np.finfo(np.longdouble).eps < np.finfo(np.float64).eps:
        pytest.skip("long double is double here")
    case = Case("rfft", "longdouble", 1000)
    x = random_input(case, case_rng(0, case))
    assert np.mean(x != x.astype(np.float64)) > 0.9


# -- structured signals --------------------------------------------------------------------

def test_root_of_unity_against_mpmath():
    """exp(2j pi m / n) within one unit of 2^-53 of the 40-digit value (mpmath); exact at quarter turns."""
    cases = [(m, n) for n in (1, 2, 3, 4, 7, 8, 12, 1000, 2**20, 999_983)
             for m in (0, 1, -1, n // 4, n // 2, n // 3 + 1, 3 * n // 4, n - 1, 7 * n + 5, -13 * n - 2)]
    ms = np.array([m for m, _ in cases], dtype=np.int64)
    worst = 0.0
    with mpmath.workdps(40):
        for (m, n), mm in zip(cases, ms):
            got = complex(root_of_unity(mm, n))
            want = mpmath.expjpi(mpmath.mpf(2 * (m % n)) / n)
            worst = max(worst, float(abs(mpmath.mpc(got) - want)))
    assert worst <= U64
    assert complex(root_of_unity(1, 4)) == 1j and complex(root_of_unity(2, 4)) == -1
    assert complex(root_of_unity(3, 4)) == -1j and complex(root_of_unity(5, 4)) == 1j
    assert complex(root_of_unity(-1, 8)).conjugate() == complex(root_of_unity(1, 8))


def test_structured_signals_match_their_definitions():
    """Each generator against its defining formula evaluated in mpmath at 40 digits."""
    n = 13
    with mpmath.workdps(40):
        def close(got, fn):
            err = max(float(abs(mpmath.mpc(complex(g)) - fn(j))) for j, g in enumerate(got))
            assert err <= 2 * U64, err
        close(inputs.zadoff_chu(n, 5), lambda j: mpmath.expjpi(-mpmath.mpf(5 * j * (j + 1)) / n))
        close(inputs.chirp(n), lambda j: mpmath.expjpi(mpmath.mpf(2 * j * j) / n))
        close(inputs.complex_tone(n, 4), lambda j: mpmath.expjpi(mpmath.mpf(8 * j) / n))
        close(inputs.cosine(n, 3), lambda j: mpmath.cospi(mpmath.mpf(6 * j) / n))
        a = 0.9 * complex(root_of_unity(1, 7))
        close(inputs.geometric(n, a), lambda j: mpmath.mpc(a) ** j)
        close(inputs.periodic_gaussian(n),
              lambda j: mpmath.fsum(mpmath.exp(-mpmath.pi * (j + m * n) ** 2 / n) for m in range(-4, 5)))
        close(inputs.periodic_gaussian(1), lambda j: mpmath.jtheta(3, 0, mpmath.exp(-mpmath.pi)))
    assert inputs.impulse(5, 7).tolist() == [0, 0, 1, 0, 0]
    assert inputs.rect(5, 2).tolist() == [1, 1, 0, 0, 0]
    with pytest.raises(ValueError):
        inputs.rect(5, 6)
    with pytest.raises(ValueError):
        inputs.zadoff_chu(8, 1)
    with pytest.raises(ValueError):
        inputs.zadoff_chu(7, 7)
    # a^j carried in long double: within a few units of 2^-53 even at j = 9999 (mpmath).
    if np.finfo(np.longdouble).eps < 1e-18:
        ratio = complex(0.9999 * root_of_unity(1, 9))
        big = inputs.geometric(10_000, ratio)
        with mpmath.workdps(40):
            for j in (1000, 9_999):
                want = mpmath.mpc(ratio) ** j
                assert float(abs(mpmath.mpc(complex(big[j])) - want) / abs(want)) < 4 * U64


# -- pairs against the 50-digit direct DFT -------------------------------------------------

def mp_direct_dft(x: np.ndarray) -> list:
    """X[k] = sum_j x[j] exp(-2j pi k j / N) at 50 digits, written out (mpmath)."""
    n = len(x)
    with mpmath.workdps(50):
        vals = [mpmath.mpc(complex(v)) for v in x]
        roots = [mpmath.expjpi(-mpmath.mpf(2 * m) / n) for m in range(n)]
        return [mpmath.fsum(vals[j] * roots[(k * j) % n] for j in range(n)) for k in range(n)]


PAIR_SIZES = (1, 2, 3, 4, 5, 6, 7, 8, 9, 12, 13, 16, 17, 31)


@pytest.mark.parametrize("pair", PAIRS, ids=[p.name for p in PAIRS])
def test_closed_form_matches_a_50_digit_direct_dft(pair):
    """Each closed form (sources in fftgauge.harness.battery.pairs; several "from memory") verified numerically.

    The closed form must equal the 50-digit DFT of the stored signal to within
    CLOSED_FORM_UNITS units of 2^-53, relative to norm2(X), in the pair's compare mode.
    """
    checked = 0
    for n in PAIR_SIZES:
        if not pair.applies(n):
            continue
        x = pair.signal(n)
        assert x.dtype == np.complex128 and x.shape == (n,)
        closed = pair.transform(n)
        assert closed.dtype == np.complex128 and closed.shape == (n,)
        if pair.real:
            assert np.all(x.imag == 0)
        exact = mp_direct_dft(x)
        with mpmath.workdps(50):
            norm_x = mpmath.sqrt(mpmath.fsum(abs(mpmath.mpc(complex(v))) ** 2 for v in x))
            scale = mpmath.sqrt(n) * norm_x
            if pair.compare == "full":
                err = mpmath.sqrt(mpmath.fsum(abs(mpmath.mpc(complex(c)) - e) ** 2 for c, e in zip(closed, exact)))
            elif pair.compare == "magnitude":
                err = mpmath.sqrt(mpmath.fsum((abs(complex(c)) - abs(e)) ** 2 for c, e in zip(closed, exact)))
            else:
                err = abs(mpmath.mpc(complex(closed[0])) - exact[0])
                assert np.all(np.isnan(closed[1:]))
            rel = float(err / scale) if scale else float(err)
        assert rel <= CLOSED_FORM_UNITS * U64, (pair.name, n, rel / U64)
        checked += 1
    assert checked >= 3


def test_gauss_sum_four_cases_and_both_signs():
    """Gauss; Berndt, Evans & Williams (from memory): G(N) by residue of N mod 4, to 40 digits (mpmath).

    Also: G(N) is the k = 0 output of the inverse-sign transform of the chirp, which is the
    same number as the forward transform's k = 0 output (the exponent vanishes at k = 0).
    """
    with mpmath.workdps(40):
        for n in range(1, 41):
            want = mpmath.fsum(mpmath.expjpi(mpmath.mpf(2 * j * j) / n) for j in range(n))
            assert abs(mpmath.mpc(gauss_sum(n)) - want) < 1e-14 * math.sqrt(n)
    for n in (100, 101, 102, 103):
        x = inputs.chirp(n)
        assert abs(np.fft.ifft(x)[0] * n - gauss_sum(n)) < 1e-12
        assert abs(np.fft.fft(x)[0] - gauss_sum(n)) < 1e-12


def test_zadoff_chu_flat_magnitude_at_lte_length_for_several_roots():
    """3GPP TS 36.211 5.7.2 / Chu 1972: |DFT| = sqrt(839) for any root 0 < u < 839 (numpy.fft)."""
    for u in (1, 25, 29, 34, 129, 838):
        y = np.fft.fft(inputs.zadoff_chu(839, u))
        assert np.max(np.abs(np.abs(y) - math.sqrt(839))) < 1e-11


@pytest.mark.parametrize("pair", PAIRS, ids=[p.name for p in PAIRS])
def test_closed_form_agrees_with_numpy_fft_at_larger_n(pair):
    """Against numpy.fft: pair_error within accuracy_limit + closed_form_allowance (float64)."""
    for n in (127, 256, 839, 1000, 1021, 4096, 4097):
        if not pair.applies(n):
            continue
        case = Case("fft", "float64", n)
        x = pair.signal(n)
        err = pair_error(pair, n, np.fft.fft(x))
        assert err <= accuracy_limit(case) + closed_form_allowance("float64"), (pair.name, n, err)
        if pair.real:
            half = pair_error(pair, n, np.fft.rfft(x.real))
            assert half <= accuracy_limit(Case("rfft", "float64", n)) + closed_form_allowance("float64")


def test_pair_error_detects_wrong_transforms():
    """A sign error (inverse exponent) and a scale error are far outside the allowance.

    Even signals (x[-j] = x[j]: impulse, constant, cosine, chirp, periodic Gaussian) have the
    same transform under either sign, so only the others can show a sign error; the test
    checks that the even chirp indeed cannot, as the pairs module documents.
    """
    n = 1021
    limit = accuracy_limit(Case("fft", "float64", n)) + closed_form_allowance("float64")
    for name in ("shifted-impulse", "complex-tone", "rect-dirichlet", "geometric"):
        p = pair_named(name)
        x = p.signal(n)
        assert pair_error(p, n, np.fft.ifft(x) * n) > 1e3 * limit, name
    for name in ("shifted-impulse", "complex-tone", "rect-dirichlet", "geometric", "chirp", "periodic-gaussian"):
        p = pair_named(name)
        x = p.signal(n)
        assert pair_error(p, n, np.fft.fft(x) / math.sqrt(n)) > 1e3 * limit, name
    chirp_pair = pair_named("chirp")
    assert pair_error(chirp_pair, n, np.fft.ifft(chirp_pair.signal(n)) * n) <= limit
    zc = pair_named("zadoff-chu")
    assert pair_error(zc, n, np.fft.fft(zc.signal(n)) / math.sqrt(n)) > 1e3 * limit
    gs = pair_named("gauss-sum")
    assert pair_error(gs, 1024, np.fft.fft(gs.signal(1024)) * 0.5) > 1e3 * limit


def test_pair_bookkeeping():
    names = [p.name for p in PAIRS]
    assert len(set(names)) == len(names)
    for required in ("impulse", "shifted-impulse", "constant", "complex-tone", "cosine", "rect-dirichlet",
                     "geometric", "zadoff-chu", "gauss-sum", "periodic-gaussian"):
        assert required in names
    zc = pair_named("zadoff-chu")
    assert [n for n in range(1, 30) if zc.applies(n)] == [3, 5, 7, 11, 13, 17, 19, 23, 29]
    assert not pair_named("chirp").applies(8)
    with pytest.raises(ValueError, match="not defined"):
        pair_error(zc, 8, np.zeros(8))
    with pytest.raises(ValueError, match="length"):
        pair_error(pair_named("impulse"), 8, np.zeros(3))
    with pytest.raises(KeyError):
        pair_named("sawtooth")
    # The Dirichlet kernel's L = N limit: the n = 1 pulse fills the signal; bins k > 0 vanish.
    from fftgauge.harness.battery.pairs import dirichlet_dft
    full = dirichlet_dft(6, 6)
    assert full[0] == 6 and np.all(full[1:] == 0)
    # chirp_dft at n = 1 is the single value 1.
    assert chirp_dft(1).tolist() == [1 + 0j]


@pytest.mark.parametrize("pair", PAIRS, ids=[p.name for p in PAIRS])
def test_closed_form_against_the_reference_at_large_n(pair):
    """Against fftgauge.harness.battery.reference (scipy.fft on clongdouble, or double-double): closed form within
    CLOSED_FORM_UNITS units of 2^-53 at N up to 65537 (measured worst: geometric, 5.5 units)."""
    from fftgauge.harness.battery.reference import reference_transform

    for n in (4096, 4097, 65536, 65537):
        if not pair.applies(n):
            continue
        x = pair.signal(n)
        ref = reference_transform(x, Case("fft", "float64", n))
        assert pair_error(pair, n, ref.values()) <= CLOSED_FORM_UNITS * U64, (pair.name, n)
