"""The shaped checks and their diagnosis codes (harness/shapes/checks.py and friends).

Sources, beside each test: the N-D DFT's definition X[k] = sum_n x[n] prod_j
exp(-2 pi i k_j n_j / N_j) and its shift and convolution theorems axis by axis (Oppenheim &
Schafer, Discrete-Time Signal Processing, 3rd ed., Table 8.2 per axis; Bracewell, The Fourier
Transform and Its Applications, the 2-D transform; from memory), verified here against a
direct N-D DFT in mpmath at 50 digits. The broken FFTs are tests/data/shaped_bugs.py.
"""

from __future__ import annotations

import importlib.util
import itertools
import pathlib

import mpmath
import numpy as np
import pytest

from fftgauge.backends.numpy_fft import NumpyBackend
from fftgauge.harness.shapes.case import ShapeCase
from fftgauge.harness.shapes.checks import SHAPED_CHECKS, check_shaped_case
from fftgauge.harness.shapes.context import ShapedContext, clean_half, reverse_axes
from fftgauge.harness.shapes.value_checks import axis_phase, hermitian_full_nd, impulse_response

DATA = pathlib.Path(__file__).parent / "data" / "shaped_bugs.py"
_spec = importlib.util.spec_from_file_location("shaped_bugs", DATA)
bugs = importlib.util.module_from_spec(_spec)
_spec.loader.exec_module(bugs)


def mp_dftn(x: np.ndarray, axes: tuple[int, ...], sign: int = -1) -> np.ndarray:
    """The defining sum of the N-D DFT over ``axes`` at 50 digits (every other axis a batch)."""
    with mpmath.workdps(50):
        out = np.zeros(x.shape, dtype=np.complex128)
        for k in itertools.product(*(range(n) for n in x.shape)):
            total = mpmath.mpc(0)
            for m in itertools.product(*(range(n) for n in x.shape)):
                if any(k[a] != m[a] for a in range(x.ndim) if a not in axes):
                    continue
                phase = sum(mpmath.mpf(k[a] * m[a]) / x.shape[a] for a in axes)
                v = x[m]
                total += mpmath.mpc(float(v.real), float(v.imag)) * mpmath.expjpi(2 * sign * phase)
            out[k] = complex(total)
        return out


def context(case: ShapeCase, backend=None, seed: int = 3) -> ShapedContext:
    backend = backend or NumpyBackend()
    return ShapedContext(backend, case, backend.plan_shaped(case), seed)


def rows_by_check(backend, case: ShapeCase, seed: int = 1) -> dict[str, object]:
    return {r.check: r for r in check_shaped_case(backend, case, seed)}


# -- the formulas the checks use, against the definition (mpmath) -------------------------------------

@pytest.mark.parametrize("shape,axes", [((3, 4), (0, 1)), ((2, 3, 4), (0, 2)), ((4, 5), (1,))])
def test_impulse_closed_form_is_the_dft_of_a_delta(shape, axes):
    """N-D impulse: the DFT of delta_m is prod_j exp(-2 pi i k_j m_j / N_j) in m's batch row (definition)."""
    kind = "fftn" if len(axes) > 1 else "fft"
    case = ShapeCase(kind, "float64", shape, axes)
    ctx = context(case)
    for m in [(0,) * len(shape), tuple(n - 1 for n in shape)]:
        x = np.zeros(shape, dtype=np.complex128)
        x[m] = 1
        assert np.allclose(impulse_response(ctx, m), mp_dftn(x, case.axes_normalised), atol=1e-14)


def test_shift_theorem_per_axis_against_the_definition():
    """Circular shift by m_j along each axis multiplies the DFT by prod_j exp(-2 pi i k_j m_j / N_j)."""
    case = ShapeCase("fftn", "float64", (3, 4, 2), (0, 1))
    rng = np.random.default_rng(0)
    x = rng.standard_normal(case.shape) + 1j * rng.standard_normal(case.shape)
    m = (2, 3)
    lhs = mp_dftn(np.roll(x, m, axis=(0, 1)), (0, 1))
    rhs = axis_phase(case, -1, m, np.dtype(np.complex128), case.shape) * mp_dftn(x, (0, 1))
    assert np.allclose(lhs, rhs, atol=1e-13)


def test_convolution_theorem_against_the_definition():
    """DFT(x (*) h) over the axes = DFT(x) DFT(h) for the circular convolution (Oppenheim & Schafer)."""
    rng = np.random.default_rng(1)
    x = rng.integers(-3, 4, (3, 4)).astype(complex)
    h = rng.integers(-3, 4, (3, 4)).astype(complex)
    z = np.zeros((3, 4), dtype=complex)
    for d in itertools.product(range(3), range(4)):
        z += h[d] * np.roll(x, d, axis=(0, 1))
    assert np.allclose(mp_dftn(z, (0, 1)), mp_dftn(x, (0, 1)) * mp_dftn(h, (0, 1)), atol=1e-11)


def test_hermitian_extension_and_clean_half_give_a_real_signal():
    """A consistent half spectrum extends to a Hermitian full one: its inverse DFT is real (definition)."""
    case = ShapeCase("irfftn", "float64", (4, 6), (0, 1))
    rng = np.random.default_rng(2)
    half = clean_half(rng.standard_normal(case.input_shape) + 1j * rng.standard_normal(case.input_shape), case)
    full = hermitian_full_nd(half, case)
    assert np.allclose(reverse_axes(full, (0, 1)), np.conj(full))
    signal = mp_dftn(full, (0, 1), sign=1)
    assert np.max(np.abs(signal.imag)) < 1e-12 * np.max(np.abs(signal))


# -- a right FFT passes every check -------------------------------------------------------------------

@pytest.mark.parametrize("case", [
    ShapeCase("fftn", "float64", (8, 6), (0, 1)), ShapeCase("rfftn", "float32", (6, 5, 4), (0, 1, 2)),
    ShapeCase("irfftn", "float64", (6, 8), (0, 1)), ShapeCase("fft", "float64", (10, 16), (0,)),
    ShapeCase("irfft", "float32", (4, 9, 3), (1,)), ShapeCase("rfftn", "float64", (16, 12, 10), (2, 0)),
    ShapeCase("ifftn", "float64", (5, 6, 7), (0, 1, 2), "F"), ShapeCase("rfft", "float64", (7, 12), (-1,), "strided"),
    ShapeCase("ifft", "float32", (6, 10), (0,), "reversed", "ortho"),
    ShapeCase("rfftn", "longdouble", (6, 8), (0, 1), "F", "ortho"), ShapeCase("ifft", "longdouble", (9, 8), (0,), "C", "forward"),
], ids=lambda c: c.label())
def test_numpy_passes_every_shaped_check(case):
    rows = check_shaped_case(NumpyBackend(), case, seed=5)
    assert [r.check for r in rows] == list(SHAPED_CHECKS)
    bad = [(r.check, r.status, r.message) for r in rows if r.status not in ("pass", "skip")]
    assert not bad
    for r in rows:
        assert (r.shape, r.axes, r.layout, r.n) == (list(case.shape), list(case.axes), case.layout, case.points)
        assert r.as_dict()["batch"] == case.batch


def test_skips_say_why():
    rows = rows_by_check(NumpyBackend(), ShapeCase("fftn", "float64", (8, 8), (0, 1)))
    assert rows["batch-independence"].status == "skip" and "not a batch" in rows["batch-independence"].message
    rows = rows_by_check(NumpyBackend(), ShapeCase("fft", "float64", (8, 8), (1,)))
    assert rows["separability"].status == "skip"
    rows = rows_by_check(bugs.OneDOnly(), ShapeCase("fft", "float64", (8, 8), (1,)))
    assert {r.status for r in rows.values()} == {"skip"}
    assert "claims no batched or N-D kinds" in rows["accuracy"].message


# -- each broken FFT is caught by the right check, with the right code ----------------------------------

def assert_fails(rows, check, code):
    row = rows[check]
    assert (row.status, row.diagnosis) == ("fail", code), (check, row.status, row.diagnosis, row.message)
    return row


def test_wrong_axis():
    rows = rows_by_check(bugs.WrongAxis(), ShapeCase("fft", "float64", (12, 20), (0,)))
    row = assert_fails(rows, "accuracy", "wrong-axis")
    assert "along axis 1 where axis 0 was asked" in row.message
    assert_fails(rows, "axis-handling", "wrong-axis")
    assert_fails(rows, "batch-independence", "wrong-axis")
    # along the last axis it is right, and every check says so
    rows = rows_by_check(bugs.WrongAxis(), ShapeCase("fft", "float64", (12, 20), (-1,)))
    assert rows["accuracy"].status == "pass"
    assert_fails(rows, "axis-handling", "wrong-axis")  # the axis-0 transform alone is wrong


def test_transposed_square_and_non_square():
    rows = rows_by_check(bugs.Transposed(), ShapeCase("fftn", "float64", (16, 16), (0, 1)))
    assert_fails(rows, "accuracy", "transposed")
    rows = rows_by_check(bugs.Transposed(), ShapeCase("fftn", "float64", (12, 20), (0, 1)))
    row = assert_fails(rows, "shape", "transposed")
    assert "(20, 12) where (12, 20) is due" in row.message
    assert_fails(rows, "accuracy", "transposed")


def test_batch_leak():
    rows = rows_by_check(bugs.Leaky(), ShapeCase("fft", "float64", (32, 64), (-1,)))
    row = assert_fails(rows, "batch-independence", "batch-leak")
    assert "changed the output of 1 other row" in row.message
    assert_fails(rows, "accuracy", "batch-leak")
    rows = rows_by_check(bugs.Leaky(), ShapeCase("rfftn", "float32", (6, 8, 10), (1, 2)))
    assert_fails(rows, "batch-independence", "batch-leak")


def test_fortran_order_bug():
    rows = rows_by_check(bugs.FortranBug(), ShapeCase("fftn", "float64", (12, 20), (0, 1)))
    assert rows["accuracy"].status == "pass"  # right for C input
    row = assert_fails(rows, "layout", "layout")
    assert "wrong for the same values laid out F" in row.message
    rows = rows_by_check(bugs.FortranBug(), ShapeCase("fftn", "float64", (12, 20), (0, 1), "F"))
    assert_fails(rows, "accuracy", "layout")
    assert_fails(rows, "layout", "layout")
    rows = rows_by_check(bugs.FortranBug(), ShapeCase("fftn", "float64", (12, 20), (0, 1), "strided"))
    assert rows["accuracy"].status == "pass"  # only Fortran order is wrong


@pytest.mark.parametrize("case", [ShapeCase("irfftn", "float64", (6, 8), (0, 1)),
                                  ShapeCase("irfftn", "float32", (5, 6, 7), (0, 1, 2))], ids=lambda c: c.label())
def test_real_inverse_that_drops_the_hermitian_half(case):
    rows = rows_by_check(bugs.HalfDropped(), case)
    assert_fails(rows, "accuracy", "hermitian-half")
    assert_fails(rows, "separability", "hermitian-half")


def test_missing_scale_names_the_factor():
    rows = rows_by_check(bugs.MissingScale(), ShapeCase("ifftn", "float64", (8, 6), (0, 1)))
    row = assert_fails(rows, "accuracy", "scale")
    assert "N times too large" in row.message
    assert_fails(rows, "round-trip", "scale")


def test_wrong_shape_is_a_fail_never_a_crash():
    rows = rows_by_check(bugs.DropsRow(), ShapeCase("rfftn", "float64", (9, 8), (0, 1)))
    row = assert_fails(rows, "shape", "shape")
    assert "(8, 5) where (9, 5) is due" in row.message
    assert all(r.status == "fail" for name, r in rows.items() if name not in ("batch-independence", "input-intact"))


def test_single_precision_inside_a_double_transform():
    rows = rows_by_check(bugs.LowPrecision(), ShapeCase("fftn", "float64", (16, 12), (0, 1)))
    row = assert_fails(rows, "accuracy", "precision")
    assert "float32" in row.message


def test_separability_line_by_line_without_batched_kinds():
    """Without batched one-axis kinds the successive transforms are the backend's 1-D ones, line by line."""
    rows = rows_by_check(bugs.ManyAxesOnly(), ShapeCase("rfftn", "float64", (6, 10), (0, 1)))
    assert rows["separability"].status == "pass" and "(1-D)" in rows["separability"].message
    assert "not claimed" in rows["axis-handling"].message


def test_separability_names_the_wrong_pass():
    """An N-D transform that is right while its batched one-axis passes leak: separability names the pass."""
    rows = rows_by_check(bugs.Leaky(), ShapeCase("fftn", "float64", (4, 4), (0, 1)))
    assert rows["accuracy"].status == "pass"
    row = assert_fails(rows, "separability", "batch-leak")
    assert "its fft along axis 1 is wrong" in row.message
