"""The shaped ground truth (axis-by-axis extended precision) against a direct N-D DFT in mpmath.

Source: the multidimensional DFT's definition,
    X[k_1..k_d] = sum_{n_1..n_d} x[n_1..n_d] exp(-+2 pi i sum_j k_j n_j / N_j),
(Oppenheim & Schafer, Discrete-Time Signal Processing; Bracewell, The Fourier Transform and
Its Applications; from memory, so it is verified here: the direct sum below, written
independently of the code under test, agrees with numpy.fft's fftn to 1e-15 on a random
array), evaluated in mpmath at 50 digits as one sum over every transformed index at once.
Norms as the array API standard's fft extension: backward (1 forward, 1/N inverse), ortho
(1/sqrt(N)), forward (1/N forward, 1 inverse), N the product of the transformed lengths.
The real kinds as numpy/the array API standard define them: rfftn keeps bins 0..n//2 of the
last listed axis of the full N-D DFT of the real part; irfftn is the complex inverse over the
other axes followed by the real inverse along the last (imaginary parts of its DC and even
Nyquist bins ignored); for a Hermitian-consistent half spectrum it equals the direct N-D
inverse of the full Hermitian spectrum, checked as well.
"""

from __future__ import annotations

import itertools
import math

import mpmath
import numpy as np
import pytest

from fftgauge.harness.battery.reference import LONGDOUBLE_IS_EXTENDED
from fftgauge.harness.shapes.case import SHAPE_KINDS, ShapeCase
from fftgauge.harness.shapes.reference import shaped_reference, shaped_reference_method
from shaped_signals import shaped_signal

DPS = 50


def mp_array(x: np.ndarray) -> np.ndarray:
    """Return an object array of mpmath numbers with the exact values of ``x`` (long double included)."""
    def exact(part):  # a long double is the sum of two doubles exactly (64-bit significand)
        hi = np.float64(part)
        return mpmath.mpf(float(hi)) + mpmath.mpf(float(np.float64(part - hi)))

    out = np.empty(x.shape, dtype=object)
    for idx in np.ndindex(x.shape):
        v = x[idx]
        out[idx] = mpmath.mpc(exact(np.real(v)), exact(np.imag(v)))
    return out


def mp_scale(points: int, norm: str, inverse: bool):
    if norm == "ortho":
        return 1 / mpmath.sqrt(points)
    if (norm == "backward") == inverse:
        return mpmath.mpf(1) / points
    return mpmath.mpf(1)


def direct_dft(values: np.ndarray, axes: tuple[int, ...], sign: int) -> np.ndarray:
    """The direct N-D DFT over ``axes`` of an object array of mpc, one sum over all transformed indices."""
    lengths = [values.shape[a] for a in axes]
    out = np.empty(values.shape, dtype=object)
    roots = {n: [mpmath.expjpi(sign * mpmath.mpf(2 * r) / n) for r in range(n)] for n in set(lengths)}
    for k in np.ndindex(values.shape):
        terms = []
        for m in itertools.product(*(range(n) for n in lengths)):
            src = list(k)
            w = mpmath.mpc(1)
            for a, n, mj in zip(axes, lengths, m):
                src[a] = mj
                w *= roots[n][(k[a] * mj) % n]
            terms.append(values[tuple(src)] * w)
        out[k] = mpmath.fsum(terms)
    return out


def mp_irfft_last(values: np.ndarray, axis: int, n: int) -> np.ndarray:
    """numpy's irfft along ``axis`` (no scaling) by its definition: Hermitian extension, direct sum."""
    moved = np.moveaxis(values, axis, -1)
    out = np.empty(moved.shape[:-1] + (n,), dtype=object)
    for idx in np.ndindex(moved.shape[:-1]):
        half = list(moved[idx])
        full = []
        for k in range(n):
            j = k if k <= n // 2 else n - k
            v = half[j]
            if j == 0 or (n % 2 == 0 and j == n // 2):
                v = mpmath.mpc(v.real, 0)
            full.append(v if k <= n // 2 else mpmath.conj(v))
        for m in range(n):
            out[idx + (m,)] = mpmath.mpc(mpmath.fsum(full[k] * mpmath.expjpi(mpmath.mpf(2 * k * m) / n)
                                                     for k in range(n)).real, 0)
    return np.moveaxis(out, -1, axis)


def mp_transform(x: np.ndarray, case: ShapeCase) -> np.ndarray:
    """The 50-digit transform of ``x`` for ``case`` by the definitions in the module docstring."""
    axes = case.axes_normalised
    sign = 1 if case.is_inverse else -1
    with mpmath.workdps(DPS):
        values = mp_array(np.real(x) if case.base_kind == "rfft" else x)
        if case.base_kind == "irfft":
            if len(axes) > 1:
                values = direct_dft(values, axes[:-1], sign)
            out = mp_irfft_last(values, axes[-1], case.lengths[-1])
        else:
            out = direct_dft(values, axes, sign)
            if case.base_kind == "rfft":
                keep = [slice(None)] * out.ndim
                keep[axes[-1]] = slice(0, case.lengths[-1] // 2 + 1)
                out = out[tuple(keep)]
        scale = mp_scale(case.points, case.norm, case.is_inverse)
        return np.vectorize(lambda v: v * scale, otypes=[object])(out)


def mp_relative_error(ref, exact: np.ndarray) -> float:
    """norm2(hi + lo - exact) / norm2(exact), at 50 digits."""
    with mpmath.workdps(DPS):
        diff = size = mpmath.mpf(0)
        for idx in np.ndindex(exact.shape):
            got = mpmath.mpc(complex(ref.hi[idx])) + mpmath.mpc(complex(ref.lo[idx]))
            diff += abs(got - exact[idx]) ** 2
            size += abs(exact[idx]) ** 2
        return float(mpmath.sqrt(diff / size))


#: Shapes up to 4x6x5: (shape, axes) for the several-axis kinds and the batches.
MANY = [((4, 6), (0, 1)), ((3, 5), (1, 0)), ((4, 6, 5), (0, 1, 2)), ((4, 6, 5), (2, 0)), ((4, 6, 5), (-3, -1)),
        ((2, 3, 4), (1, 2)), ((1, 5), (0, 1))]
ONE = [((4, 6), (-1,)), ((4, 6), (0,)), ((3, 4, 5), (1,)), ((6, 1), (0,)), ((7,), (0,))]
#: The largest relative error the ground truth may show (worst measured over these shapes and
#: kinds: 1.0e-19 for float64 through long double, 2.0e-16 for float32 through double, 2.9e-32
#: for longdouble through double-double): each at least 1000 times below the precision's eps.
TOLERANCE = {"float32": 1e-15, "float64": 1e-18, "longdouble": 1e-28}


def test_the_direct_sum_is_the_dft_numpy_computes():
    """Verifies the from-memory definition numerically: direct N-D sum vs numpy.fft.fftn/ifftn/rfftn."""
    x = shaped_signal(ShapeCase("fftn", "float64", (3, 4, 2), (0, 1, 2)))
    with mpmath.workdps(30):
        ours = direct_dft(mp_array(x), (0, 2), -1).astype(complex)
        inv = direct_dft(mp_array(x), (1, 2), 1).astype(complex) / 8
    assert np.max(np.abs(ours - np.fft.fftn(x, axes=(0, 2)))) < 1e-14
    assert np.max(np.abs(inv - np.fft.ifftn(x, axes=(1, 2)))) < 1e-14


@pytest.mark.parametrize("dtype", ["float32", "float64", "longdouble"])
@pytest.mark.parametrize("kind", SHAPE_KINDS)
def test_reference_matches_the_direct_nd_dft(kind, dtype):
    shapes = MANY if kind.endswith("n") else ONE
    worst = 0.0
    for shape, axes in shapes:
        for norm in (("backward", "ortho", "forward") if shape == shapes[0][0] else ("backward",)):
            case = ShapeCase(kind, dtype, shape, axes, norm=norm)
            x = shaped_signal(case)
            ref = shaped_reference(x, case)
            assert ref.hi.shape == case.output_shape and ref.lo.shape == case.output_shape
            assert not ref.hi.flags.writeable
            err = mp_relative_error(ref, mp_transform(x, case))
            assert err < TOLERANCE[dtype], (case.label(), err)
            worst = max(worst, err)
            if case.base_kind == "irfft":
                assert not np.any(ref.hi.imag) and not np.any(ref.lo.imag)
    assert worst > 0.0 or dtype == "longdouble"  # a float reference is not exact: the error was measured


def test_irfftn_of_a_hermitian_spectrum_is_the_direct_inverse_of_the_full_spectrum():
    """For a consistent half spectrum (the rfftn of real data), irfftn = direct N-D inverse = the data."""
    for shape, axes in (((4, 6), (0, 1)), ((3, 4, 5), (0, 1, 2)), ((4, 5, 3), (2, 0))):
        fwd = ShapeCase("rfftn", "float64", shape, axes)
        x = shaped_signal(fwd)
        with mpmath.workdps(DPS):
            half = mp_transform(x, fwd)
        spectrum = half.astype(complex)
        inv = ShapeCase("irfftn", "float64", shape, axes)
        norm_axes = inv.axes_normalised
        n_last = shape[norm_axes[-1]]
        # Rounding may leave the self-mirrored planes (DC and even Nyquist of the halved axis) an
        # ulp away from conjugate symmetry: make them exactly consistent.
        for k in np.ndindex(spectrum.shape):
            if k[norm_axes[-1]] == 0 or (n_last % 2 == 0 and k[norm_axes[-1]] == n_last // 2):
                mirror = tuple((-k[a]) % shape[a] if a in norm_axes else k[a] for a in range(len(shape)))
                if mirror == k:
                    spectrum[k] = spectrum[k].real
                elif mirror > k:
                    spectrum[mirror] = np.conj(spectrum[k])
        ref = shaped_reference(spectrum, inv)
        # The full Hermitian spectrum: S[k] = half[k] for k_last <= n//2, else conj(half[-k mod N]).
        with mpmath.workdps(DPS):
            mp_half = mp_array(spectrum)
            full = np.empty(shape, dtype=object)
            for k in np.ndindex(shape):
                if k[norm_axes[-1]] <= n_last // 2:
                    full[k] = mp_half[k]
                else:
                    mirror = tuple((-k[a]) % shape[a] if a in norm_axes else k[a] for a in range(len(shape)))
                    full[k] = mpmath.conj(mp_half[mirror])
            exact = direct_dft(full, norm_axes, 1)
            exact = np.vectorize(lambda v: v / inv.points, otypes=[object])(exact)
        assert mp_relative_error(ref, exact) < 1e-18
        assert np.max(np.abs(ref.hi.real - x)) < 1e-14  # and it gives the data back


def test_method_choice_and_errors():
    assert shaped_reference_method("float32") == "scipy-double"
    assert shaped_reference_method("longdouble") == "double-double"
    assert shaped_reference_method("float64") == ("scipy-longdouble" if LONGDOUBLE_IS_EXTENDED else "double-double")
    case = ShapeCase("fftn", "float64", (4, 6), (0, 1))
    x = shaped_signal(case)
    with pytest.raises(ValueError, match="shape"):
        shaped_reference(x.T, case)
    with pytest.raises(ValueError, match="unknown"):
        shaped_reference(x, case, method="mpmath")
    with pytest.raises(ValueError, match="float32"):
        shaped_reference(x, case, method="scipy-double")
    # Two methods agree far below float64's epsilon, in every layout of the input.
    from fftgauge.harness.shapes.case import LAYOUTS, lay_out
    dd = shaped_reference(x, case, method="double-double")
    for layout in LAYOUTS:
        other = shaped_reference(lay_out(x, layout), case)
        assert dd.relative_error(other.values()) < 1e-18, layout
    assert math.isclose(np.linalg.norm(dd.hi), np.linalg.norm(np.fft.fftn(x)), rel_tol=1e-14)
