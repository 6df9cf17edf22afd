"""The built-in backends against an outside ground truth, and pyFFTW's plan mechanics.

Ground truth: mpmath (arbitrary precision), direct DFT at 50 digits, for N = 1..32, every
kind, norm and precision a backend claims. The built-ins are taken from
``fftgauge.backends.registry.BUILTINS``; a backend whose module (or library) is not there yet is
skipped, so the reference implementations are covered as soon as they exist.
"""

from __future__ import annotations

import math
from functools import lru_cache

import mpmath
import numpy as np
import pytest

from fftgauge.backends.registry import BUILTINS, SYNTHETIC_BACKENDS, load_backend
from fftgauge.harness.battery.conventions import backend_convention
from fftgauge.harness.cases import DTYPES, FIXED_DTYPES, KINDS, NORMS, Case

#: The floating-point precisions (fixed-point ones are judged by SQNR, tests/test_fixed_point.py).
FLOAT_DTYPES = tuple(d for d in DTYPES if d not in FIXED_DTYPES)

MP_DIGITS = 50
SIZES = range(1, 33)

#: Tolerance constant c in ``rel_err <= c * eps * max(1, log2 N)``.
#:
#: Worst-case error growth of a Cooley-Tukey FFT is O(eps log N): Gentleman & Sande, "Fast
#: Fourier transforms for fun and profit", AFIPS Fall Joint Computer Conference 1966 (from
#: memory). For the constant, Higham, Accuracy and Stability of Numerical Algorithms, 2nd
#: ed., SIAM 2002, Theorem 24.2 (from memory) bounds the relative 2-norm error of radix-2
#: by about t * eta with t = log2 N and eta = mu + gamma_4 (sqrt(2) + mu), i.e. about
#: 4 sqrt(2) u = 2.8 eps per stage when the twiddles are accurate (mu ~ u). c = 4 rounds
#: that up to cover the final normalisation and the rounding of the output to its dtype.
#: Being from memory, the bound is not trusted blindly: the measured errors are what the
#: test checks, against this tolerance (about 1 eps at most for numpy, scipy and pyFFTW on
#: the development machine, well inside it).
TOLERANCE_EPS_PER_STAGE = 4.0


# -- the mpmath reference -------------------------------------------------------------------

def mp_scale(n: int, norm: str, inverse: bool) -> mpmath.mpf:
    """Return the array API standard's normalisation factor, at MP_DIGITS digits.

    ``backward``: 1/n on the inverse; ``forward``: 1/n on the forward; ``ortho``:
    1/sqrt(n) on both (array API standard, ``fft`` extension; numpy.fft documents the same).
    """
    with mpmath.workdps(MP_DIGITS):
        if norm == "ortho":
            return 1 / mpmath.sqrt(n)
        scaled = inverse if norm == "backward" else not inverse
        return mpmath.mpf(1) / n if scaled else mpmath.mpf(1)


def mp_dft(values: list, sign: int) -> list:
    """Return sum_j values[j] exp(sign 2j pi k j / N) for k = 0..N-1 (direct DFT), in mpmath.

    Source: the DFT's definition; mpmath (arbitrary precision), direct DFT at 50 digits.
    """
    n = len(values)
    with mpmath.workdps(MP_DIGITS):
        twiddles = [mpmath.expjpi(mpmath.mpf(2 * sign * m) / n) for m in range(n)]
        return [mpmath.fsum(values[j] * twiddles[(k * j) % n] for j in range(n)) for k in range(n)]


def hermitian_extension(half: list, n: int) -> list:
    """Return the length-n spectrum whose first n//2+1 entries are ``half`` (conjugate-symmetric).

    The imaginary parts of the DC term, and of the Nyquist term for even n, are dropped, as
    the irfft convention says (numpy.fft.irfft; common practice).
    """
    full = [mpmath.mpc(0)] * n
    for k in range(n // 2 + 1):
        full[k] = mpmath.mpc(half[k])
    full[0] = mpmath.mpc(full[0].real)
    if n % 2 == 0:
        full[n // 2] = mpmath.mpc(full[n // 2].real)
    for k in range(n // 2 + 1, n):
        full[k] = mpmath.conj(full[n - k])
    return full


def mp_transform(kind: str, values: list, n: int) -> list:
    """Return the unscaled ``kind`` transform of ``values`` (length-n signal), in mpmath."""
    if kind == "fft":
        return mp_dft(values, -1)
    if kind == "ifft":
        return mp_dft(values, +1)
    if kind == "rfft":
        return mp_dft(values, -1)[: n // 2 + 1]
    return [v.real for v in mp_dft(hermitian_extension(values, n), +1)]


def to_mp(value) -> mpmath.mpf | mpmath.mpc:
    """Return a numpy scalar as an mpmath number, exactly (through its integer ratio)."""
    def exact(v):
        p, q = v.as_integer_ratio()
        return mpmath.mpf(p) / q

    if np.iscomplexobj(value):
        return mpmath.mpc(exact(value.real), exact(value.imag))
    return exact(value)


@lru_cache(maxsize=None)
def reference_input(kind: str, n: int) -> np.ndarray:
    """Return a fixed random input for (kind, n), exactly representable in float32.

    Being float32 values, the same numbers are the input in every precision.
    """
    rng = np.random.default_rng(1000 * KINDS.index(kind) + n)
    length = Case(kind, "float64", n).input_length
    re = rng.standard_normal(length).astype(np.float32).astype(np.float64)
    if kind == "rfft":
        return re
    im = rng.standard_normal(length).astype(np.float32).astype(np.float64)
    return re + 1j * im


@lru_cache(maxsize=None)
def unscaled_reference(kind: str, n: int) -> tuple:
    """Return the mpmath transform (no normalisation) of :func:`reference_input`."""
    with mpmath.workdps(MP_DIGITS):
        values = [to_mp(v) for v in reference_input(kind, n)]
        return tuple(mp_transform(kind, values, n))


def mp_reference(kind: str, n: int, norm: str) -> list:
    """Return the exact (50-digit) output of case (kind, n, norm) for :func:`reference_input`."""
    with mpmath.workdps(MP_DIGITS):
        scale = mp_scale(n, norm, kind in ("ifft", "irfft"))
        return [scale * v for v in unscaled_reference(kind, n)]


def relative_error(output: np.ndarray, reference: list) -> float:
    """Return norm2(output - reference) / norm2(reference), computed in mpmath."""
    with mpmath.workdps(MP_DIGITS):
        err2 = mpmath.fsum(abs(to_mp(o) - r) ** 2 for o, r in zip(output, reference))
        ref2 = mpmath.fsum(abs(r) ** 2 for r in reference)
        return float(mpmath.sqrt(err2 / ref2))


def tolerance(dtype: str, n: int) -> float:
    """Return c * eps(dtype) * max(1, log2 n); see TOLERANCE_EPS_PER_STAGE for the source."""
    eps = float(np.finfo(Case("fft", dtype, 1).real_dtype).eps)
    return TOLERANCE_EPS_PER_STAGE * eps * max(1.0, math.log2(n))


def load_builtin(name: str):
    """Return the built-in backend ``name``, skipping when its module or library is missing."""
    pytest.importorskip(BUILTINS[name][0])
    return load_backend(name)


# -- every built-in against mpmath -------------------------------------------------------------

#: Calibration backends, not FFTs, left out of the mpmath comparison: null and busywait
#: compute no transform, and slowed returns numpy's result after a calibration of every plan
#: (about 20 ms, 12 kind x dtype cases x 3 norms x 32 sizes: minutes for numpy's numbers
#: again); test_slowed_returns_the_base_backends_result covers it cheaply.
CALIBRATION_BACKENDS = tuple(SYNTHETIC_BACKENDS) + ("slowed",)


@pytest.mark.parametrize("dtype", FLOAT_DTYPES)
@pytest.mark.parametrize("kind", KINDS)
@pytest.mark.parametrize("name", [b for b in BUILTINS if b not in CALIBRATION_BACKENDS])
def test_builtin_matches_mpmath_direct_dft(name, kind, dtype):
    """Every claimed (norm, N <= 32) agrees with mpmath (arbitrary precision), direct DFT at 50 digits."""
    backend = load_builtin(name)
    failures, tested = [], 0
    convention = backend_convention(backend)
    for norm in NORMS:
        for n in SIZES:
            case = Case(kind, dtype, n, norm)
            if backend.unsupported_reason(case) is not None:
                continue
            tested += 1
            x = reference_input(kind, n).astype(case.input_dtype)
            # a library's own convention (CMSIS-DSP's packed real spectrum) declared in its
            # capabilities is undone as the battery undoes it
            out = convention.from_backend(np.asarray(backend.plan(case).execute(convention.to_backend(x, case))), case)
            if out.shape != (case.output_length,) or out.dtype != case.output_dtype:
                failures.append(f"{case.label()}: got {out.dtype}{out.shape}")
                continue
            error = relative_error(out, mp_reference(kind, n, norm))
            if not error <= tolerance(dtype, n):
                failures.append(f"{case.label()}: relative error {error:.3g} > {tolerance(dtype, n):.3g}")
    if tested == 0:
        pytest.skip(backend.unsupported_reason(Case(kind, dtype, 1)) or f"{name} claims no size <= 32")
    assert not failures, f"{name}: {len(failures)} of {tested} cases off: " + "; ".join(
        failures[:5])


@pytest.mark.parametrize("kind", KINDS)
def test_slowed_returns_the_base_backends_result(kind):
    """slowed[percent=5] (base numpy) returns numpy.fft's output unchanged, bit for bit, at
    a power of two and a prime; numpy itself is checked against mpmath above."""
    slowed, numpy_backend = load_backend("slowed[percent=5]"), load_backend("numpy")
    for n in (16, 17):
        case = Case(kind, "float64", n)
        x = reference_input(kind, n).astype(case.input_dtype)
        plan = slowed.plan(case)
        got = np.asarray(plan.execute(plan.prepare(x.copy())))
        expected = np.asarray(numpy_backend.plan(case).execute(x.copy()))
        assert got.dtype == expected.dtype and np.array_equal(got, expected), (kind, n)


def test_mpmath_reference_matches_closed_forms():
    """The helper itself: delta[n-m] -> exp(-2j pi k m / N) and constant 1 -> N delta[k]
    (Oppenheim & Schafer, 3rd ed., ch. 8, from memory; verified here at 50 digits)."""
    n, m = 12, 5
    with mpmath.workdps(MP_DIGITS):
        delta = [mpmath.mpf(1 if j == m else 0) for j in range(n)]
        for k, v in enumerate(mp_dft(delta, -1)):
            assert abs(v - mpmath.expjpi(mpmath.mpf(-2 * k * m) / n)) < mpmath.mpf(10) ** -45
        ones = mp_dft([mpmath.mpf(1)] * n, -1)
        assert abs(ones[0] - n) < mpmath.mpf(10) ** -45
        assert max(abs(v) for v in ones[1:]) < mpmath.mpf(10) ** -45
        # irfft of rfft returns the signal (real x -> X[N-k] = conj(X[k]), Oppenheim & Schafer Table 8.2)
        x = [mpmath.mpf(v) for v in (0.5, -1.25, 2.0, 3.5, -0.75, 1.0, 0.25)]
        back = mp_transform("irfft", mp_transform("rfft", x, 7), 7)
        assert max(abs(b / 7 - a) for a, b in zip(x, back)) < mpmath.mpf(10) ** -45


def test_tolerance_rejects_a_single_precision_result():
    """The check can fail: a float64 fft computed in float32 is far outside the float64 tolerance,
    while numpy's own float64 result is inside it."""
    kind, n = "fft", 32
    x = reference_input(kind, n)
    reference = mp_reference(kind, n, "backward")
    low = np.fft.fft(x.astype(np.complex64)).astype(np.complex128)
    assert relative_error(low, reference) > 100 * tolerance("float64", n)
    assert relative_error(np.fft.fft(x), reference) <= tolerance("float64", n)


# -- pyFFTW's plans -------------------------------------------------------------------------

PYFFTW_SIZES = (1, 2, 7, 16, 30, 64, 100)


@pytest.fixture(scope="module")
def pyfftw_module():
    return pytest.importorskip("fftgauge.backends.pyfftw_plans")


def _random_input(case: Case, seed: int = 7) -> np.ndarray:
    rng = np.random.default_rng(seed + case.n)
    x = rng.standard_normal(case.input_length)
    if case.input_dtype.kind == "c":
        x = x + 1j * rng.standard_normal(case.input_length)
    return x.astype(case.input_dtype)


def _numpy_result(case: Case, x: np.ndarray) -> np.ndarray:
    """numpy.fft, an independent double-precision implementation (not ground truth)."""
    return getattr(np.fft, case.kind)(x, n=case.n, norm=case.norm)


def _close_to_numpy(case: Case, out: np.ndarray, x: np.ndarray) -> bool:
    ref = _numpy_result(case, x)
    rel = np.linalg.norm(out.astype(ref.dtype) - ref) / np.linalg.norm(ref)
    # both sides carry an error within tolerance() of the truth (test above), so twice it
    return bool(rel <= 2 * tolerance(case.dtype, case.n))


@pytest.mark.parametrize("effort", ["estimate", "measure"])
@pytest.mark.parametrize("kind", KINDS)
def test_pyfftw_repeated_execute_on_prepared_buffer(pyfftw_module, kind, effort):
    """Executing the prepared buffer again and again gives the same output; the buffer and the
    caller's array stay intact (FFTW c2r plans may destroy their input: see the next test)."""
    backend = load_backend(f"pyfftw[effort={effort}]")
    for dtype in ("float32", "float64"):
        for norm in NORMS:
            for n in PYFFTW_SIZES:
                case = Case(kind, dtype, n, norm)
                plan = backend.plan(case)
                x = _random_input(case)
                x_before = x.copy()
                prepared = plan.prepare(x)
                assert prepared is not x
                first = plan.execute(prepared).copy()
                for _ in range(3):
                    assert np.array_equal(plan.execute(prepared), first), case.label()
                assert np.array_equal(prepared, x_before), f"{case.label()}: prepared buffer changed"
                assert np.array_equal(plan.execute(x), first), case.label()
                assert np.array_equal(x, x_before), f"{case.label()}: caller's input changed"
                assert _close_to_numpy(case, first, x), case.label()
                plan.close()


@pytest.mark.parametrize("kind", KINDS)
def test_pyfftw_plan_is_safe_from_several_threads_on_unprepared_inputs(pyfftw_module, kind):
    """execute(x) on arrays that are not the prepared buffer may be called from several threads
    at once: each caller gets the transform of its own input. (threads=2 makes pyFFTW release
    the GIL and n = 4096 makes a call long enough to overlap; without the plan's lock and output
    copy this test failed for fft and irfft during development.)"""
    from concurrent.futures import ThreadPoolExecutor

    case = Case(kind, "float64", 4096, "ortho")
    plan = load_backend("pyfftw[threads=2]").plan(case)
    inputs = [_random_input(case, seed=s) for s in range(8)]
    expected = [plan.execute(x).copy() for x in inputs]

    def worker(i: int) -> bool:
        return all(np.array_equal(plan.execute(inputs[(i + j) % 8]), expected[(i + j) % 8]) for j in range(50))

    with ThreadPoolExecutor(max_workers=4) as pool:
        assert all(pool.map(worker, range(4)))


def test_fftw_c2r_destroys_input_when_allowed():
    """Why the adapter matters: an FFTW 1-D c2r plan made with FFTW_DESTROY_INPUT overwrites
    its input (observed with pyFFTW 0.15 at N = 64), so the adapter must never ask for it."""
    pyfftw = pytest.importorskip("pyfftw")
    n = 64
    a = pyfftw.empty_aligned(n // 2 + 1, dtype=np.complex128)
    b = pyfftw.empty_aligned(n, dtype=np.float64)
    fftw = pyfftw.FFTW(a, b, axes=(0,), direction="FFTW_BACKWARD", flags=("FFTW_ESTIMATE", "FFTW_DESTROY_INPUT"))
    a[:] = _random_input(Case("irfft", "float64", n))
    before = a.copy()
    fftw.execute()
    if np.array_equal(a, before):
        pytest.skip("this FFTW build preserved the c2r input even with FFTW_DESTROY_INPUT")
    assert "FFTW_DESTROY_INPUT" not in load_backend("pyfftw").plan(Case("irfft", "float64", n)).fftw.flags


@pytest.mark.parametrize("kind", KINDS)
def test_pyfftw_strided_and_reversed_inputs(pyfftw_module, kind):
    """Non-contiguous inputs (every other element, negative stride) give the contiguous answer."""
    backend = load_backend("pyfftw")
    for n in (5, 16, 33):
        case = Case(kind, "float64", n, "ortho")
        plan = backend.plan(case)
        base = _random_input(Case(kind, "float64", 2 * n + 2))
        strided = base[::2][: case.input_length]
        reversed_view = base[::-1][: case.input_length]
        assert not strided.flags.c_contiguous and reversed_view.strides[0] < 0
        for view in (strided, reversed_view):
            before = base.copy()
            expected = plan.execute(np.ascontiguousarray(view)).copy()
            assert np.array_equal(plan.execute(view), expected), case.label()
            assert np.array_equal(base, before)
            assert _close_to_numpy(case, expected, np.ascontiguousarray(view))


@pytest.mark.parametrize("spec, flag", [("pyfftw[threads=2]", "FFTW_ESTIMATE"),
                                        ("pyfftw[threads=2,effort=measure]", "FFTW_MEASURE"),
                                        ("pyfftw[effort=patient]", "FFTW_PATIENT")])
def test_pyfftw_options_plan_and_agree_with_numpy(pyfftw_module, spec, flag):
    """threads and effort options build working plans with the asked-for planner flag;
    plan() then execute() agrees with numpy.fft (an independent double-precision implementation)."""
    backend = load_backend(spec)
    for kind in KINDS:
        for n in (8, 12, 31):
            case = Case(kind, "float64", n)
            plan = backend.plan(case)
            assert flag in plan.fftw.flags
            x = _random_input(case)
            assert _close_to_numpy(case, plan.execute(plan.prepare(x)), x), (spec, case.label())


def test_pyfftw_threads_option_reaches_fftw(pyfftw_module, monkeypatch):
    """threads=N is passed to pyfftw.FFTW (the FFTW object does not report it back)."""
    import pyfftw

    seen = []
    real_fftw = pyfftw.FFTW

    def spy(*args, **kwargs):
        seen.append(kwargs.get("threads"))
        return real_fftw(*args, **kwargs)

    monkeypatch.setattr(pyfftw, "FFTW", spy)
    load_backend("pyfftw[threads=2]").plan(Case("fft", "float64", 16))
    load_backend("pyfftw").plan(Case("fft", "float64", 16))
    assert seen == [2, 1]


def test_pyfftw_alignment_option(pyfftw_module):
    """aligned=true gives SIMD-aligned buffers; aligned=false gives misaligned ones, planned unaligned."""
    import pyfftw

    case = Case("fft", "float64", 64)
    x = _random_input(case)
    aligned = load_backend("pyfftw").plan(case)
    assert pyfftw.is_byte_aligned(aligned.prepare(x), n=pyfftw.simd_alignment)
    assert "FFTW_UNALIGNED" not in aligned.fftw.flags
    loose = load_backend("pyfftw[aligned=false]").plan(case)
    assert not pyfftw.is_byte_aligned(loose.prepare(x), n=pyfftw.simd_alignment)
    assert "FFTW_UNALIGNED" in loose.fftw.flags
    assert _close_to_numpy(case, loose.execute(loose.prepare(x)), x)
    # unaligned plans use other (non-SIMD) code, so the last bits may differ from the aligned plan
    assert _close_to_numpy(case, loose.execute(x), x) and _close_to_numpy(case, aligned.execute(x), x)


def test_pyfftw_describes_itself(pyfftw_module):
    import pyfftw

    backend = load_backend("pyfftw")
    caps = backend.capabilities()
    assert caps.separate_planning and not caps.in_place and caps.thread_option == "threads"
    assert backend.thread_option == "threads"
    assert {"float32", "float64"} <= set(caps.dtypes)
    assert backend.version.startswith(pyfftw.__version__)
    assert load_backend("pyfftw[effort=measure,threads=2]").label == "pyfftw[effort=measure,threads=2]"


def test_pyfftw_precision_probe_agrees_with_pyfftw_list(pyfftw_module, monkeypatch):
    """Without pyFFTW's private precision list, building tiny plans finds the same precisions."""
    import pyfftw

    listed = pyfftw_module.available_dtypes()
    monkeypatch.delattr(pyfftw, "_supported_types")
    pyfftw_module.available_dtypes.cache_clear()
    try:
        assert pyfftw_module.available_dtypes() == listed
    finally:
        pyfftw_module.available_dtypes.cache_clear()


@pytest.mark.parametrize("spec", ["pyfftw[threads=0]", "scipy[workers=0]", "scipy[workers=-2]"])
def test_thread_counts_below_one_are_usage_errors(spec):
    from fftgauge.harness.errors import UsageError

    pytest.importorskip(BUILTINS[spec.split("[")[0]][0])
    with pytest.raises(UsageError, match="at least 1"):
        load_backend(spec)


# -- scipy ----------------------------------------------------------------------------------

def test_scipy_workers_option_reaches_scipy(monkeypatch):
    """workers=2 is passed to scipy.fft, and the answer does not change."""
    import scipy.fft

    seen = []
    real_fft = scipy.fft.fft

    def spy(x, n=None, norm=None, workers=None):
        seen.append(workers)
        return real_fft(x, n=n, norm=norm, workers=workers)

    case = Case("fft", "float64", 24, "forward")
    x = _random_input(case)
    single = load_backend("scipy").plan(case).execute(x)
    monkeypatch.setattr(scipy.fft, "fft", spy)
    double = load_backend("scipy[workers=2]").plan(case).execute(x)
    assert seen == [2]
    assert np.array_equal(single, double)
    assert _close_to_numpy(case, double, x)


def test_scipy_describes_itself():
    import scipy

    backend = load_backend("scipy")
    caps = backend.capabilities()
    assert backend.version == scipy.__version__
    assert caps.thread_option == "workers" and backend.thread_option == "workers"
    assert not caps.separate_planning
    assert "longdouble" in caps.dtypes
