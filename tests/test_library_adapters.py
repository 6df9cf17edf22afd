"""The library adapters (mkl_fft, ducc0, array-api, scipy-backend) against an outside truth.

Ground truth: mpmath (arbitrary precision), direct DFT at 50 digits (tests/mpmath_dft.py),
on a few sizes (1, 2, prime, power of two, odd and even composites), every kind, norm and
precision each adapter claims up to float64 (the helper reads outputs through Python's
complex, a double; long double is covered for the built-ins by
tests/test_library_backends.py, parametrised over BUILTINS, which converts exactly). Tolerance: relative 2-norm error within
``4 * eps * max(1, log2 N)`` (the constant of tests/test_library_backends.py, from Higham's
bound for radix-2 FFTs). An adapter whose library is not installed is skipped.
"""

from __future__ import annotations

import math
import threading
from pathlib import Path

import numpy as np
import pytest

from fftgauge.backends.registry import load_backend
from fftgauge.harness.cases import KINDS, NORMS, Case
from fftgauge.harness.errors import UsageError
from mpmath_dft import relative_error_vs_mpmath

SIZES = (1, 2, 7, 12, 16, 25)
TOLERANCE_EPS_PER_STAGE = 4.0


def tolerance(case: Case) -> float:
    """Return the relative error allowed for ``case``: 4 eps log2 N (at least 4 eps)."""
    eps = float(np.finfo(case.real_dtype).eps)
    return TOLERANCE_EPS_PER_STAGE * eps * max(1.0, math.log2(case.n))


def assert_matches_mpmath(spec: str) -> None:
    """Check every claimed kind, precision and norm of ``spec`` on :data:`SIZES` against mpmath."""
    backend = load_backend(spec)
    caps = backend.capabilities()
    checked = 0
    for kind in caps.kinds:
        for dtype in (d for d in caps.dtypes if d != "longdouble"):
            for norm in caps.norms:
                for n in SIZES:
                    case = Case(kind, dtype, n, norm)
                    err = relative_error_vs_mpmath(backend, case)
                    assert err <= tolerance(case), f"{spec} {case}: error {err:.3g} above {tolerance(case):.3g}"
                    checked += 1
    assert checked >= len(SIZES) * 4 * 3


# -- mkl_fft --------------------------------------------------------------------------------

@pytest.mark.parametrize("spec", ["mkl_fft", "mkl_fft[threads=2]"])
def test_mkl_fft_matches_mpmath(spec):
    pytest.importorskip("mkl_fft")
    pytest.importorskip("mkl")
    assert_matches_mpmath(spec)


def test_mkl_fft_claims():
    """MKL has no long-double FFT, and its results depend bitwise on its thread count."""
    pytest.importorskip("mkl_fft")
    caps = load_backend("mkl_fft").capabilities()
    assert caps.dtypes == ("float32", "float64")
    assert caps.bitwise_reproducible is False
    assert caps.thread_option == "threads"


def test_mkl_fft_thread_count_is_set_in_each_calling_thread():
    """The thread count is MKL's thread-local setting: a plan run from a new thread sets it there."""
    mkl = pytest.importorskip("mkl")
    backend = load_backend("mkl_fft[threads=2]")
    plan = backend.plan(Case("fft", "float64", 64))
    seen = []

    def call():
        mkl.set_num_threads_local(1)
        plan.execute(np.ones(64, dtype=np.complex128))
        seen.append(mkl.get_max_threads())

    t = threading.Thread(target=call)
    t.start()
    t.join()
    # get_max_threads reports the calling thread's setting: the plan set 2 after the thread set 1.
    assert seen == [2]


# -- ducc0 ----------------------------------------------------------------------------------

@pytest.mark.parametrize("spec", ["ducc0", "ducc0[nthreads=2]", "ducc0[in_place=true]"])
def test_ducc0_matches_mpmath(spec):
    pytest.importorskip("ducc0")
    assert_matches_mpmath(spec)


def test_ducc0_claims_long_double_and_in_place_when_asked():
    pytest.importorskip("ducc0")
    assert "longdouble" in load_backend("ducc0").capabilities().dtypes
    assert load_backend("ducc0").capabilities().in_place is False
    assert load_backend("ducc0[in_place=true]").capabilities().in_place is True


@pytest.mark.parametrize("in_place", [False, True])
def test_ducc0_in_place_option_writes_over_the_input_only_when_asked(in_place):
    """Out of place the caller's array is left alone; in place the output is the input array."""
    pytest.importorskip("ducc0")
    backend = load_backend(f"ducc0[in_place={str(in_place).lower()}]")
    plan = backend.plan(Case("fft", "float64", 16))
    x = np.arange(16, dtype=np.complex128)
    before = x.copy()
    y = plan.execute(x)
    np.testing.assert_allclose(y, np.fft.fft(before), rtol=0, atol=1e-12 * 16 * 16)
    assert np.shares_memory(x, y) is in_place
    assert np.array_equal(x, before) is (not in_place)


def test_missing_library_is_unavailable_with_the_install_hint(monkeypatch):
    """A library that does not import gives one UsageError naming the extra to install."""
    import builtins
    import sys

    real_import = builtins.__import__

    def no_ducc0(name, *args, **kwargs):
        if name == "ducc0" or name.startswith("ducc0."):
            raise ImportError("No module named 'ducc0'")
        return real_import(name, *args, **kwargs)

    monkeypatch.delitem(sys.modules, "fftgauge.backends.ducc0_fft", raising=False)
    monkeypatch.setattr(builtins, "__import__", no_ducc0)
    with pytest.raises(UsageError, match=r"not available.*pip install 'fftgauge\[ducc0\]'"):
        load_backend("ducc0")


def test_every_kind_and_norm_is_claimed_by_both_libraries():
    """Both libraries compute all four kinds under all three norms (their documentation)."""
    for module, spec in (("mkl_fft", "mkl_fft"), ("ducc0", "ducc0")):
        try:
            __import__(module)
        except ImportError:
            continue
        caps = load_backend(spec).capabilities()
        assert caps.kinds == KINDS and caps.norms == NORMS


# -- array-api[namespace=...] ---------------------------------------------------------------

DATA = Path(__file__).parent / "data"
UA_FILE = DATA / "numpy_scipy_backend.py"


@pytest.mark.parametrize("namespace", ["numpy", "array_api_strict"])
def test_array_api_namespace_matches_mpmath(namespace):
    pytest.importorskip(namespace)
    assert_matches_mpmath(f"array-api[namespace={namespace}]")


def test_array_api_claims_come_from_the_namespace():
    """numpy 2's namespace has the four kinds in float32 and float64 (the standard's dtypes)."""
    backend = load_backend("array-api[namespace=numpy]")
    caps = backend.capabilities()
    assert caps.kinds == KINDS and caps.dtypes == ("float32", "float64")
    assert backend.label == "array-api[namespace=numpy]"
    assert backend.describe().as_dict()["namespace"] == "numpy"


def test_array_api_strict_outputs_are_numpy_arrays():
    pytest.importorskip("array_api_strict")
    backend = load_backend("array-api[namespace=array_api_strict]")
    plan = backend.plan(Case("rfft", "float64", 8))
    prepared = plan.prepare(np.arange(8.0))
    assert type(prepared) is not np.ndarray          # the namespace's own array
    y = plan.execute(prepared)
    assert isinstance(y, np.ndarray)
    np.testing.assert_allclose(y, np.fft.rfft(np.arange(8.0)), atol=1e-12)


@pytest.mark.parametrize("namespace, match", [("nosuch_namespace_module", "no module named"),
                                              ("math", "not an array API namespace")])
def test_array_api_bad_namespace_is_a_usage_error(namespace, match):
    with pytest.raises(UsageError, match=match):
        load_backend(f"array-api[namespace={namespace}]")


# -- scipy-backend[object=...] --------------------------------------------------------------

def test_scipy_backend_object_matches_mpmath():
    assert_matches_mpmath(f"scipy-backend[object={UA_FILE}:forwarding]")


def test_scipy_backend_object_is_called_through_ua_function():
    """The adapter calls the object's __ua_function__ itself (its call counter moves)."""
    backend = load_backend(f"scipy-backend[object={UA_FILE}:forwarding]")
    plan = backend.plan(Case("fft", "float64", 16))
    before = backend.backend_object.calls
    plan.execute(np.ones(16, dtype=np.complex128))
    assert backend.backend_object.calls == before + 1


def test_scipy_backend_object_claims_what_it_answers():
    """A backend answering only fft and ifft claims only those; its rfft is a skip reason."""
    backend = load_backend(f"scipy-backend[object={UA_FILE}:complex_only]")
    assert backend.capabilities().kinds == ("fft", "ifft")
    assert "does not compute rfft" in backend.unsupported_reason(Case("rfft", "float64", 8))


def test_a_library_scipy_interface_module_is_a_backend_object():
    pytest.importorskip("mkl_fft")
    pytest.importorskip("mkl")
    backend = load_backend("scipy-backend[object=mkl_fft.interfaces.scipy_fft]")
    assert backend.capabilities().kinds == KINDS
    assert_matches_mpmath("scipy-backend[object=mkl_fft.interfaces.scipy_fft]")


@pytest.mark.parametrize("target, match", [
    (f"{UA_FILE}:not_a_backend", "is not a scipy.fft backend"),
    (f"{UA_FILE}:no_such_attr", "has no attribute"),
    ("nosuch_backend_module", "no module named"),
])
def test_scipy_backend_bad_object_is_a_usage_error(target, match):
    with pytest.raises(UsageError, match=match):
        load_backend(f"scipy-backend[object={target}]")


def test_scipy_backend_default_object_is_scipys_own_backend():
    """``scipy-backend`` alone is scipy.fft's own backend through the protocol; it matches mpmath."""
    backend = load_backend("scipy-backend")
    assert backend.label == "scipy-backend[object=scipy]"
    assert "longdouble" in backend.capabilities().dtypes
    assert_matches_mpmath("scipy-backend")


# -- jax (CPU; in the test extra: about 8 s more on a fresh venv's install) -----------------

NO_JAX = "jax is not installed: pip install jax (it is in the test extra: pip install -e '.[test]')"


def test_jax_matches_mpmath_in_float32_and_float64():
    pytest.importorskip("jax", reason=NO_JAX)
    assert_matches_mpmath("jax")


def test_jax_compiles_in_plan_once_per_case_and_says_x64():
    """The compile (and warm-up) happens in plan(); a second plan of the case reuses it."""
    pytest.importorskip("jax", reason=NO_JAX)
    backend = load_backend("jax")
    assert "x64 on" in backend.version and "float64" in backend.capabilities().dtypes
    case = Case("rfft", "float64", 32)
    first = backend.plan(case)
    assert len(backend.compiled) == 1
    second = backend.plan(case)
    assert len(backend.compiled) == 1 and first._compiled is second._compiled
    y = second.execute(second.prepare(np.arange(32.0)))
    assert isinstance(y, np.ndarray) and y.dtype == np.complex128
    assert load_backend("jax[x64=false]").capabilities().dtypes == ("float32",)


# -- torch (not in the test extra: skipped unless installed) --------------------------------

@pytest.mark.parametrize("spec", ["torch", "torch[threads=2]"])
def test_torch_matches_mpmath(spec):
    pytest.importorskip("torch")
    assert_matches_mpmath(spec)


def test_torch_threads_option_sets_torchs_thread_count():
    torch = pytest.importorskip("torch")
    load_backend("torch[threads=2]").plan(Case("fft", "float64", 8))
    assert torch.get_num_threads() == 2
    load_backend("torch").plan(Case("fft", "float64", 8))
    assert torch.get_num_threads() == 1
