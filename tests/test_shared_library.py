"""The shared-library backend (``clib:``) on the C radix-2 example of examples/c_radix2.

The example is built with the system C compiler into a temporary folder (the test is
skipped, with the reason, when there is none). Outside checks, with their sources:

- results against numpy.fft (check-values.md: numpy.fft, "an independent double-precision
  implementation (not ground truth)") within twice ``fftgauge.harness.battery.bounds.accuracy_limit``: both
  are within the limit of the exact transform (Higham, Accuracy and Stability of Numerical
  Algorithms, 2nd ed., SIAM 2002, Theorem 24.2 (from memory); its numbers are verified by
  harness/bounds.py's own tests), so they differ by at most twice that (triangle inequality);
- the broken variant's output equals numpy's in bit-reversed order (common practice: the
  definition of bit reversal; the table for N = 8 is spelled out and checked below);
- the battery (fftgauge.harness.battery.checks) over the backend, whose checks carry their own sources.
"""

from __future__ import annotations

import ctypes.util
import math
import pickle
import shutil
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

from fftgauge.harness.execution import jobs
from conftest import c_compiler as conftest_c_compiler
from fftgauge.backends.registry import load_backend
from fftgauge.backends.shared_library import ForeignCallError, HandlePlan, SharedLibraryBackend
from fftgauge.harness.cases import Case
from fftgauge.harness.errors import BackendFailure, UsageError

EXAMPLE = Path(__file__).resolve().parent.parent / "examples" / "c_radix2"
TARGETS = ("libradix2.so", "libradix2_broken.so")


@pytest.fixture(scope="session")
def c_libs(c_example_build: Path) -> Path:
    """The folder holding the C example's build (tests/conftest.py builds it once)."""
    return c_example_build


def spec(c_libs: Path, symbol: str, options: str = "", lib: str = "libradix2.so") -> str:
    return f"clib:{c_libs / lib}:{symbol}" + (f"[{options}]" if options else "")


def signal_for(case: Case, seed: int = 7) -> np.ndarray:
    """Return a seeded random input of the case's input dtype and length (complex parts non-zero)."""
    rng = np.random.default_rng([seed, case.n])
    re = rng.standard_normal(case.input_length)
    if case.kind == "rfft":
        return re.astype(case.input_dtype)
    return (re + 1j * rng.standard_normal(case.input_length)).astype(case.input_dtype)


def numpy_result(case: Case, x: np.ndarray) -> np.ndarray:
    """numpy.fft of ``x`` promoted to double (the comparison the module docstring names)."""
    wide = x.astype(np.float64 if case.kind == "rfft" else np.complex128)
    fn = getattr(np.fft, case.kind)
    return fn(wide, n=case.n) if case.kind == "irfft" else fn(wide)


def relative_error(y: np.ndarray, ref: np.ndarray) -> float:
    scale = np.linalg.norm(ref)
    return float(np.linalg.norm(y.astype(ref.dtype) - ref) / (scale if scale else 1.0))


def bit_reversal(n: int) -> np.ndarray:
    """Return the bit-reversal permutation of 0..n-1 (n a power of two)."""
    bits = int(math.log2(n))
    return np.array([int(format(i, f"0{bits}b")[::-1], 2) if bits else 0 for i in range(n)])


def test_bit_reversal_table_for_8_is_the_textbook_one() -> None:
    # common practice: bit reversal of 3-bit indices, written out.
    assert bit_reversal(8).tolist() == [0, 4, 2, 6, 1, 5, 3, 7]


def accuracy_limit(case: Case) -> float:
    from fftgauge.harness.battery.bounds import accuracy_limit as limit
    return limit(case)


# -- the C example through the backend agrees with numpy ---------------------------------------

SHAPES = [
    # (symbol, options, kinds): the one-shot entry points and the two plan-based sets
    ("radix2_fft", "kind=fft", ("fft",)),
    ("radix2_ifft", "kind=ifft", ("ifft",)),
    ("radix2_rfft", "kind=rfft", ("rfft",)),
    ("radix2_irfft", "kind=irfft", ("irfft",)),
    ("radix2", "shape=plan,kind=fft+ifft", ("fft", "ifft")),
    ("radix2_real", "shape=plan,kind=rfft+irfft", ("rfft", "irfft")),
    ("radix2f_fft", "kind=fft,dtype=float32", ("fft",)),
    ("radix2f", "shape=plan,kind=fft+ifft,dtype=float32", ("fft", "ifft")),
    ("radix2f_real", "shape=plan,kind=rfft+irfft,dtype=float32", ("rfft", "irfft")),
]


@pytest.mark.parametrize("symbol,options,kinds", SHAPES, ids=[s[0] + "-" + s[1] for s in SHAPES])
def test_results_agree_with_numpy(c_libs: Path, symbol: str, options: str, kinds: tuple) -> None:
    backend = load_backend(spec(c_libs, symbol, options + ",sizes=pow2"))
    dtype = backend.opts["dtype"]
    assert backend.capabilities().kinds == kinds
    for kind in kinds:
        for n in (1, 2, 4, 8, 64, 1024, 4096):
            case = Case(kind, dtype, n)
            plan = backend.plan(case)
            x = signal_for(case)
            y = plan.execute(plan.prepare(x))
            plan.close()
            assert y.dtype == case.output_dtype and y.shape == (case.output_length,)
            err = relative_error(y, numpy_result(case, x))
            assert err <= 2 * accuracy_limit(case), f"{case.label()}: error {err:.3g}"


def test_non_contiguous_input_is_copied_and_input_is_left_intact(c_libs: Path) -> None:
    backend = load_backend(spec(c_libs, "radix2_fft"))
    case = Case("fft", "float64", 64)
    wide = signal_for(Case("fft", "float64", 128))
    x = wide[::2]
    before = x.copy()
    y = backend.plan(case).execute(x)
    assert np.array_equal(x, before)
    assert relative_error(y, np.fft.fft(before)) <= 2 * accuracy_limit(case)


def test_wrong_input_length_is_refused_before_the_call(c_libs: Path) -> None:
    plan = load_backend(spec(c_libs, "radix2_fft")).plan(Case("fft", "float64", 16))
    with pytest.raises(ValueError, match="takes 16 input values, got 8"):
        plan.execute(np.zeros(8, complex))


# -- the battery -------------------------------------------------------------------------------

BATTERY_SPECS = [("radix2_fft", "sizes=pow2"), ("radix2", "shape=plan,kind=fft+ifft,sizes=pow2"),
                 ("radix2_real", "shape=plan,kind=rfft+irfft,sizes=pow2"),
                 ("radix2f", "shape=plan,kind=fft+ifft,dtype=float32,sizes=pow2")]


@pytest.mark.parametrize("symbol,options", BATTERY_SPECS, ids=[s[0] for s in BATTERY_SPECS])
def test_the_c_example_passes_the_battery(c_libs: Path, symbol: str, options: str) -> None:
    checks = pytest.importorskip("fftgauge.harness.battery.checks")
    backend = load_backend(spec(c_libs, symbol, options))
    for kind in backend.capabilities().kinds:
        for n in (1, 16, 1024):
            rows = checks.check_case(backend, Case(kind, backend.opts["dtype"], n), seed=1234)
            bad = [(r.check, r.status, r.message) for r in rows if r.status not in ("pass", "skip")]
            assert rows and not bad, f"{kind} n={n}: {bad}"
            assert any(r.check == "accuracy" and r.status == "pass" for r in rows)


def test_sizes_outside_the_claim_are_skipped(c_libs: Path) -> None:
    backend = load_backend(spec(c_libs, "radix2_fft", "sizes=pow2"))
    assert "powers of two only" in backend.unsupported_reason(Case("fft", "float64", 12))


# -- the broken variant is caught ----------------------------------------------------------------

@pytest.mark.parametrize("symbol,options", [("radix2_fft", ""), ("radix2", "shape=plan,kind=fft+ifft")])
def test_missing_bit_reversal_gives_numpy_output_in_bit_reversed_order(c_libs: Path, symbol: str,
                                                                       options: str) -> None:
    backend = load_backend(spec(c_libs, symbol, options, lib="libradix2_broken.so"))
    case = Case("fft", "float64", 1024)
    x = signal_for(case)
    plan = backend.plan(case)
    y = plan.execute(x)
    plan.close()
    ref = numpy_result(case, x)
    assert relative_error(y, ref) > 1e6 * accuracy_limit(case)
    assert relative_error(y, ref[bit_reversal(case.n)]) <= 2 * accuracy_limit(case)


@pytest.mark.parametrize("symbol,options", [("radix2_fft", "sizes=pow2"),
                                            ("radix2", "shape=plan,kind=fft+ifft,sizes=pow2")])
def test_the_battery_diagnoses_the_broken_variant_as_bit_reversed(c_libs: Path, symbol: str, options: str) -> None:
    checks = pytest.importorskip("fftgauge.harness.battery.checks")
    backend = load_backend(spec(c_libs, symbol, options, lib="libradix2_broken.so"))
    rows = checks.run_case_checks(backend, ("fft", "float64", 1024, "backward"), 1234, ["accuracy"])
    assert [(r["check"], r["status"], r["diagnosis"]) for r in rows] == [("accuracy", "fail", "bit-reversed")]


# -- failures reported by the C code ------------------------------------------------------------

def test_a_non_zero_return_code_raises_with_the_code(c_libs: Path) -> None:
    backend = load_backend(spec(c_libs, "radix2_fft"))  # claims any size; the C code refuses 12
    with pytest.raises(ForeignCallError, match="radix2_fft returned error code 1 for fft float64 n=12"):
        backend.plan(Case("fft", "float64", 12)).execute(np.zeros(12, complex))


def test_a_non_zero_return_code_becomes_error_rows_with_the_code(c_libs: Path) -> None:
    checks = pytest.importorskip("fftgauge.harness.battery.checks")
    backend = load_backend(spec(c_libs, "radix2_fft"))
    rows = checks.run_case_checks(backend, ("fft", "float64", 12, "backward"), 1234, ["accuracy", "linearity"])
    assert [r["status"] for r in rows] == ["error", "error"]
    assert all("error code 1" in r["message"] for r in rows)


def test_a_null_plan_raises_at_planning(c_libs: Path) -> None:
    backend = load_backend(spec(c_libs, "radix2", "shape=plan,kind=fft+ifft"))
    with pytest.raises(ForeignCallError, match=r"radix2_plan\(12, 1\) returned NULL"):
        backend.plan(Case("ifft", "float64", 12))


def test_plan_shape_plans_in_plan_and_destroys_on_close(c_libs: Path) -> None:
    backend = load_backend(spec(c_libs, "radix2", "shape=plan,kind=fft+ifft"))
    assert backend.capabilities().separate_planning
    plan = backend.plan(Case("fft", "float64", 8))
    assert isinstance(plan, HandlePlan) and plan._handle
    plan.close()
    plan.close()  # idempotent
    with pytest.raises(BackendFailure, match="was closed"):
        plan.execute(np.zeros(8, complex))


def test_explicit_plan_function_names(c_libs: Path) -> None:
    backend = load_backend(spec(c_libs, "unused", "shape=plan,kind=rfft+irfft,plan=radix2_real_plan,"
                                                  "execute=radix2_real_execute,destroy=radix2_real_destroy"))
    case = Case("irfft", "float64", 32)
    x = signal_for(case)
    assert relative_error(backend.plan(case).execute(x), numpy_result(case, x)) <= 2 * accuracy_limit(case)


def test_norm_option_declares_the_normalisation(c_libs: Path) -> None:
    backend = load_backend(spec(c_libs, "radix2_fft", "norm=forward"))
    assert backend.capabilities().norms == ("forward",)
    assert "norm=backward" in backend.unsupported_reason(Case("fft", "float64", 8))


LONG_DOUBLE_DFT = r"""
#include <math.h>
#include <stddef.h>
/* The defining sum in long double: X[k] = sum_j x[j] exp(-2 pi i jk/n). */
int ldft(size_t n, const long double *in, long double *out)
{
    const long double pi = 3.141592653589793238462643383279502884L;
    for (size_t k = 0; k < n; k++) {
        long double re = 0, im = 0;
        for (size_t j = 0; j < n; j++) {
            long double a = -2 * pi * (long double)((j * k) % n) / (long double)n;
            re += in[2 * j] * cosl(a) - in[2 * j + 1] * sinl(a);
            im += in[2 * j] * sinl(a) + in[2 * j + 1] * cosl(a);
        }
        out[2 * k] = re;
        out[2 * k + 1] = im;
    }
    return 0;
}
"""


def test_long_double_data_cross_the_call_intact(c_libs: Path, tmp_path: Path) -> None:
    """dtype=longdouble: a direct DFT in C long double passes the accuracy check, whose ground
    truth is scipy.fft on clongdouble (check-values.md), on machines where long double is
    wider than double."""
    checks = pytest.importorskip("fftgauge.harness.battery.checks")
    if np.finfo(np.longdouble).eps >= 1e-18:
        pytest.skip("long double is not wider than double here")
    source = tmp_path / "ldft.c"
    source.write_text(LONG_DOUBLE_DFT)
    subprocess.run([conftest_c_compiler(), "-O2", "-fPIC", "-shared", "-o", str(tmp_path / "libldft.so"), str(source), "-lm"],
                   check=True, capture_output=True, timeout=120)
    backend = load_backend(f"clib:{tmp_path / 'libldft.so'}:ldft[dtype=longdouble]")
    rows = checks.run_case_checks(backend, ("fft", "longdouble", 16, "backward"), 1234, ["accuracy"])
    assert [(r["check"], r["status"]) for r in rows] == [("accuracy", "pass")], rows


# -- call overhead ------------------------------------------------------------------------------

def test_call_overhead_is_measured_with_the_noop_function(c_libs: Path) -> None:
    backend = load_backend(spec(c_libs, "radix2_fft", "noop=radix2_noop"))
    seconds = backend.call_overhead_seconds()
    assert seconds is not None and math.isfinite(seconds) and seconds > 0
    assert backend.call_overhead_seconds() == seconds  # measured once
    d = backend.describe().as_dict()
    assert d["call_overhead_seconds"] == seconds and "radix2_noop" in d["call_overhead_method"]


def test_call_overhead_without_noop_uses_a_one_point_call(c_libs: Path) -> None:
    backend = load_backend(spec(c_libs, "radix2", "shape=plan,kind=fft+ifft"))
    assert backend.describe().details["call_overhead_seconds"] is None  # not measured unasked
    seconds = backend.call_overhead_seconds()
    assert seconds is not None and seconds > 0
    assert backend.call_overhead_method == "one-point fft through radix2"


# -- SPEC errors are usage errors ---------------------------------------------------------------

@pytest.mark.parametrize("options,message", [
    ("dtype=float16", "dtype='float16' must be one of float32, float64, longdouble"),
    ("kind=blah", "kind='blah' is not one of fft, ifft, rfft, irfft"),
    ("kind=fft+ifft", "a one-shot function computes one kind"),
    ("shape=plan,kind=fft+rfft", "mixes complex and real kinds"),
    ("shape=plan,kind=fft+fft", "repeats a kind"),
    ("shape=sideways", "must be one of oneshot, plan"),
    ("threads=2", "unknown option 'threads'"),
    ("plan=radix2_plan", "needs shape=plan"),
    ("max_n=-1", "max_n=-1 must be at least 0"),
    ("max_n=lots", "must be int"),
    ("kind", "must be written key=value"),
    ("noop=no_such_function", "exports no function 'no_such_function'"),
])
def test_bad_options_are_usage_errors(c_libs: Path, options: str, message: str) -> None:
    with pytest.raises(UsageError, match=message.replace("(", r"\(").replace("+", r"\+")):
        load_backend(spec(c_libs, "radix2_fft", options))


def test_missing_library_symbol_and_malformed_specs(c_libs: Path, tmp_path: Path) -> None:
    lib = c_libs / "libradix2.so"
    not_a_library = tmp_path / "notes.so"
    not_a_library.write_text("not a shared library\n")
    cases = {
        f"clib:{tmp_path / 'missing.so'}:fft": "no library file",
        f"clib:{lib}:no_such_fft": "exports no function 'no_such_fft'",
        f"clib:{lib}": "write clib:path/to/lib.so:function",
        f"clib:{lib}:not-a-name": "is not a C function name",
        f"clib:{not_a_library}:fft": "cannot load",
        f"clib:{lib}:radix2_fft[dtype=float64": "options go in one trailing",
    }
    for text, message in cases.items():
        with pytest.raises(UsageError, match=message):
            load_backend(text)
    with pytest.raises(UsageError, match="exports no function 'radix2_fft_plan'"):
        load_backend(f"clib:{lib}:radix2_fft[shape=plan]")


def test_cli_bad_clib_spec_exits_2_with_one_line(tmp_path: Path) -> None:
    proc = subprocess.run([sys.executable, "-m", "fftgauge", "check", "--backend",
                           f"clib:{tmp_path / 'nope.so'}:fft", "--sizes", "8", "--quiet"],
                          capture_output=True, text=True, timeout=120, cwd=EXAMPLE.parent.parent)
    assert proc.returncode == 2
    lines = proc.stderr.strip().splitlines()
    assert len(lines) == 1 and "no library file" in lines[0]


# -- worker processes ---------------------------------------------------------------------------

def test_pickles_as_its_spec(c_libs: Path) -> None:
    backend = load_backend(spec(c_libs, "radix2", "shape=plan,kind=fft+ifft"))
    copy = pickle.loads(pickle.dumps(backend))
    assert isinstance(copy, SharedLibraryBackend) and copy.label == backend.label
    case = Case("fft", "float64", 16)
    x = signal_for(case)
    assert np.array_equal(copy.plan(case).execute(x), backend.plan(case).execute(x))


def test_runs_in_a_worker_process(c_libs: Path) -> None:
    worker_mod = pytest.importorskip("fftgauge.harness.execution.worker")
    case = Case("fft", "float64", 256)
    x = signal_for(case)
    with worker_mod.Worker(spec(c_libs, "radix2", "shape=plan,kind=fft+ifft")) as worker:
        try:
            y = worker.call(jobs.plan_and_execute, case, x, timeout_seconds=60)
        finally:
            worker.close()
    assert relative_error(y, numpy_result(case, x)) <= 2 * accuracy_limit(case)


@pytest.mark.skipif(not sys.platform.startswith("linux") or ctypes.util.find_library("c") is None,
                    reason="needs the C library by its Linux soname")
def test_a_segfault_in_c_code_is_a_failure_not_the_end_of_the_run() -> None:
    # strlen called with the "n" argument as its pointer: strlen((char *) 8) crashes.
    worker_mod = pytest.importorskip("fftgauge.harness.execution.worker")
    libc = ctypes.util.find_library("c")
    with worker_mod.Worker(f"clib:{libc}:strlen") as worker:
        try:
            with pytest.raises(BackendFailure, match="SIGSEGV"):
                worker.call(jobs.plan_and_execute, Case("fft", "float64", 8), np.zeros(8, complex),
                            timeout_seconds=60)
            # the run goes on: the next call gets a fresh child
            assert worker.call(jobs.describe_backend, timeout_seconds=60)["name"].startswith("clib:")
        finally:
            worker.close()
