"""Tests of the correctness battery's checks (harness/battery/checks.py and the check modules it registers).

Three kinds of test:

1. The formulas the checks rely on, against an outside reference: a direct DFT in mpmath
   (30 digits) written here, independent of the project's reference module. The DFT
   properties are Oppenheim & Schafer, Discrete-Time Signal Processing, 3rd ed., Table 8.2
   (from memory; verified numerically below); the impulse response is Oppenheim & Schafer,
   3rd ed., ch. 8 (from memory; verified below).
2. No false alarms: numpy, scipy and pyFFTW pass every check on a spread of the @default
   sizes, three seeds, all four kinds, float32 and float64.
3. Every check fails on a broken FFT written for it (tests/data/broken_ffts.py), with the
   right diagnosis; errors, skips and odd outputs become rows, never crashes.
"""

from __future__ import annotations

import math
from pathlib import Path

import mpmath
import numpy as np
import pytest

from fftgauge.harness.execution import jobs
from fftgauge.backends.registry import load_backend
from fftgauge.harness.battery import context, exact_checks, value_checks
from fftgauge.harness.cases import Case, norm_factor
from fftgauge.harness.battery.reference import reference_transform
from fftgauge.harness.dft import hermitian_full, machine_epsilon
from fftgauge.harness.battery.checks import CHECKS, applicable_checks, check_case, run_case_checks
from fftgauge.harness.errors import UsageError
from fftgauge.harness.rows import DIAGNOSES, STATUSES
from fftgauge.harness.sizes import parse_sizes

BROKEN = str(Path(__file__).parent / "data" / "broken_ffts.py")


def broken(name: str):
    return load_backend(f"{BROKEN}:{name}")


def by_check(rows):
    return {r.check: r for r in rows}


# -- 1. the formulas, against mpmath ------------------------------------------------------------

def mp_dft(values, sign=-1):
    """Direct DFT sum_j v[j] exp(sign 2j pi k j / N) at 30 digits (the outside reference)."""
    n = len(values)
    with mpmath.workdps(30):
        vals = [mpmath.mpc(complex(v)) for v in values]
        return [mpmath.fsum(vals[j] * mpmath.expjpi(sign * mpmath.mpf(2 * ((k * j) % n)) / n) for j in range(n))
                for k in range(n)]


def mp_array(values):
    return np.array([complex(v) for v in values])


@pytest.mark.parametrize("kind", ["fft", "ifft", "rfft", "irfft"])
@pytest.mark.parametrize("n", [1, 2, 5, 8])
@pytest.mark.parametrize("norm", ["backward", "ortho", "forward"])
def test_impulse_closed_form_matches_mpmath(kind, n, norm):
    """The impulse responses the impulse check expects (Oppenheim & Schafer, 3rd ed., ch. 8,
    from memory) equal a 30-digit direct DFT of the impulse."""
    case = Case(kind, "float64", n, norm)
    factor = norm_factor(n, norm, case.is_inverse)
    for m in range(case.input_length):
        got = value_checks.impulse_response(case, m, np.dtype(np.complex128), factor)
        if kind == "irfft":
            full = np.zeros(n, complex)
            full[m] = 1
            if 0 < m < (n + 1) / 2:
                full[n - m] = 1
            want = mp_array(mp_dft(full, +1)) * factor
        else:
            x = np.zeros(n, complex)
            x[m] = 1
            want = mp_array(mp_dft(x, +1 if case.is_inverse else -1))[: case.output_length] * factor
        np.testing.assert_allclose(got, want, rtol=0, atol=1e-15)


def test_dft_properties_hold_in_mpmath():
    """Parseval, shift, modulation, circular convolution and the real/even/odd symmetries, as the
    checks use them (Oppenheim & Schafer, 3rd ed., Table 8.2, from memory), hold for a 30-digit
    direct DFT at N = 7 and N = 8."""
    rng = np.random.default_rng(5)
    for n in (7, 8):
        x = rng.standard_normal(n) + 1j * rng.standard_normal(n)
        y = rng.standard_normal(n) + 1j * rng.standard_normal(n)
        X, Y = mp_array(mp_dft(x)), mp_array(mp_dft(y))
        # Parseval: sum |x|^2 = (1/N) sum |X|^2
        assert math.isclose(np.sum(abs(x) ** 2), np.sum(abs(X) ** 2) / n, rel_tol=1e-14)
        k = np.arange(n)
        m, k0 = 3, 2
        # time shift: x[n - m] -> W^(k m) X[k], W = exp(-2j pi / N)
        np.testing.assert_allclose(mp_array(mp_dft(np.roll(x, m))), np.exp(-2j * np.pi * k * m / n) * X, atol=1e-12)
        # modulation: x[n] W^(-k0 n) -> X[k - k0]
        np.testing.assert_allclose(mp_array(mp_dft(x * np.exp(2j * np.pi * k0 * k / n))), np.roll(X, k0), atol=1e-12)
        # circular convolution -> product
        conv = np.array([sum(x[j] * y[(i - j) % n] for j in range(n)) for i in range(n)])
        np.testing.assert_allclose(mp_array(mp_dft(conv)), X * Y, atol=1e-11)
        # real -> Hermitian; real even -> real; real odd -> imaginary
        r = rng.standard_normal(n)
        R = mp_array(mp_dft(r))
        np.testing.assert_allclose(R[(-k) % n], np.conj(R), atol=1e-13)
        even, odd = (r + r[(-k) % n]) / 2, (r - r[(-k) % n]) / 2
        assert np.max(abs(mp_array(mp_dft(even)).imag)) < 1e-13
        assert np.max(abs(mp_array(mp_dft(odd)).real)) < 1e-13


def test_exact_convolution_by_reference_equals_integer_sums():
    """Above DIRECT_CONVOLUTION_MAX_N the convolution check forms the exact circular
    convolution from reference transforms rounded to integers; it must equal the integer sums."""
    n = exact_checks.DIRECT_CONVOLUTION_MAX_N + 3
    backend = load_backend("numpy")
    for kind in ("fft", "irfft"):
        case = Case(kind, "float64", n)
        ctx = context.CheckContext(backend, case, backend.plan(case), seed=3)
        x, y = exact_checks.integer_input(ctx, "a"), exact_checks.integer_input(ctx, "b")
        got = exact_checks.circular_convolution(ctx, x, y)
        if kind == "irfft":
            xf, yf = hermitian_full(x.astype(complex), n), hermitian_full(y.astype(complex), n)
        else:
            xf, yf = x.astype(complex), y.astype(complex)
        a = np.rint(xf.real).astype(np.int64), np.rint(xf.imag).astype(np.int64)
        b = np.rint(yf.real).astype(np.int64), np.rint(yf.imag).astype(np.int64)

        def circ(u, v):
            lin = np.convolve(u, v)
            out = lin[:n].copy()
            out[: lin.size - n] += lin[n:]
            return out

        want = (circ(a[0], b[0]) - circ(a[1], b[1])) + 1j * (circ(a[0], b[1]) + circ(a[1], b[0]))
        if kind == "irfft":
            want = want[: n // 2 + 1]
        assert np.array_equal(got, want)


# -- 2. no false alarms on correct backends -------------------------------------------------------

#: Always checked, for every backend x kind x precision x seed: the edge sizes 1 and 2, a small
#: prime, a smooth size.
ALWAYS_SIZES = (1, 2, 17, 60)
#: The rest of the spread; each backend x kind x precision x seed takes every SLICES-th of
#: them (a different offset each), so every size is checked several times per backend.
#: Primes up to 9973, powers of two up to 2^16, smooth and odd composites, from @default.
ROTATING_SIZES = tuple(sorted({4, 5, 7, 8, 9, 12, 13, 27, 31, 32, 49, 63, 64, 97, 100, 101, 127, 128, 243, 251,
                               256, 509, 521, 1000, 1009, 1024, 2003, 2048, 2187, 3125, 4093, 4096, 8191, 8192,
                               9973, 10000, 2**14, 2**15, 2**16}))
SLICES = 5
SEEDS = (11, 2027, 424242)


def test_sweep_sizes_come_from_default():
    default = set(parse_sizes("@default"))
    assert set(ALWAYS_SIZES) <= default and set(ROTATING_SIZES) <= default
    assert max(s for s in ROTATING_SIZES if s & (s - 1) == 0) == 2**16
    assert 9973 in ROTATING_SIZES and 1 in ALWAYS_SIZES and 2 in ALWAYS_SIZES


@pytest.mark.parametrize("spec", ["numpy", "scipy", "pyfftw"])
def test_no_false_alarms_on_library_backends(spec):
    """Every check passes (or skips with a reason) on a correct library, for every kind, both
    precisions and three seeds, over a spread of @default sizes."""
    backend = load_backend(spec)
    alarms, ran = [], 0
    combo = 0
    for kind in ("fft", "ifft", "rfft", "irfft"):
        for dtype in ("float32", "float64"):
            for seed in SEEDS:
                sizes = ALWAYS_SIZES + ROTATING_SIZES[combo % SLICES::SLICES]
                combo += 1
                for n in sizes:
                    rows = check_case(backend, Case(kind, dtype, n), seed)
                    ran += 1
                    assert [r.check for r in rows] == list(CHECKS)
                    for r in rows:
                        if r.status == "skip":
                            assert r.check in ("round-trip", "time-shift", "modulation", "pairs") and r.message
                        elif r.status != "pass":
                            alarms.append(f"{kind} {dtype} n={n} seed={seed} {r.check}: {r.status} {r.message}")
    assert ran >= 24 * (len(ALWAYS_SIZES) + len(ROTATING_SIZES) // SLICES)
    assert not alarms, "\n".join(alarms[:20])


@pytest.mark.parametrize("norm", ["ortho", "forward"])
def test_no_false_alarms_with_other_normalisations(norm):
    backend = load_backend("numpy")
    for kind in ("fft", "ifft", "rfft", "irfft"):
        for n in (1, 2, 7, 64, 100, 1009):
            rows = check_case(backend, Case(kind, "float64", n, norm), 5)
            bad = [f"{r.check}: {r.message}" for r in rows if r.status not in ("pass", "skip")]
            assert not bad, f"{kind} n={n}: {bad}"


def test_longdouble_cases_pass_on_numpy():
    backend = load_backend("numpy")
    for kind in ("fft", "irfft"):
        for n in (8, 15):
            rows = check_case(backend, Case(kind, "longdouble", n), 9)
            bad = [f"{r.check}: {r.message}" for r in rows if r.status not in ("pass", "skip")]
            assert not bad, f"{kind} n={n}: {bad}"


# -- 3. every check fails on a broken FFT written for it ---------------------------------------------

#: (SPEC attribute, kind, n, {check: diagnosis that check must fail with}). Each check of
#: CHECKS appears at least once (test_every_check_has_a_broken_fft).
FAILURES = [
    ("float32_fft", "fft", 60, {"accuracy": "precision", "linearity": "precision", "parseval": "precision",
                                "convolution": "precision", "pairs": "precision"}),
    ("opposite_sign_fft", "fft", 60, {"accuracy": "sign", "impulse": "sign", "time-shift": "sign",
                                      "modulation": "sign", "convolution": "sign", "pairs": "sign"}),
    ("conjugated_fft", "fft", 45, {"accuracy": "sign", "linearity": "sign", "impulse": "sign"}),
    ("bitreversed_fft[sizes=pow2]", "fft", 64, {"accuracy": "bit-reversed", "symmetry": "bit-reversed",
                                                "time-shift": "bit-reversed", "pairs": "bit-reversed"}),
    ("fftshifted_fft", "fft", 63, {"accuracy": "shifted", "time-shift": "shifted", "pairs": "shifted"}),
    ("padded_fft", "fft", 100, {"accuracy": "truncated-size", "shape": "shape", "linearity": "shape"}),
    ("padded_truncated_fft", "fft", 100, {"accuracy": "truncated-size", "impulse": "truncated-size"}),
    ("real_only_fft", "fft", 50, {"accuracy": "real-only", "linearity": "real-only", "parseval": "real-only"}),
    ("ortho_scaled_fft", "fft", 48, {"accuracy": "scale", "parseval": "scale", "convolution": "scale",
                                     "impulse": "scale"}),
    ("affine_fft", "fft", 40, {"linearity": "unknown"}),
    ("mirrored_fft", "fft", 40, {"symmetry": "localised"}),  # upper half wrong: localisation names it
    ("inplace_fft", "fft", 40, {"input-intact": "input-modified"}),
    ("noisy_fft", "fft", 40, {"repeatable": "nondeterministic"}),
    ("shared_scratch_fft", "fft", 40, {"concurrent": "thread-unsafe"}),
    ("nan_to_zero_fft", "fft", 40, {"nonfinite": "nonfinite"}),
    ("nan_output_fft", "fft", 40, {"nonfinite": "nonfinite", "accuracy": "nonfinite"}),
    ("stride_blind_fft", "fft", 40, {"strided": "unknown"}),
    ("float32_output_fft", "fft", 40, {"precision": "dtype", "accuracy": "dtype"}),
    ("short_fft", "fft", 40, {"shape": "shape", "accuracy": "shape"}),
    ("MissingInverseScaleBackend", "fft", 40, {"round-trip": "scale", "convolution": "scale"}),
    ("MissingInverseScaleBackend", "ifft", 40, {"accuracy": "scale", "round-trip": "scale", "parseval": "scale"}),
    ("MissingInverseScaleBackend", "rfft", 40, {"round-trip": "scale"}),
    ("MissingInverseScaleBackend", "irfft", 41, {"accuracy": "scale", "round-trip": "scale"}),
    ("SameSignInverseBackend", "fft", 40, {"round-trip": "sign", "convolution": "sign"}),
    ("SameSignInverseBackend", "ifft", 40, {"accuracy": "sign", "modulation": "sign"}),
]

#: Checks a broken FFT must still pass: each bug is caught where it should be, not everywhere.
PASSES = [
    ("noisy_fft", "fft", 40, ("accuracy", "linearity", "shape", "precision")),
    ("inplace_fft", "fft", 40, ("accuracy", "repeatable")),
    ("shared_scratch_fft", "fft", 40, ("accuracy", "repeatable")),
    ("nan_to_zero_fft", "fft", 40, ("accuracy", "linearity")),
    ("stride_blind_fft", "fft", 40, ("accuracy", "input-intact")),
    ("float32_fft", "fft", 40, ("precision", "shape")),
    ("MissingInverseScaleBackend", "fft", 40, ("accuracy", "linearity", "impulse")),
]


def test_every_check_has_a_broken_fft():
    covered = {check for _, _, _, expected in FAILURES for check in expected}
    assert covered == set(CHECKS)


@pytest.mark.parametrize("name,kind,n,expected", FAILURES, ids=[f"{f[0]}-{f[1]}-{f[2]}" for f in FAILURES])
def test_broken_fft_fails_with_diagnosis(name, kind, n, expected):
    rows = by_check(check_case(broken(name), Case(kind, "float64", n), 7))
    for check, code in expected.items():
        row = rows[check]
        assert row.status == "fail", f"{check} passed on {name}: {row.message}"
        assert row.diagnosis == code, f"{check} on {name}: {row.diagnosis} ({row.message})"
        assert row.message


@pytest.mark.parametrize("name,kind,n,passing", PASSES, ids=[p[0] for p in PASSES])
def test_broken_fft_passes_the_checks_it_should(name, kind, n, passing):
    rows = by_check(check_case(broken(name), Case(kind, "float64", n), 7, list(passing)))
    for check in passing:
        assert rows[check].status == "pass", f"{check} on {name}: {rows[check].message}"


def test_float32_computation_is_right_for_float32_cases():
    rows = check_case(broken("float32_fft"), Case("fft", "float32", 60), 7)
    assert all(r.status in ("pass", "skip") for r in rows), [(r.check, r.message) for r in rows if r.status == "fail"]


def test_thread_unsafe_backend_fails_for_every_seed():
    backend = broken("shared_scratch_fft")
    for seed in range(5):
        row = check_case(backend, Case("fft", "float64", 32), seed, ["concurrent"])[0]
        assert (row.status, row.diagnosis) == ("fail", "thread-unsafe"), row.message


def test_pairs_use_the_closed_forms():
    """A broken FFT fails the pairs check on the closed-form pairs themselves; the message names them."""
    row = check_case(broken("opposite_sign_fft"), Case("fft", "float64", 31), 1, ["pairs"])[0]
    assert row.status == "fail" and "shifted-impulse" in row.message and "failing:" in row.message
    good = check_case(load_backend("numpy"), Case("fft", "float64", 31), 1, ["pairs"])[0]
    assert good.status == "pass" and "zadoff-chu" in good.message and "chirp" in good.message
    assert good.value < good.limit / 10


def test_pair_setup_for_inverse_and_real_kinds():
    """ifft uses conj(signal) -> conj(transform); irfft the duality half(conj(X)) -> N x[-n]."""
    from fftgauge.harness.battery.pairs import pair_named

    pair = pair_named("rect-dirichlet")
    n = 12
    x, expected, mode = exact_checks.pair_setup(Case("ifft", "float64", n), pair)
    np.testing.assert_allclose(np.fft.ifft(x) * n, expected, atol=1e-12)
    x, expected, mode = exact_checks.pair_setup(Case("irfft", "float64", n), pair)
    np.testing.assert_allclose(np.fft.irfft(x, n) * n, expected.real, atol=1e-12)
    assert exact_checks.pair_setup(Case("rfft", "float64", n), pair_named("complex-tone")) is None


# -- errors, skips and odd outputs become rows ----------------------------------------------------

def test_backend_exception_is_an_error_row_and_others_go_on():
    rows = by_check(check_case(broken("RaisingIfftBackend"), Case("fft", "float64", 16), 1))
    assert rows["round-trip"].status == "error" and "ifft exploded" in rows["round-trip"].message
    assert "\n" not in rows["round-trip"].message
    assert rows["accuracy"].status == "pass" and rows["shape"].status == "pass"
    rows = check_case(broken("RaisingIfftBackend"), Case("ifft", "float64", 16), 1)
    assert {r.status for r in rows} == {"error"}


def test_plan_failure_is_an_error_row_for_every_check():
    rows = run_case_checks(broken("PlanRaisesBackend"), ("fft", "float64", 8, "backward"), 1, ["accuracy", "shape"])
    assert [r["check"] for r in rows] == ["accuracy", "shape"]
    assert all(r["status"] == "error" and "MemoryError" in r["message"] for r in rows)


def test_unusable_output_fails_instead_of_crashing():
    rows = check_case(broken("NoneOutputBackend"), Case("rfft", "float64", 8), 1)
    assert all(r.status == "fail" and r.diagnosis == "dtype" for r in rows)
    rows = by_check(check_case(broken("ListOutputBackend"), Case("fft", "float64", 8), 1))
    assert rows["precision"].status == "fail" and rows["precision"].diagnosis == "dtype"
    assert rows["accuracy"].status == "pass"


def test_declared_in_place_is_not_a_failure():
    row = check_case(broken("InPlaceDeclaredBackend"), Case("fft", "float64", 8), 1, ["input-intact"])[0]
    assert row.status == "pass" and "in_place" in row.message


def test_plans_that_reuse_their_output_buffer_are_not_shared_between_threads():
    row = check_case(broken("ReusedBufferBackend"), Case("fft", "float64", 64), 1, ["concurrent"])[0]
    assert row.status == "pass" and "separately planned plans only" in row.message


def test_unclaimed_case_is_skipped_with_reason():
    rows = check_case(broken("bitreversed_fft[sizes=pow2]"), Case("fft", "float64", 12), 1)
    assert all(r.status == "skip" and "powers of two" in r.message for r in rows)
    row = check_case(broken("opposite_sign_fft"), Case("fft", "float64", 12), 1, ["round-trip"])[0]
    assert row.status == "skip" and "ifft" in row.message


def test_unknown_check_name_is_a_usage_error():
    with pytest.raises(UsageError, match="unknown check 'acuracy'"):
        check_case(load_backend("numpy"), Case("fft", "float64", 8), 1, ["acuracy"])


def test_rows_follow_the_contract():
    rows = run_case_checks(load_backend("numpy"), ("rfft", "float32", 24, "backward"), 3, [])
    assert [r["check"] for r in rows] == list(CHECKS)
    for r in rows:
        assert r["status"] in STATUSES and r["backend"] == "numpy" and r["n"] == 24
        assert r["diagnosis"] is None if r["status"] != "fail" else r["diagnosis"] in DIAGNOSES
    acc = rows[0]
    assert acc["reference"] and acc["eps_units"] == pytest.approx(acc["value"] / 2.0**-23)
    bad = run_case_checks(broken("ortho_scaled_fft"), ("fft", "float64", 16, "backward"), 3, ["accuracy"])[0]
    assert bad["status"] == "fail" and bad["diagnosis"] == "scale" and "sqrt(N) times too small" in bad["message"]


def test_applicable_checks():
    assert applicable_checks(Case("fft", "float64", 8), {"kinds": ["fft"]}) == list(CHECKS)
    one = applicable_checks(Case("irfft", "float64", 1))
    assert "time-shift" not in one and "modulation" not in one and "accuracy" in one


def test_runs_in_a_worker_process():
    """The job function is importable and picklable in the worker's child process."""
    from fftgauge.harness.execution.worker import Worker

    with Worker("numpy") as worker:
        rows = worker.call(jobs.run_case_checks, ("fft", "float64", 32, "backward"), 1,
                           ["accuracy", "concurrent"], timeout_seconds=60)
    assert [(r["check"], r["status"]) for r in rows] == [("accuracy", "pass"), ("concurrent", "pass")]


# -- concurrent and repeatable: rounding-level differences are not faults ------------------------

THREAD_SETTINGS = str(Path(__file__).parent / "data" / "thread_settings.py")


@pytest.mark.parametrize("dtype, n", [("float64", 64), ("float64", 1000), ("float32", 4096)])
def test_thread_local_setting_backend_passes_concurrent(dtype, n):
    """Like a library whose result follows its thread count: bitwise different in other threads,
    accurate everywhere (checked here against the reference first), so not thread-unsafe."""
    import threading

    backend = load_backend(f"{THREAD_SETTINGS}:ThreadSettingBackend")
    case = Case("fft", dtype, n)
    plan = backend.plan(case)
    x = (np.random.default_rng(1).standard_normal(n) + 1j * np.random.default_rng(2).standard_normal(n)
         ).astype(case.input_dtype)
    here = plan.execute(x)
    there = []
    worker = threading.Thread(target=lambda: there.append(plan.execute(x)))
    worker.start()
    worker.join()
    assert not np.array_equal(here, there[0]), "the test backend must differ bitwise between threads"
    ref = reference_transform(x, case)
    eps = machine_epsilon(dtype)
    assert ref.relative_error(here) < 10 * eps and ref.relative_error(there[0]) < 10 * eps
    row = check_case(backend, case, 3, ["concurrent"])[0]
    assert row.status == "pass", row.message
    assert "rounding-level" in row.message and " eps" in row.message and row.value > 0


def test_shared_scratch_still_fails_concurrent_with_its_size_in_eps():
    row = check_case(broken("shared_scratch_fft"), Case("fft", "float64", 256), 4, ["concurrent"])[0]
    assert (row.status, row.diagnosis) == ("fail", "thread-unsafe"), row.message
    assert row.value > 1e-3 and "run-to-run spread is 0 eps" in row.message and " eps" in row.message


def test_declared_not_bitwise_reproducible_passes_repeatable_within_the_limit():
    """bitwise_reproducible=False: rounding-level differences pass; the same noise undeclared fails."""
    row = check_case(load_backend(f"{THREAD_SETTINGS}:NotBitwiseBackend"), Case("fft", "float64", 128), 1,
                     ["repeatable", "concurrent"])
    assert [(r.check, r.status) for r in row] == [("repeatable", "pass"), ("concurrent", "pass")], \
        [r.message for r in row]
    assert "not bitwise reproducible" in row[0].message and 0 < row[0].value <= row[0].limit
    undeclared = check_case(broken("noisy_fft"), Case("fft", "float64", 128), 1, ["repeatable"])[0]
    assert (undeclared.status, undeclared.diagnosis) == ("fail", "nondeterministic")


def test_concurrent_threads_run_under_the_callers_thread_caps():
    """threadpoolctl's own report, read inside a crew thread under thread_caps_applied, shows the
    caller's cap (1), and the thread's settings are put back afterwards."""
    from threadpoolctl import threadpool_info, threadpool_limits

    from fftgauge.harness.battery.thread_crew import thread_caps, thread_caps_applied, thread_crew

    if not threadpool_info():
        pytest.skip("no thread pool library loaded")
    seen = []
    with threadpool_limits(limits=1):
        caps = thread_caps()
        assert caps and all(threads == 1 for _, threads in caps)

        def task():
            with thread_caps_applied(caps):
                seen.append([pool["num_threads"] for pool in threadpool_info()])

        assert thread_crew().run([task], timeout_seconds=30)
    assert seen and all(v == 1 for v in seen[0])


def test_mkl_fft_passes_concurrent_where_installed(monkeypatch):
    """Intel MKL (mkl_fft) sums in an order set by its thread count: capped at one thread in the
    calling thread and left at its default in the check's threads (the caps not carried, as
    before), its results differ bitwise but within rounding, and concurrent passes; with the
    caps carried into the threads they agree bitwise. Skipped where mkl_fft is not installed."""
    mkl_fft = pytest.importorskip("mkl_fft")
    from threadpoolctl import threadpool_limits

    from fftgauge.backends.base import Backend, Capabilities, FunctionPlan
    from fftgauge.harness.battery import behaviour_checks

    class Mkl(Backend):
        name = "mkl_fft"

        def capabilities(self):
            return Capabilities(kinds=("fft",), dtypes=("float32", "float64"))

        def plan(self, case):
            return FunctionPlan(case, lambda x: mkl_fft.fft(x, norm=case.norm))

    case = Case("fft", "float64", 16384)
    with threadpool_limits(limits=1, user_api="blas"):
        carried = check_case(Mkl(), case, 1, ["concurrent"])[0]
        monkeypatch.setattr(behaviour_checks, "thread_caps", lambda: ())
        default_threads = check_case(Mkl(), case, 1, ["concurrent"])[0]
    assert carried.status == "pass" and carried.value == 0.0, carried.message
    assert default_threads.status == "pass", default_threads.message


# -- a backend's exception names its line, as a crash does -----------------------------------------

def line_of(path: str, text: str) -> int:
    """Return the 1-based line of ``path`` that holds ``text`` (read from the file, not hard-coded)."""
    return next(i for i, line in enumerate(Path(path).read_text().splitlines(), 1) if text in line)


def test_backend_exception_rows_give_file_and_line():
    boom = line_of(BROKEN, 'raise RuntimeError("ifft exploded")')
    rows = by_check(check_case(broken("RaisingIfftBackend"), Case("fft", "float64", 16), 1))
    for name in ("round-trip", "convolution"):
        assert rows[name].status == "error"
        assert rows[name].message.startswith("the backend raised RuntimeError: ifft exploded (at ")
        assert rows[name].message.endswith(f"broken_ffts.py:{boom} in boom)"), rows[name].message
    rows = by_check(check_case(broken("RaisingIfftBackend"), Case("ifft", "float64", 16), 1))
    for name in ("accuracy", "precision", "concurrent", "input-intact"):
        assert f"ifft exploded (at " in rows[name].message and f"broken_ffts.py:{boom} in" in rows[name].message
    plan_line = line_of(BROKEN, 'raise MemoryError("no room for a plan")')
    row = check_case(broken("PlanRaisesBackend"), Case("fft", "float64", 8), 1, ["accuracy"])[0]
    assert row.message.startswith("planning failed: MemoryError: no room for a plan (at ")
    assert f"broken_ffts.py:{plan_line} in plan" in row.message


class CompanionPlanRaises:
    """fft plans; planning ifft raises (the round trip's companion); planning fft a second
    time raises too (the concurrent check's own plans)."""

    @staticmethod
    def make():
        from fftgauge.backends.base import Backend, Capabilities, FunctionPlan

        class Raising(Backend):
            name = "companion-raises"
            planned = 0

            def capabilities(self):
                return Capabilities(kinds=("fft", "ifft"))

            def plan(self, case):
                if case.kind == "ifft":
                    raise KeyError("no inverse today")  # COMPANION-LINE
                Raising.planned += 1
                if Raising.planned > 1:
                    raise OSError("only one plan")  # AGAIN-LINE
                return FunctionPlan(case, np.fft.fft)

        return Raising()


def test_companion_and_replanning_exceptions_give_file_and_line():
    here = str(Path(__file__))
    rows = by_check(check_case(CompanionPlanRaises.make(), Case("fft", "float64", 8), 1, ["round-trip", "concurrent"]))
    assert rows["round-trip"].status == "error"
    assert rows["round-trip"].message.startswith("planning ifft raised KeyError: 'no inverse today' (at ")
    assert rows["round-trip"].message.endswith(f"test_checks.py:{line_of(here, '# COMPANION-LINE')} in plan)")
    assert rows["concurrent"].status == "error"
    assert rows["concurrent"].message.startswith("planning again raised OSError: only one plan (at ")
    assert f"test_checks.py:{line_of(here, '# AGAIN-LINE')} in plan" in rows["concurrent"].message


def test_a_concurrent_call_that_raises_names_its_line():
    from fftgauge.backends.base import Backend, Capabilities, FunctionPlan
    import threading

    main = threading.main_thread()

    def only_in_the_main_thread(x):
        if threading.current_thread() is not main:
            raise RuntimeError("not from another thread")  # THREAD-LINE
        return np.fft.fft(x)

    class MainOnly(Backend):
        name = "main-only"

        def capabilities(self):
            return Capabilities(kinds=("fft",))

        def plan(self, case):
            return FunctionPlan(case, only_in_the_main_thread)

    row = check_case(MainOnly(), Case("fft", "float64", 8), 1, ["concurrent"])[0]
    here = str(Path(__file__))
    assert row.status == "fail" and row.diagnosis == "thread-unsafe"
    assert "first: a concurrent call raised RuntimeError: not from another thread (at " in row.message
    assert f"test_checks.py:{line_of(here, '# THREAD-LINE')} in only_in_the_main_thread" in row.message


def test_convolution_by_double_transforms_is_exact_at_the_largest_entries():
    """Above DIRECT_CONVOLUTION_MAX_N the exact convolution comes from double transforms
    rounded to integers. Every entry at the range's corner r (1 + i) gives the largest sums
    the check can meet, and a closed form: the circular convolution of two constant sequences
    c is n c^2 at every index (the sum of n equal products), here 2i n r^2. At a prime n
    (Bluestein's algorithm inside the FFT) and n = 2^17 the rounded result equals it and
    the rounding residual is far below the 0.25 the check allows."""
    r = exact_checks.CONVOLUTION_RANGE
    backend = load_backend("numpy")
    for n in (99991, 2**17):
        case = Case("fft", "float64", n)
        ctx = context.CheckContext(backend, case, backend.plan(case), seed=3)
        x = np.full(n, r * (1 + 1j))
        got = exact_checks.circular_convolution(ctx, x, x)
        assert np.array_equal(got, np.full(n, 2j * n * r * r))
        fwd, inv = Case("fft", "float32", n), Case("ifft", "float32", n)
        approx = ctx.reference_fn(ctx.reference_fn(x, fwd).values() ** 2, inv).values()
        assert float(np.max(np.abs(approx - got))) < 1e-3
