"""The cupy adapter (backends/cupy_fft.py).

This machine has no GPU and no cupy, so most tests put a FAKE ``cupy`` module in
``sys.modules`` (monkeypatch): a "device" whose arrays are numpy arrays behind a wrapper that
refuses implicit conversion (as cupy's do), whose transforms are numpy.fft's, whose results
are marked ready only by a device synchronisation, and which counts copies, launches and plan
cache entries. It checks the adapter's plumbing (availability, the plan cache, where the
synchronisation and the copies happen, n and norm passed through, the engine's timer and
memory probe on a prepared device input), not cuFFT: the one test against the real library
needs cupy and a CUDA device and is skipped here.

Ground truth for the plumbing check: mpmath at 50 digits (tests/mpmath_dft.py) on the fake's
outputs, tolerance 4 eps log2 N (Higham's bound, as in tests/test_library_adapters.py).
"""

from __future__ import annotations

import math
import sys
import types

import numpy as np
import pytest

from fftgauge.backends.registry import list_backends, load_backend
from fftgauge.harness.cases import KINDS, NORMS, Case
from fftgauge.harness.errors import UsageError
from mpmath_dft import relative_error_vs_mpmath

MODULE = "fftgauge.backends.cupy_fft"
INSTALL = "pip install 'fftgauge[cupy]'"


class FakeDeviceArray:
    """A fake device array: numpy data, refused by numpy.asarray like cupy's, ready only after a synchronisation."""

    def __init__(self, host: np.ndarray, device: "FakeDevice", ready: bool = True):
        self.host, self.device, self.ready = host, device, ready

    @property
    def shape(self):
        return self.host.shape

    @property
    def dtype(self):
        return self.host.dtype

    def __array__(self, *args, **kwargs):
        raise TypeError("Implicit conversion to a NumPy array is not allowed")


class FakeDevice:
    """What the fake cupy counts: copies each way, launches, synchronisations, plans made, the cache size."""

    def __init__(self, devices: int = 1, count_error: Exception | None = None):
        self.devices, self.count_error = devices, count_error
        self.to_device = self.to_host = self.launches = self.syncs = 0
        self.plans: set[tuple] = set()
        self.cache_size = 16
        self.pending: list[FakeDeviceArray] = []


def fake_cupy(state: FakeDevice) -> types.ModuleType:
    """Return a module with the parts of cupy's API the adapter uses, backed by numpy."""
    cupy = types.ModuleType("cupy")
    cupy.__version__ = "0.0+fake"

    def asarray(a, dtype=None):
        state.to_device += 1
        return FakeDeviceArray(np.array(a, dtype=dtype, copy=True), state)

    def asnumpy(a):
        a.ready = True  # a copy to the host is ordered after the work on the stream: it waits for it
        state.to_host += 1
        return a.host.copy()

    def zeros(n, dtype):
        return FakeDeviceArray(np.zeros(n, dtype=dtype), state)

    def transform(kind):
        def run(a, n=None, norm=None):
            assert isinstance(a, FakeDeviceArray)
            key = (kind, n, str(a.dtype), norm)
            if key not in state.plans:  # cuFFT plans are made on a first call and kept in the cache
                state.plans.add(key)
            state.launches += 1
            out = FakeDeviceArray(getattr(np.fft, kind)(a.host, n=n, norm=norm), state, ready=False)
            state.pending.append(out)
            return out
        return run

    def device_synchronize():
        state.syncs += 1
        for a in state.pending:
            a.ready = True
        state.pending.clear()

    def device_count():
        if state.count_error is not None:
            raise state.count_error
        return state.devices

    class Device:
        def __init__(self, index=0):
            self.index = index

        def __enter__(self):
            return self

        def __exit__(self, *exc):
            return False

    class Cache:
        def get_size(self):
            return state.cache_size

        def set_size(self, size):
            state.cache_size = size

    cupy.asarray, cupy.asnumpy, cupy.zeros = asarray, asnumpy, zeros
    cupy.fft = types.SimpleNamespace(**{k: transform(k) for k in KINDS},
                                     config=types.SimpleNamespace(get_plan_cache=Cache))
    cupy.cuda = types.SimpleNamespace(Device=Device, runtime=types.SimpleNamespace(
        getDeviceCount=device_count, deviceSynchronize=device_synchronize,
        getDeviceProperties=lambda i: {"name": b"Fake GPU"}, runtimeGetVersion=lambda: 12080))
    return cupy


@pytest.fixture
def with_cupy(monkeypatch):
    """Put a fake cupy in place and forget the adapter module before and after (it checks the device at import)."""
    def install(state: FakeDevice | None) -> FakeDevice | None:
        monkeypatch.setitem(sys.modules, "cupy", None if state is None else fake_cupy(state))
        sys.modules.pop(MODULE, None)
        return state

    yield install
    sys.modules.pop(MODULE, None)


# --------------------------------------------------------------------------- unavailable

def test_without_cupy_the_backend_is_unavailable_with_the_install_line(with_cupy):
    with_cupy(None)  # import cupy raises ImportError, as where it is not installed
    with pytest.raises(UsageError, match=r"backend 'cupy' is not available: .*cupy.*; to fix: pip install "
                                         r"'fftgauge\[cupy\]'"):
        load_backend("cupy")
    info = next(i for i in list_backends() if i.name == "cupy")
    assert not info.available and INSTALL in info.reason


@pytest.mark.parametrize("state, why", [
    (FakeDevice(devices=0), "the CUDA runtime reports 0 devices"),
    (FakeDevice(count_error=RuntimeError("cudaErrorNoDevice: no CUDA-capable device is detected")),
     "RuntimeError: cudaErrorNoDevice: no CUDA-capable device is detected"),
])
def test_cupy_without_a_device_is_unavailable_with_the_reason(with_cupy, state, why):
    with_cupy(state)
    with pytest.raises(UsageError) as err:
        load_backend("cupy")
    text = str(err.value)
    assert "is not available: cupy 0.0+fake is installed but finds no CUDA device" in text
    assert why in text and INSTALL in text and "\n" not in text


def test_a_device_number_past_the_last_is_refused(with_cupy):
    with_cupy(FakeDevice(devices=1))
    with pytest.raises(ValueError, match="no CUDA device 1; this machine has 1"):
        load_backend("cupy[device=1]")


# --------------------------------------------------------------------------- plumbing on the fake device

def test_claims_and_version(with_cupy):
    with_cupy(FakeDevice())
    backend = load_backend("cupy")
    caps = backend.capabilities()
    assert caps.kinds == KINDS and caps.norms == NORMS and caps.dtypes == ("float32", "float64")
    assert backend.version == "0.0+fake (device 0: Fake GPU, CUDA runtime 12080)"


def test_planning_makes_and_caches_the_plan_and_times_the_copies(with_cupy):
    state = with_cupy(FakeDevice())
    backend = load_backend("cupy")
    plan = backend.plan(Case("rfft", "float32", 64, "ortho"))
    assert state.plans == {("rfft", 64, "float32", "ortho")} and state.cache_size == 128
    t = plan.transfer_seconds
    assert t["bytes_in"] == 64 * 4 and t["bytes_out"] == 33 * 8  # float32 in, complex64 out (n/2+1 bins)
    assert t["host_to_device"] > 0 and t["device_to_host"] > 0
    assert backend.details() == {"device": "Fake GPU", "plan_cache_size": 128,
                                 "transfer_seconds": {"rfft float32 n=64 norm=ortho": t}}
    x = plan.prepare(np.arange(64, dtype=np.float32))
    before = (len(state.plans), state.launches)
    for _ in range(3):
        plan.execute(x)
    assert len(state.plans) == before[0] and state.launches == before[1] + 3  # no new plan: the cache serves


def test_a_timed_call_synchronises_and_copies_nothing(with_cupy):
    """On a prepared input: one launch, one device synchronisation, no copy either way, a result that is ready."""
    state = with_cupy(FakeDevice())
    plan = load_backend("cupy").plan(Case("fft", "float64", 32))
    x = plan.prepare(np.ones(32, dtype=np.complex128))
    counts = (state.to_device, state.to_host, state.launches, state.syncs)
    y = plan.execute(x)
    assert (state.to_device, state.to_host, state.launches, state.syncs) == (counts[0], counts[1], counts[2] + 1,
                                                                            counts[3] + 1)
    assert y.data.ready and np.asarray(y).shape == (32,)  # the engine reads it back outside the timed call
    np.testing.assert_allclose(np.asarray(y), np.fft.fft(np.ones(32)))


def test_host_inputs_come_back_to_the_host(with_cupy):
    """The battery's path: a numpy array in, a numpy array out (copied in, transformed, copied back)."""
    state = with_cupy(FakeDevice())
    plan = load_backend("cupy").plan(Case("irfft", "float64", 10, "forward"))
    spectrum = np.fft.rfft(np.arange(10.0), norm="forward")
    y = plan.execute(spectrum)
    assert isinstance(y, np.ndarray) and y.dtype == np.float64
    np.testing.assert_allclose(y, np.arange(10.0), atol=1e-12)
    assert state.to_host >= 1


def test_every_claimed_case_matches_mpmath_through_the_adapter(with_cupy):
    """n, norm and precision reach the library as asked: every kind, norm and precision at a few sizes."""
    with_cupy(FakeDevice())
    backend = load_backend("cupy")
    for kind in KINDS:
        for dtype in ("float32", "float64"):
            for norm in NORMS:
                for n in (1, 2, 7, 12, 16):
                    case = Case(kind, dtype, n, norm)
                    eps = float(np.finfo(case.real_dtype).eps)
                    assert relative_error_vs_mpmath(backend, case) <= 4 * eps * max(1.0, math.log2(n)), case


def test_the_engines_timer_and_memory_probe_take_a_device_input(with_cupy):
    """fftgauge's own timer and memory measurement run on the plan (outputs stay on the device)."""
    from fftgauge.harness.timing.memory import detect_in_place
    from fftgauge.harness.timing.timer import TimerSettings, measure

    state = with_cupy(FakeDevice())
    plan = load_backend("cupy").plan(Case("fft", "float32", 16))
    x = np.ones(16, dtype=np.complex64)
    m = measure(plan, x, TimerSettings(samples=5, min_samples=5, budget_seconds=0.05))
    assert m.samples >= 5 and m.seconds >= 0
    assert detect_in_place(plan, x) == (False, False)
    assert state.syncs >= state.launches - 1  # every launch after planning's was waited for inside its call


def test_the_copies_timed_in_planning_reach_the_time_row(with_cupy):
    """The timing job (harness/timing/case_job.py) carries the plan's transfer times into the
    case's time row as host_to_device_seconds, device_to_host_seconds, host_to_device_bytes,
    device_to_host_bytes: the very values the plan measured (the backend's details hold them
    too); the bytes are the case's input and output sizes (float32 in, complex64 out, N/2+1
    bins); a backend without a device leaves the four fields None."""
    import dataclasses

    from fftgauge.harness.rows import TimeRow
    from fftgauge.harness.timing.case_job import time_case

    with_cupy(FakeDevice())
    backend = load_backend("cupy")
    options = dict(samples=5, min_samples=5, budget_seconds=0.05, warmup_seconds=1e-3, measure_memory=False)
    row = time_case(backend, ("rfft", "float32", 64, "ortho"), options)
    measured = backend.details()["transfer_seconds"]["rfft float32 n=64 norm=ortho"]
    assert (row["host_to_device_bytes"], row["device_to_host_bytes"]) == (64 * 4, 33 * 8)
    assert (row["host_to_device_seconds"], row["device_to_host_seconds"]) == (measured["host_to_device"],
                                                                              measured["device_to_host"])
    assert all(isinstance(row[k], float) and row[k] >= 0 for k in ("host_to_device_seconds",
                                                                    "device_to_host_seconds"))
    names = [f.name for f in dataclasses.fields(TimeRow)]
    assert TimeRow(**{k: row[k] for k in names}).as_dict() == row  # nothing outside the row's fields
    from fftgauge.harness.results import validate_results

    envelope = {"schema": "fftgauge-time/1", "rows": [row]}
    validate_results("run.json", envelope, ("fftgauge-time/1",))  # the loader's checks take the fields
    with pytest.raises(UsageError, match="row 0 field 'host_to_device_seconds' is -1.0; it cannot be negative"):
        validate_results("run.json", {**envelope, "rows": [dict(row, host_to_device_seconds=-1.0)]},
                         ("fftgauge-time/1",))
    plain = time_case(load_backend("numpy"), ("rfft", "float32", 64, "ortho"), options)
    assert all(plain[k] is None for k in ("host_to_device_seconds", "device_to_host_seconds",
                                          "host_to_device_bytes", "device_to_host_bytes"))


# --------------------------------------------------------------------------- the real library

def test_cupy_on_a_gpu_matches_mpmath():
    """Against cuFFT itself: needs cupy and a CUDA device (never on this project's CPU machines)."""
    cupy = pytest.importorskip("cupy", reason=f"cupy is not installed ({INSTALL}, on a machine with an NVIDIA GPU)")
    try:
        devices = cupy.cuda.runtime.getDeviceCount()
    except Exception as exc:  # noqa: BLE001
        pytest.skip(f"cupy finds no CUDA device: {exc}")
    if not devices:
        pytest.skip("cupy finds no CUDA device")
    from test_library_adapters import assert_matches_mpmath

    assert_matches_mpmath("cupy")
