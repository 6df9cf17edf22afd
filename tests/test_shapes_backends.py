"""Every backend's shaped transforms against the shaped ground truth, in every layout.

Ground truth: fftgauge.harness.shapes.reference (scipy.fft on clongdouble / double-double
axis by axis), itself checked against a direct N-D DFT in mpmath (tests/test_shapes_reference.py).
Limit: fftgauge.harness.shapes.bounds.shaped_limit (Higham 2002, section 24.1, per axis).
Shapes: small, with negative axes (-1, -3), a permuted order (2, 0: the real kinds halve axis
0), batches along the first, a middle and the last axis, lengths 1, odd and prime.
"""

from __future__ import annotations

import numpy as np
import pytest

from fftgauge.backends.registry import load_backend
from fftgauge.harness.shapes.bounds import shaped_limit
from fftgauge.harness.shapes.case import LAYOUTS, MANY_AXIS_KINDS, ONE_AXIS_KINDS, ShapeCase, lay_out
from fftgauge.harness.shapes.reference import shaped_reference
from shaped_signals import shaped_signal

MANY = [((6, 8), (0, 1)), ((5, 4, 6), (2, 0)), ((3, 4, 5), (-1, -3)), ((7, 5), (1, 0)), ((1, 9), (0, 1)),
        ((3, 4, 5), (0, 1, 2))]
ONE = [((4, 6), (-1,)), ((6, 4), (0,)), ((3, 7, 5), (1,)), ((2, 3, 8), (-3,)), ((6, 1), (0,)), ((9,), (0,))]

#: (SPEC, the module it needs). Library backends are skipped where the library is missing.
BACKENDS = [("numpy", None), ("scipy", None), ("scipy[workers=2]", None), ("pyfftw", "pyfftw"),
            ("pyfftw[aligned=false]", "pyfftw"), ("mkl_fft", "mkl_fft"), ("mkl_fft[threads=2]", "mkl_fft"),
            ("ducc0", "ducc0"), ("ducc0[nthreads=2]", "ducc0"), ("array-api[namespace=numpy]", None),
            ("array-api[namespace=array_api_strict]", "array_api_strict")]


def _backend(spec: str, module: str | None):
    if module is not None:
        pytest.importorskip(module)
    return load_backend(spec)


def _check(backend, case: ShapeCase, seed: int = 0) -> float:
    """Return error / limit of the backend's transform of a seeded input laid out as the case says."""
    x = lay_out(shaped_signal(case, seed), case.layout)
    kept = x.copy()
    plan = backend.plan_shaped(case)
    prepared = plan.prepare(x)
    y = np.array(plan.execute(prepared))
    again = np.array(plan.execute(prepared))  # a second run on the prepared input: the same answer
    direct = np.array(plan.execute(x))  # an unprepared array of the case's layout
    plan.close()
    assert np.array_equal(x, kept), f"{case.label()}: the caller's input changed"
    assert y.shape == case.output_shape, (case.label(), y.shape)
    assert y.dtype == case.output_dtype, (case.label(), y.dtype)
    ref = shaped_reference(kept, case)
    if backend.capabilities().bitwise_reproducible:
        assert np.array_equal(y, again) and np.array_equal(y, direct), case.label()
    else:  # MKL promises no bitwise repeatability: each run is judged by the limit
        assert max(ref.relative_error(again), ref.relative_error(direct)) <= shaped_limit(case), case.label()
    return ref.relative_error(y) / shaped_limit(case)


@pytest.mark.parametrize("spec,module", BACKENDS)
@pytest.mark.parametrize("kind", ONE_AXIS_KINDS + MANY_AXIS_KINDS)
def test_shaped_transforms_match_the_ground_truth(spec, module, kind):
    backend = _backend(spec, module)
    assert kind in backend.capabilities().shaped_kinds
    worst = 0.0
    for shape, axes in (MANY if kind in MANY_AXIS_KINDS else ONE):
        for dtype in ("float32", "float64"):
            for layout in LAYOUTS:
                case = ShapeCase(kind, dtype, shape, axes, layout)
                assert backend.shaped_unsupported_reason(case) is None
                ratio = _check(backend, case)
                assert ratio <= 1.0, f"{spec} {case.label()}: error/limit = {ratio:.3g}"
                worst = max(worst, ratio)
        for norm in ("ortho", "forward"):
            case = ShapeCase(kind, "float64", shape, axes, "C", norm)
            assert _check(backend, case) <= 1.0, f"{spec} {case.label()}"
    assert worst > 0.0  # the errors were really measured


@pytest.mark.parametrize("spec,module", [("numpy", None), ("scipy", None), ("ducc0", "ducc0"), ("pyfftw", "pyfftw")])
def test_long_double_shaped_transforms(spec, module):
    """numpy, scipy, ducc0 and pyFFTW in long double, against the double-double ground truth (line by line)."""
    backend = _backend(spec, module)
    if "longdouble" not in backend.capabilities().dtypes:
        pytest.skip(f"{spec} has no long double here")
    for kind, shape, axes in (("fftn", (4, 6), (0, 1)), ("irfftn", (5, 4, 6), (2, 0)), ("rfft", (3, 8), (0,)),
                              ("ifft", (4, 5), (-1,))):
        case = ShapeCase(kind, "longdouble", shape, axes, "F")
        assert _check(backend, case) <= 1.0, f"{spec} {case.label()}"


def test_a_wrong_axis_is_far_above_the_limit():
    """Detection: numpy's fft along the wrong axis of a batch is judged wrong by the same limit."""
    case = ShapeCase("fft", "float64", (6, 8), (0,))
    x = shaped_signal(case)
    ref = shaped_reference(x, case)
    wrong = np.fft.fft(x, axis=1)
    assert ref.relative_error(wrong) / shaped_limit(case) > 1e10


POW2_MANY = [((4, 8), (0, 1)), ((2, 4, 8), (2, 0)), ((4, 2, 4), (-1, -3)), ((1, 8), (0, 1))]
POW2_ONE = [((4, 8), (-1,)), ((8, 4), (0,)), ((3, 8, 5), (1,)), ((1, 6), (0,))]


@pytest.mark.parametrize("spec", ["direct", "radix2-dit", "radix2-dif"])
@pytest.mark.parametrize("kind", ONE_AXIS_KINDS + MANY_AXIS_KINDS)
def test_reference_backends_axis_by_axis(spec, kind):
    """The direct DFT and the pure-Python radix-2 FFTs, line by line along each axis."""
    backend = load_backend(spec)
    shapes = (MANY + POW2_MANY if kind in MANY_AXIS_KINDS else ONE + POW2_ONE) if spec == "direct" else \
        (POW2_MANY if kind in MANY_AXIS_KINDS else POW2_ONE)
    for shape, axes in shapes:
        for dtype in ("float32", "float64"):
            for layout in ("C", "reversed"):
                case = ShapeCase(kind, dtype, shape, axes, layout)
                assert backend.shaped_unsupported_reason(case) is None
                assert _check(backend, case) <= 1.0, f"{spec} {case.label()}"
        case = ShapeCase(kind, "float64", shape, axes, "F", "ortho")
        assert _check(backend, case) <= 1.0, f"{spec} {case.label()}"


def test_reference_backends_claim_small_shapes_only():
    radix2 = load_backend("radix2-dit")
    assert "along axis 1" in radix2.shaped_unsupported_reason(ShapeCase("fftn", "float64", (8, 12), (0, 1)))
    assert "at most 4096 points" in radix2.shaped_unsupported_reason(ShapeCase("fftn", "float64", (128, 64), (0, 1)))
    direct = load_backend("direct")
    assert direct.shaped_unsupported_reason(ShapeCase("rfftn", "float64", (256, 256), (0, 1))) is None
    assert "points" in direct.shaped_unsupported_reason(ShapeCase("rfftn", "float64", (512, 256), (0, 1)))


USER_CODE = '''
import numpy as np

def whole_fftn(x, axes):
    return np.fft.fftn(x, axes=axes)

def whole_ifftn(x, axes):
    return np.fft.ifftn(x, axes=axes)

def whole_rfftn(x, axes):
    return np.fft.rfftn(x, axes=axes)

def whole_irfftn(x, axes, s):
    return np.fft.irfftn(x, s=s, axes=axes)

def transposed_fftn(x, axes):
    return np.fft.fftn(x, axes=axes).T

def one_d_fft(x):
    return np.fft.fft(x)
'''


@pytest.fixture()
def user_file(tmp_path):
    path = tmp_path / "camera_fft.py"
    path.write_text(USER_CODE)
    return path


@pytest.mark.parametrize("pair,kinds", [("whole_fftn+whole_ifftn[kind=fftn]", ("fft", "ifft", "fftn", "ifftn")),
                                        ("whole_rfftn+whole_irfftn[kind=rfftn]", ("rfft", "irfft", "rfftn", "irfftn")),
                                        ("whole_irfftn[kind=irfftn]", ("irfft", "irfftn"))])
def test_user_array_functions_are_called_with_the_axes(user_file, pair, kinds, monkeypatch):
    """kind=fftn...: f(x, axes) (f(X, axes, s) for irfftn) serves shaped and 1-D cases of its family."""
    monkeypatch.syspath_prepend(str(user_file.parent))
    for spec in (f"{user_file}:{pair}", f"camera_fft:{pair}"):  # a file SPEC and a module SPEC
        backend = load_backend(spec)
        caps = backend.capabilities()
        assert set(caps.shaped_kinds) == set(kinds)
        assert set(caps.kinds) == {k for k in kinds if k in ONE_AXIS_KINDS}
        for kind in caps.shaped_kinds:
            shapes = MANY if kind in MANY_AXIS_KINDS else ONE
            for shape, axes in shapes:
                for layout in ("C", "F", "strided"):
                    case = ShapeCase(kind, "float64", shape, axes, layout)
                    assert backend.shaped_unsupported_reason(case) is None
                    assert _check(backend, case) <= 1.0, f"{spec} {case.label()}"
            assert "norm=ortho" in backend.shaped_unsupported_reason(ShapeCase(kind, "float64", (4, 4), (0, 1)
                                                                                if kind in MANY_AXIS_KINDS else (0,),
                                                                                norm="ortho"))
        from fftgauge.harness.cases import Case
        from fftgauge.harness.battery.reference import reference_transform
        for kind in caps.kinds:  # the 1-D battery's cases, through axes = (0,)
            case = Case(kind, "float64", 12)
            x = np.random.default_rng(3).standard_normal(case.input_length) + (0 if kind == "rfft" else 0.5j)
            x = x.astype(case.input_dtype)
            plan = backend.plan(case)
            assert reference_transform(x, case).relative_error(plan.execute(plan.prepare(x))) < 1e-14


def test_a_wrong_shape_from_a_user_function_is_passed_on(user_file):
    """The plan does not judge: a transposed output comes back transposed (the checks' `shape` row)."""
    backend = load_backend(f"{user_file}:transposed_fftn[kind=fftn]")
    case = ShapeCase("fftn", "float64", (4, 6), (0, 1))
    plan = backend.plan_shaped(case)
    x = np.ones(case.input_shape, complex)
    assert plan.execute(plan.prepare(x)).shape == (6, 4)


def test_a_one_d_user_function_claims_no_shapes(user_file):
    backend = load_backend(f"{user_file}:one_d_fft")
    assert backend.capabilities().shaped_kinds == ()
    assert "1-D array only" in backend.shaped_unsupported_reason(ShapeCase("fft", "float64", (4, 6), (0,)))


@pytest.mark.parametrize("layout", ["C", "F"])
def test_pyfftw_shaped_buffers_share_the_one_d_alignment_rule(layout):
    """The shaped plans take their buffers and flags from backends/pyfftw_buffers.py as the 1-D
    plans do: aligned=false gives a C input buffer off the SIMD alignment, planned
    FFTW_UNALIGNED, and every input buffer lies in the case's layout; an irfftn plan (FFTW_DESTROY_INPUT) gives the same
    answer run after run on its prepared input. Source of the answer: the shaped ground truth."""
    pyfftw = pytest.importorskip("pyfftw")
    case = ShapeCase("irfftn", "float64", (6, 8), (0, 1), layout)
    x = lay_out(shaped_signal(case, 2), case.layout)
    for spec, aligned in (("pyfftw", True), ("pyfftw[aligned=false]", False)):
        plan = load_backend(spec).plan_shaped(case)
        prepared = plan.prepare(x)
        assert prepared.flags.f_contiguous == (layout == "F") and prepared.shape == x.shape
        if layout == "C":  # other layouts are numpy's copies of the buffer (lay_out): their alignment is numpy's
            assert pyfftw.is_byte_aligned(prepared, n=pyfftw.simd_alignment) == aligned
        assert ("FFTW_UNALIGNED" in plan.fftw.flags) == (not aligned) and "FFTW_DESTROY_INPUT" in plan.fftw.flags
        first = np.array(plan.execute(prepared))
        assert np.array_equal(np.array(plan.execute(prepared)), first)
        assert shaped_reference(x, case).relative_error(first) <= shaped_limit(case)
        plan.close()
