"""Tests of fftgauge.harness.dft, the one home of the DFT conventions, against outside sources.

Sources: numpy.fft (the Hermitian extension irfft reads and the normalisations of numpy's
``norm`` argument); the bit-reversal table for N = 8 of the textbook decimation-in-time flow
graph, input order x[0], x[4], x[2], x[6], x[1], x[5], x[3], x[7] (Oppenheim & Schafer,
Discrete-Time Signal Processing, 3rd ed., ch. 9; from memory, and checked below against the
definition, the binary digits of the index reversed, written with Python's format); numpy.finfo for
machine epsilon and unit roundoff; mpmath at 50 digits for the exact normalisation factor.
"""

from __future__ import annotations

import mpmath
import numpy as np
import pytest

from fftgauge.harness import dft


@pytest.mark.parametrize("n", [1, 2, 3, 4, 5, 8, 9, 16, 17])
def test_hermitian_full_equals_numpy_fft_of_a_real_signal(n):
    """numpy.fft.fft of a real signal is the Hermitian extension of numpy.fft.rfft's half."""
    x = np.random.default_rng(n).standard_normal(n)
    got = dft.hermitian_full(np.fft.rfft(x), n)
    np.testing.assert_allclose(got, np.fft.fft(x), rtol=0, atol=1e-12 * max(1, n))
    assert got.dtype == np.complex128


@pytest.mark.parametrize("n", [1, 2, 6, 7])
def test_hermitian_full_drops_what_irfft_ignores(n):
    """numpy.fft.irfft ignores the imaginary parts of DC and (even n) Nyquist: the extension
    with them dropped gives, through numpy.fft.ifft, numpy.fft.irfft's output."""
    rng = np.random.default_rng(10 + n)
    half = rng.standard_normal(n // 2 + 1) + 1j * rng.standard_normal(n // 2 + 1)
    full = dft.hermitian_full(half, n)
    np.testing.assert_allclose(np.fft.ifft(full), np.fft.irfft(half, n), atol=1e-14)
    assert full[0].imag == 0 and (n % 2 or full[n // 2].imag == 0)
    assert np.array_equal(dft.clean_half_spectrum(half, n), full[: n // 2 + 1])


def test_hermitian_full_keeps_long_double():
    half = np.array([1, 2 + 1j, 3], dtype=np.clongdouble)
    assert dft.hermitian_full(half, 4).dtype == np.dtype(np.clongdouble)


def test_bit_reversal_for_8_is_the_textbook_table():
    """Decimation-in-time input order for N = 8: 0 4 2 6 1 5 3 7 (Oppenheim & Schafer, 3rd ed., ch. 9)."""
    assert dft.bit_reversal_permutation(8).tolist() == [0, 4, 2, 6, 1, 5, 3, 7]
    assert dft.bit_reversal_permutation(1).tolist() == [0]
    assert dft.bit_reversal_permutation(2).tolist() == [0, 1]


@pytest.mark.parametrize("n", [4, 16, 1024])
def test_bit_reversal_is_an_involution_and_reverses_the_binary_digits(n):
    p = dft.bit_reversal_permutation(n)
    bits = n.bit_length() - 1
    assert p[p].tolist() == list(range(n))
    assert [int(format(i, f"0{bits}b")[::-1], 2) for i in range(n)] == p.tolist()
    with pytest.raises(ValueError):
        p[0] = 1  # shared and cached: read-only


def test_bit_reversal_needs_a_power_of_two():
    with pytest.raises(ValueError, match="power of two"):
        dft.bit_reversal_permutation(12)


@pytest.mark.parametrize("norm", dft.NORMS)
@pytest.mark.parametrize("inverse", [False, True])
def test_norm_factor_is_numpys(norm, inverse):
    """numpy.fft with ``norm`` equals the unscaled sum times norm_factor (n = 12)."""
    n = 12
    x = np.random.default_rng(2).standard_normal(n) + 0j
    fn = np.fft.ifft if inverse else np.fft.fft
    unscaled = np.fft.ifft(x, norm="forward") if inverse else np.fft.fft(x, norm="backward")
    np.testing.assert_allclose(fn(x, norm=norm), unscaled * dft.norm_factor(n, norm, inverse), rtol=1e-13)


@pytest.mark.parametrize("norm", dft.NORMS)
def test_norm_factor_in_other_number_types(norm):
    """The long double and mpmath evaluations agree with the 50-digit value to their precision."""
    n = 1000
    with mpmath.workdps(50):
        exact = dft.norm_factor(n, norm, True, mpmath.mpf, mpmath.sqrt)
        want = {"backward": mpmath.mpf(1) / n, "forward": mpmath.mpf(1), "ortho": 1 / mpmath.sqrt(n)}[norm]
        assert abs(exact - want) < mpmath.mpf(10) ** -48
        ld = dft.norm_factor(n, norm, True, np.longdouble, np.sqrt)
        assert isinstance(ld, np.longdouble)
        assert abs(mpmath.mpf(float(ld)) + mpmath.mpf(float(ld - np.longdouble(float(ld)))) - want) <= \
            2 * float(np.finfo(np.longdouble).eps) * want
    assert dft.norm_factor(n, norm, True) == pytest.approx(float(want), rel=1e-15)


def test_unknown_norm_is_refused():
    with pytest.raises(ValueError, match="unknown normalisation"):
        dft.norm_power("both", False)


@pytest.mark.parametrize("name, dtype", [("float16", np.float16), ("float32", np.float32),
                                         ("float64", np.float64), ("longdouble", np.longdouble)])
def test_epsilon_and_unit_roundoff_are_numpys(name, dtype):
    """numpy.finfo: eps = 2^(1 - p), u = eps / 2."""
    assert dft.machine_epsilon(name) == float(np.finfo(dtype).eps)
    assert dft.unit_roundoff(name) == float(np.finfo(dtype).eps) / 2
    with pytest.raises(ValueError, match="unknown precision"):
        dft.unit_roundoff("float8")


def test_size_label():
    assert [dft.size_label(n) for n in (1, 2, 1024, 1000, 3)] == ["1", "2^1", "2^10", "1000", "3"]
    assert dft.size_label(1 << 20, mathtext=True) == "$2^{20}$"


# -- declared conventions (sources: numpy.fft, the DFT's definition, the N = 8 table above) -------

def _signal(n, seed=3):
    rng = np.random.default_rng(seed)
    return rng.standard_normal(n) + 1j * rng.standard_normal(n)


@pytest.mark.parametrize("n", [1, 2, 7, 8])
def test_opposite_sign_of_each_kind(n):
    """The +j forward transform of x is n ifft(x) (numpy.fft.ifft's definition); its inverse is
    n^-1 times the -j sum; rfft's half is conjugated; irfft's output is reversed in time."""
    x = _signal(n)
    np.testing.assert_allclose(dft.to_convention(np.fft.fft(x), "fft", n, sign=1), n * np.fft.ifft(x), atol=1e-12)
    np.testing.assert_allclose(dft.to_convention(np.fft.ifft(x), "ifft", n, sign=1), np.fft.fft(x) / n, atol=1e-13)
    np.testing.assert_allclose(dft.to_convention(np.fft.rfft(x.real), "rfft", n, sign=1),
                               (n * np.fft.ifft(x.real))[: n // 2 + 1], atol=1e-12)
    half = np.fft.rfft(x.real)
    want = (np.fft.fft(dft.hermitian_full(half, n)) / n).real  # the -j sum, scaled by 1/n
    np.testing.assert_allclose(dft.to_convention(np.fft.irfft(half, n), "irfft", n, sign=1), want, atol=1e-12)


@pytest.mark.parametrize("scale, norm", [("1/n", "forward"), ("1/sqrt(n)", "ortho"), ("1", "backward")])
def test_declared_forward_scale_is_numpys_norm(scale, norm):
    n = 12
    x = _signal(n)
    for kind_norm in dft.NORMS:
        got = dft.to_convention(np.fft.fft(x, norm=kind_norm), "fft", n, kind_norm, scale=scale)
        np.testing.assert_allclose(got, np.fft.fft(x, norm=norm), rtol=1e-13)


def test_declared_inverse_scale_and_long_double():
    n = 10
    x = _signal(n)
    np.testing.assert_allclose(dft.to_convention(np.fft.ifft(x), "ifft", n, scale="1"), np.fft.ifft(x, norm="forward"),
                               rtol=1e-13)
    y = np.fft.ifft(x).astype(np.clongdouble)
    assert dft.to_convention(y, "ifft", n, scale="1/sqrt(n)").dtype == np.dtype(np.clongdouble)


def test_output_orders():
    """bit-reversed: entry i is Y[rev(i)] (the N = 8 table); centred: numpy.fft.fftshift."""
    x = _signal(8)
    y = np.fft.fft(x)
    assert np.array_equal(dft.to_convention(y, "fft", 8, order="bit-reversed"), y[[0, 4, 2, 6, 1, 5, 3, 7]])
    for n in (7, 8):
        y = np.fft.fft(_signal(n))
        assert np.array_equal(dft.to_convention(y, "fft", n, order="centred"), np.fft.fftshift(y))
    assert np.array_equal(dft.to_convention(y, "fft", 8, order="natural"), y)


def test_conventions_compose_sign_scale_then_order():
    """A +j, 1/n-scaled, centred routine: fftshift(ifft(x)) (numpy.fft.ifft is the +j sum over n)."""
    x = _signal(16)
    got = dft.to_convention(np.fft.fft(x), "fft", 16, sign=1, scale="1/n", order="centred")
    np.testing.assert_allclose(got, np.fft.fftshift(np.fft.ifft(x)), atol=1e-14)


@pytest.mark.parametrize("kwargs, match", [({"sign": 2}, "sign"), ({"scale": "1/N^2"}, "unknown scale"),
                                           ({"order": "reversed"}, "unknown output order"),
                                           ({"order": "centred", "kind": "rfft"}, "complex outputs")])
def test_bad_conventions_are_refused(kwargs, match):
    kind = kwargs.pop("kind", "fft")
    with pytest.raises(ValueError, match=match):
        dft.to_convention(np.zeros(5, dtype=complex) if kind == "fft" else np.zeros(3, dtype=complex), kind, 5,
                          **kwargs)
    with pytest.raises(ValueError, match="power of two"):
        dft.to_convention(np.zeros(6, dtype=complex), "fft", 6, order="bit-reversed")


CONVENTIONS = [(1, None, None), (None, "1/n", None), (None, "1/sqrt(n)", None), (1, "1", "bit-reversed"),
               (None, None, "centred"), (1, "1/n", "centred")]


@pytest.mark.parametrize("kind, sign, scale, order", [(kind, *c) for kind in ("fft", "ifft", "rfft", "irfft")
                                                      for c in CONVENTIONS if c[2] is None or kind in ("fft", "ifft")])
def test_from_convention_undoes_to_convention(kind, sign, scale, order):
    n = 16
    x = _signal(n)
    y = {"fft": np.fft.fft(x), "ifft": np.fft.ifft(x), "rfft": np.fft.rfft(x.real),
         "irfft": np.fft.irfft(x[: n // 2 + 1], n)}[kind]
    declared = dft.to_convention(y, kind, n, "ortho", sign, scale, order)
    np.testing.assert_allclose(dft.from_convention(declared, kind, n, "ortho", sign, scale, order), y, rtol=1e-14,
                               atol=1e-15)


def test_from_convention_leaves_a_different_convention_visible():
    """Declared 1/n but scaled by 1/sqrt(n): undoing the declared 1/n leaves a factor sqrt(n)."""
    n = 16
    x = _signal(n)
    actual = np.fft.fft(x, norm="ortho")
    back = dft.from_convention(actual, "fft", n, "backward", scale="1/n")
    np.testing.assert_allclose(back, np.sqrt(n) * np.fft.fft(x), rtol=1e-13)
    with pytest.raises(ValueError, match="unknown scale"):
        dft.from_convention(actual, "fft", n, scale="n")


# -- packed half spectra -----------------------------------------------------------------------
# Worked by hand for x = [1, 1, 1, 1, 0, 0, 0, 0], w = exp(-j pi / 4) (the DFT's definition):
# X0 = 4; X1 = 1 + w + w^2 + w^3 = 1 - j (1 + sqrt 2); X2 = 1 + w^2 + w^4 + w^6 = 0;
# X3 = 1 + w^3 + w^6 + w^9 = 1 + j (1 - sqrt 2); X4 = 1 - 1 + 1 - 1 = 0. Checked against numpy.fft.rfft.

R2 = np.sqrt(2.0)
HAND_HALF = np.array([4, 1 - 1j * (1 + R2), 0, 1 + 1j * (1 - R2), 0])
HAND_PACKED = {
    "dc-nyquist": [4, 0, 1, -(1 + R2), 0, 0, 1, 1 - R2],   # Re X0, Re X4, Re X1, Im X1, Re X2, Im X2, Re X3, Im X3
    "halfcomplex": [4, 1, 0, 1, 0, 1 - R2, 0, -(1 + R2)],  # Re X0 .. Re X4, Im X3, Im X2, Im X1
}


def test_hand_worked_half_spectrum_is_numpys():
    np.testing.assert_allclose(np.fft.rfft([1, 1, 1, 1, 0, 0, 0, 0]), HAND_HALF, atol=1e-15)


@pytest.mark.parametrize("packing", ["dc-nyquist", "halfcomplex"])
def test_packings_of_the_hand_worked_example(packing):
    got = dft.pack_half_spectrum(HAND_HALF, 8, packing)
    np.testing.assert_allclose(got, HAND_PACKED[packing], atol=1e-15)
    assert got.dtype == np.float64
    np.testing.assert_allclose(dft.unpack_half_spectrum(got, 8, packing), HAND_HALF, atol=1e-15)


@pytest.mark.parametrize("packing, n", [("halfcomplex", 1), ("halfcomplex", 7), ("halfcomplex", 10),
                                        ("dc-nyquist", 2), ("dc-nyquist", 10), ("complex", 5)])
def test_pack_then_unpack_gives_the_half_spectrum(packing, n):
    half = np.fft.rfft(np.random.default_rng(n).standard_normal(n)).astype(np.complex64)
    packed = dft.pack_half_spectrum(half, n, packing)
    assert packed.shape == ((n // 2 + 1,) if packing == "complex" else (n,))
    back = dft.unpack_half_spectrum(packed, n, packing)
    assert back.dtype == np.complex64
    np.testing.assert_array_equal(back, dft.clean_half_spectrum(half, n))


def test_bad_packings_are_refused():
    with pytest.raises(ValueError, match="unknown packing"):
        dft.pack_half_spectrum(HAND_HALF, 8, "interleaved")
    with pytest.raises(ValueError, match="even n"):
        dft.pack_half_spectrum(np.zeros(4, complex), 7, "dc-nyquist")
    with pytest.raises(ValueError, match="holds 8 values"):
        dft.unpack_half_spectrum(np.zeros(5), 8, "halfcomplex")
