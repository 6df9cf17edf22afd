"""fftgauge.harness.timing.memory: the peak extra memory of one call and in-place detection, measured on
synthetic plans whose allocations are known by construction, and on numpy.fft."""

from __future__ import annotations

import ctypes
import ctypes.util

import numpy as np
import pytest

from fftgauge.backends.base import Plan
from fftgauge.backends.null import NullBackend
from fftgauge.backends.numpy_fft import NumpyBackend
from fftgauge.harness.cases import Case
from fftgauge.harness.timing.memory import detect_in_place, measure_memory, resident_method_available

MiB = 2**20
CASE = Case("fft", "float64", 1024)
X = (np.arange(1024) + 0.5j).astype(np.complex128)


def _within(measured: int, expected: int) -> bool:
    """The tolerance the task fixes: within 10% + 1 MiB."""
    return abs(measured - expected) <= 0.1 * expected + MiB


class NumpyTemporaryPlan(Plan):
    """Allocates (and writes) an 8 MiB numpy temporary, frees it, returns a copy."""

    def execute(self, x):
        scratch = np.ones(MiB, dtype=np.float64)  # 8 MiB, registered with tracemalloc
        scratch[0] = x[0].real
        return x.copy()


class CTemporaryPlan(Plan):
    """Allocates an 8 MiB buffer with C malloc (invisible to tracemalloc), touches it, frees it."""

    _libc = None

    def execute(self, x):
        libc = type(self)._libc
        ptr = libc.malloc(8 * MiB)
        ctypes.memset(ptr, 1, 8 * MiB)
        libc.free(ptr)
        return x.copy()


class ViewPlan(Plan):
    def execute(self, x):
        return x[::-1]


class OverwritingPlan(Plan):
    def execute(self, x):
        x *= 2
        return x.copy()


def _libc():
    try:
        libc = ctypes.CDLL(ctypes.util.find_library("c"))
        libc.malloc.restype = ctypes.c_void_p
        libc.malloc.argtypes = [ctypes.c_size_t]
        libc.free.argtypes = [ctypes.c_void_p]
        return libc
    except (OSError, AttributeError, TypeError):
        return None


def test_numpy_temporary_is_measured():
    use = measure_memory(NumpyTemporaryPlan(CASE), X)
    assert _within(use.peak_bytes, 8 * MiB), use
    assert _within(use.traced_bytes, 8 * MiB), use
    assert use.method in ("tracemalloc+vmhwm", "tracemalloc")
    assert not use.in_place


@pytest.mark.skipif(not resident_method_available(), reason="VmHWM reset (/proc/self/clear_refs) unavailable")
def test_c_level_temporary_is_seen_by_vmhwm_only():
    libc = _libc()
    if libc is None:
        pytest.skip("no C library to call malloc from")
    CTemporaryPlan._libc = libc
    use = measure_memory(CTemporaryPlan(CASE), X)
    assert use.method == "tracemalloc+vmhwm"
    assert use.traced_bytes < MiB, use  # tracemalloc does not see C malloc
    assert _within(use.resident_bytes, 8 * MiB), use
    assert _within(use.peak_bytes, 8 * MiB), use


def test_numpy_fft_large_is_plausible():
    case = Case("fft", "float64", 2**20)
    x = np.random.default_rng(0).standard_normal(case.n).astype(np.complex128)
    use = measure_memory(NumpyBackend().plan(case), x)
    output_bytes = case.output_length * case.output_dtype.itemsize
    assert 0 <= use.peak_bytes < 20 * output_bytes, use
    assert not use.in_place


def test_view_of_input_is_in_place():
    shares, changed = detect_in_place(ViewPlan(CASE), X)
    assert shares and not changed
    use = measure_memory(ViewPlan(CASE), X)
    assert use.in_place and use.output_shares_input
    assert use.peak_bytes < MiB


def test_overwritten_input_is_in_place_and_callers_array_is_untouched():
    x = X.copy()
    use = measure_memory(OverwritingPlan(CASE), x)
    assert use.in_place and use.input_changed and not use.output_shares_input
    np.testing.assert_array_equal(x, X)


def test_null_and_numpy_in_place_flags():
    assert measure_memory(NullBackend().plan(CASE), X).in_place
    assert not measure_memory(NumpyBackend().plan(CASE), X).in_place
