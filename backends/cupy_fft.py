"""CuPy: ``cupy.fft`` on an NVIDIA GPU (cuFFT), planned through CuPy's plan cache, the
device synchronised inside every timed call, host-device transfers timed apart.

Availability: the module imports cupy and asks the CUDA runtime how many devices there are
(``cupy.cuda.runtime.getDeviceCount``); cupy missing, failing to import (a missing CUDA
runtime library) or no device (no GPU, no driver) makes the import fail, so the registry
reports the backend ``unavailable`` with the reason and the install line.

Kinds, precisions, norms (from CuPy's reference of ``cupy.fft``): fft, ifft, rfft and irfft
with numpy's ``n`` and the norms ``backward``, ``ortho`` and ``forward``; float32 inputs stay
in single precision (complex64 out, unlike numpy before 2.0) and float64 in double; no long
double (cuFFT has none). Float16 is experimental in CuPy and not claimed.

Planning is the plan cache: cuFFT plans are made by CuPy on a transform's first call for a
size, type and device, and kept in its per-thread, per-device LRU cache
(``cupy.fft.config.get_plan_cache``; 16 plans by default, raised here to at least
:data:`PLAN_CACHE_SIZE` so that the battery's cases do not evict each other).
:meth:`CupyBackend.plan` calls the transform once on a device array of the case's shape
(that call makes and caches the plan and loads the kernels) and waits for it, so the plan's
cost is planning time; every later call of the case finds its plan in the cache. (A plan
object from ``cupyx.scipy.fftpack.get_fft_plan`` would share one work area between threads,
which the battery's thread check calls at once; the per-thread cache does not.)

Timing: :meth:`CupyPlan.prepare` copies the input to the device (outside the timed region)
and returns a :class:`DeviceArray`; :meth:`CupyPlan.execute` on it launches the transform
and synchronises the device before it returns (CuPy launches asynchronously: a call that
returned at once would time nothing), and returns the result still on the device. The
copies are timed apart: :meth:`CupyBackend.plan` times one host-to-device copy of the
case's input and one device-to-host copy of its output (each the median of
:data:`TRANSFER_REPEATS`, synchronised) and keeps them on the plan
(``plan.transfer_seconds``) and in the backend's :meth:`~CupyBackend.details`
(``transfer_seconds`` per case planned in the process); the timing job carries them into the
case's time row (:meth:`CupyPlan.time_row_fields`: ``host_to_device_seconds``,
``device_to_host_seconds``, ``host_to_device_bytes``, ``device_to_host_bytes``; the row's
``seconds`` does not include them). Called on a host (numpy) array, as
the battery does, ``execute`` copies in, transforms and copies the result back: the answer
the user would get, end to end.
"""

from __future__ import annotations

import statistics
import threading
import time
from typing import Any

import numpy as np

try:
    import cupy
except ImportError:
    raise
except Exception as exc:  # noqa: BLE001 - an installed but broken cupy (no CUDA runtime) is "unavailable"
    raise ImportError(f"cupy is installed but fails to import: {type(exc).__name__}: {exc}") from None

from fftgauge.backends.base import Backend, Capabilities, OptionSpec, Plan
from fftgauge.harness.cases import Case

#: Fewest plans the per-thread plan cache keeps (CuPy's default is 16).
PLAN_CACHE_SIZE = 128
#: Copies per direction whose median is the reported transfer time.
TRANSFER_REPEATS = 5
#: The plan's transfer measurements (``plan.transfer_seconds`` keys) and the time-row fields
#: they are carried in (:class:`fftgauge.harness.rows.TimeRow`).
TIME_ROW_FIELDS = {"host_to_device": "host_to_device_seconds", "device_to_host": "device_to_host_seconds",
                   "bytes_in": "host_to_device_bytes", "bytes_out": "device_to_host_bytes"}


def device_count() -> tuple[int, str | None]:
    """Return (number of CUDA devices, why there are none or None)."""
    try:
        count = int(cupy.cuda.runtime.getDeviceCount())
    except Exception as exc:  # noqa: BLE001 - cupy's CUDARuntimeError when there is no driver or GPU
        return 0, f"{type(exc).__name__}: {exc}"
    return count, None if count else "the CUDA runtime reports 0 devices"


_COUNT, _WHY = device_count()
if not _COUNT:
    raise ImportError(f"cupy {getattr(cupy, '__version__', '?')} is installed but finds no CUDA device ({_WHY}); "
                      f"cupy needs an NVIDIA GPU and its driver")


class DeviceArray:
    """An array on the GPU, as :meth:`CupyPlan.prepare` and :meth:`CupyPlan.execute` hand it out.

    ``data`` is the cupy array. ``numpy.asarray`` of it copies it to the host (the engine
    inspects prepared inputs that way, outside the timed region; cupy itself refuses an
    implicit conversion).
    """

    def __init__(self, data: Any):
        self.data = data

    @property
    def shape(self) -> tuple[int, ...]:
        return tuple(self.data.shape)

    @property
    def dtype(self) -> np.dtype:
        return np.dtype(self.data.dtype)

    def __array__(self, dtype: Any = None, copy: Any = None) -> np.ndarray:
        host = cupy.asnumpy(self.data)
        return host if dtype is None else host.astype(dtype, copy=False)


def synchronise() -> None:
    """Wait until the current device has finished all the work launched on it."""
    cupy.cuda.runtime.deviceSynchronize()


def median_seconds(action: Any, repeats: int = TRANSFER_REPEATS) -> float:
    """Return the median wall time in seconds of ``repeats`` calls of ``action`` (each synchronised)."""
    times = []
    for _ in range(repeats):
        start = time.perf_counter_ns()
        action()
        synchronise()
        times.append((time.perf_counter_ns() - start) / 1e9)
    return statistics.median(times)


class CupyPlan(Plan):
    """One case's transform on the device; its cuFFT plan is in CuPy's plan cache."""

    def __init__(self, case: Case, fn: Any, device: Any, transfer_seconds: dict[str, float]):
        super().__init__(case)
        self._fn, self._device = fn, device
        self._kwargs = {"n": case.n, "norm": case.norm}
        self.transfer_seconds = transfer_seconds

    def prepare(self, x: np.ndarray) -> DeviceArray:
        """Return ``x`` copied to the device in the case's input dtype (outside the timed region)."""
        with self._device:
            data = cupy.asarray(np.ascontiguousarray(x, dtype=self.case.input_dtype))
            synchronise()
        return DeviceArray(data)

    def time_row_fields(self) -> dict[str, Any]:
        """Return the copies timed in planning as time-row fields (:data:`TIME_ROW_FIELDS`):
        ``host_to_device_seconds``, ``device_to_host_seconds``, ``host_to_device_bytes``,
        ``device_to_host_bytes``."""
        return {field: self.transfer_seconds[key] for key, field in TIME_ROW_FIELDS.items()}

    def execute(self, x: Any) -> Any:
        """Return the transform of ``x``: a :class:`DeviceArray` for a prepared input (the device
        synchronised before returning), a numpy array for a host array (copied in and back)."""
        if isinstance(x, DeviceArray):
            with self._device:
                y = self._fn(x.data, **self._kwargs)
                synchronise()
            return DeviceArray(y)
        with self._device:
            return cupy.asnumpy(self._fn(self.prepare(x).data, **self._kwargs))


class CupyBackend(Backend):
    """cupy.fft.fft / ifft / rfft / irfft on one CUDA device.

    Options
    -------
    device : int, default 0
        The CUDA device's number.
    """

    name = "cupy"
    description = ("cupy.fft (cuFFT) on a CUDA GPU: plans in CuPy's plan cache (planning), the device "
                   "synchronised in every timed call, host-device copies timed apart (details)")
    options = {"device": OptionSpec(int, 0, "CUDA device number", minimum=0)}

    def __init__(self, **opts: Any):
        super().__init__(**opts)
        if self.opts["device"] >= _COUNT:
            raise ValueError(f"cupy: no CUDA device {self.opts['device']}; this machine has {_COUNT} "
                             f"(devices 0..{_COUNT - 1})")
        self.device = cupy.cuda.Device(self.opts["device"])
        self.transfers: dict[str, dict[str, float]] = {}
        self.lock = threading.Lock()

    @property
    def version(self) -> str:
        """cupy's version and the device, e.g. ``14.2.0 (device 0: NVIDIA H200, CUDA runtime 12080)``."""
        return f"{cupy.__version__} (device {self.opts['device']}: {self.device_name()}, CUDA runtime " \
               f"{cupy.cuda.runtime.runtimeGetVersion()})"

    def device_name(self) -> str:
        """Return the device's name as the CUDA runtime reports it."""
        name = cupy.cuda.runtime.getDeviceProperties(self.opts["device"]).get("name", b"?")
        return name.decode(errors="replace") if isinstance(name, bytes) else str(name)

    def capabilities(self) -> Capabilities:
        """Every kind and norm, any size, float32 and float64; planning is separate (the plan cache)."""
        return Capabilities(dtypes=("float32", "float64"), separate_planning=True)

    def plan_cache(self) -> Any:
        """Return this thread's plan cache of the device, holding at least :data:`PLAN_CACHE_SIZE` plans."""
        with self.device:
            cache = cupy.fft.config.get_plan_cache()
            size = cache.get_size()
            if 0 <= size < PLAN_CACHE_SIZE:
                cache.set_size(PLAN_CACHE_SIZE)
            return cache

    def details(self) -> dict[str, Any]:
        """The device, the plan cache's size, and the transfer times of every case planned so far."""
        with self.lock:
            transfers = {label: dict(t) for label, t in self.transfers.items()}
        return {"device": self.device_name(), "plan_cache_size": self.plan_cache().get_size(),
                "transfer_seconds": transfers}

    def transfer_times(self, case: Case) -> dict[str, float]:
        """Return the seconds of one host-to-device copy of the case's input and one device-to-host
        copy of its output (medians of :data:`TRANSFER_REPEATS`), with the bytes each moves."""
        host_in = np.zeros(case.input_length, dtype=case.input_dtype)
        with self.device:
            device_out = cupy.zeros(case.output_length, dtype=case.output_dtype)
            h2d = median_seconds(lambda: cupy.asarray(host_in))
            d2h = median_seconds(lambda: cupy.asnumpy(device_out))
        return {"host_to_device": h2d, "device_to_host": d2h, "bytes_in": int(host_in.nbytes),
                "bytes_out": int(case.output_length * case.output_dtype.itemsize)}

    def plan(self, case: Case) -> CupyPlan:
        """Make the case's cuFFT plan (a first call, cached by CuPy), time the copies, return the plan."""
        fn = getattr(cupy.fft, case.kind)
        self.plan_cache()
        with self.device:
            warm = cupy.zeros(case.input_length, dtype=case.input_dtype)
            fn(warm, n=case.n, norm=case.norm)        # makes and caches the plan: planning time
            synchronise()
        transfers = self.transfer_times(case)
        with self.lock:
            self.transfers[case.label()] = transfers
        return CupyPlan(case, fn, self.device, transfers)
