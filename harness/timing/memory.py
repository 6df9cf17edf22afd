"""Peak extra memory of one execution, and whether a plan works in place: both measured.

"Extra" memory is what one ``plan.execute(x)`` call allocates beyond what it leaves behind
(its output and anything it keeps): the high-water mark during the call minus the memory
held after it. The input is prepared before the measurement and is not counted.

Two methods, because neither sees everything:

``tracemalloc``
    Python's allocation tracer. numpy registers its data buffers with it, so temporaries
    numpy allocates are seen to the byte, even when the allocator reuses memory that is
    already resident. It does not see allocations inside C libraries (FFTW, the scratch
    buffers of numpy's C++ pocketfft: 32 MiB for a complex float64 ``fft`` of 2**20 on
    numpy 2.4, none of it visible to tracemalloc).
``vmhwm``
    The process's resident-set high-water mark, ``VmHWM`` in ``/proc/self/status``, reset
    to the current resident size just before the call by writing ``5`` to
    ``/proc/self/clear_refs`` (Linux 4.0 and later). It sees every allocation that touches
    memory, C-level included, at page resolution (4 KiB), for every thread of the process.
    Limits: the kernel keeps the counters per CPU and sums them approximately, so a reading
    can be off by some pages (up to about 100 KiB seen on Linux 6.18 with 2 CPUs): the call is
    repeated and the smallest reading kept. Memory the allocator hands out again without
    new pages (already resident) is not seen, so glibc's free memory is given back with
    ``malloc_trim(0)`` before the call, and again after it so that temporaries freed to the
    heap leave the resident size the peak is compared with. Small allocations served from
    pages already resident (Python's small-object arenas) stay invisible; anything else the
    process does during the call (another thread allocating) is counted.

:func:`measure_memory` runs the call under each method that works here and reports the
larger estimate (each method only misses allocations, so the larger is closer), with the
method names joined by ``+``. Where ``/proc`` is missing (not Linux, or a sandbox that
forbids ``clear_refs``) only tracemalloc is used and C-level scratch goes unseen.
"""

from __future__ import annotations

import ctypes
import ctypes.util
import gc
import re
import tracemalloc
from contextlib import contextmanager
from dataclasses import dataclass
from functools import lru_cache
from typing import Iterator

import numpy as np

from fftgauge.backends.base import Plan

_STATUS = "/proc/self/status"
_CLEAR_REFS = "/proc/self/clear_refs"
#: Resolution of the ``vmhwm`` method: one page.
PAGE_BYTES = 4096


@dataclass(frozen=True)
class MemoryUse:
    """What :func:`measure_memory` found for one plan and input.

    Attributes
    ----------
    peak_bytes : the larger of the two estimates of peak extra memory (bytes, >= 0).
    method : the methods used, ``"tracemalloc+vmhwm"`` or ``"tracemalloc"``.
    traced_bytes : tracemalloc's estimate (allocations numpy and Python register).
    resident_bytes : VmHWM's estimate, or ``None`` where that method is unavailable.
    in_place : True when the output shares memory with the input or the input changed.
    output_shares_input : the output is (a view of) the input's memory.
    input_changed : the call changed the values of its input array.
    """

    peak_bytes: int
    method: str
    traced_bytes: int
    resident_bytes: int | None
    in_place: bool
    output_shares_input: bool
    input_changed: bool


def _status_bytes(field: str) -> int:
    with open(_STATUS, encoding="ascii") as fh:
        text = fh.read()
    m = re.search(rf"^{field}:\s+(\d+)\s+kB", text, re.MULTILINE)
    if m is None:
        raise OSError(f"{field} not in {_STATUS}")
    return int(m.group(1)) * 1024


def _reset_high_water_mark() -> None:
    with open(_CLEAR_REFS, "w", encoding="ascii") as fh:
        fh.write("5")


@lru_cache(maxsize=1)
def resident_method_available() -> bool:
    """Return True when the VmHWM method works in this process (Linux >= 4.0 with /proc)."""
    try:
        _reset_high_water_mark()
        return _status_bytes("VmHWM") > 0 and _status_bytes("VmRSS") > 0
    except OSError:
        return False


@lru_cache(maxsize=1)
def _malloc_trim():
    name = ctypes.util.find_library("c")
    try:
        libc = ctypes.CDLL(name)
        trim = libc.malloc_trim
    except (OSError, AttributeError, TypeError):  # not glibc
        return None
    trim.argtypes = [ctypes.c_size_t]
    trim.restype = ctypes.c_int
    return trim


@contextmanager
def _objects_frozen() -> Iterator[None]:
    """Inside the block, garbage collections look only at objects made in it.

    The measurement collects garbage before and after every call it measures (so that
    temporaries freed to the heap are given back); with scipy, pyFFTW and pandas loaded a
    full collection walks hundreds of thousands of long-lived objects, 5-20 ms each time
    on the project's machine. One collection first, then :func:`gc.freeze` moves every
    object alive into a generation collections skip; the call's own garbage is new and is
    still collected. :func:`gc.unfreeze` on the way out.
    """
    gc.collect()
    gc.freeze()
    try:
        yield
    finally:
        gc.unfreeze()


def _release_free_memory() -> None:
    gc.collect()
    trim = _malloc_trim()
    if trim is not None:
        trim(0)


def _fresh_input(plan: Plan, x: np.ndarray) -> np.ndarray:
    return plan.prepare(np.array(x, copy=True))


def _resident_extra(plan: Plan, x: np.ndarray) -> int:
    """Return VmHWM during one call minus VmRSS after it (bytes, >= 0)."""
    x_in = _fresh_input(plan, x)
    _release_free_memory()
    _reset_high_water_mark()
    y = plan.execute(x_in)
    _release_free_memory()  # temporaries freed to the heap leave RSS; VmHWM keeps the peak
    high = _status_bytes("VmHWM")
    after = _status_bytes("VmRSS")
    del y
    return max(0, high - after)


def _traced_extra(plan: Plan, x: np.ndarray) -> int:
    """Return tracemalloc's peak during one call minus what is traced after it (bytes, >= 0)."""
    x_in = _fresh_input(plan, x)
    gc.collect()
    started = not tracemalloc.is_tracing()
    if started:
        tracemalloc.start()
    try:
        tracemalloc.reset_peak()
        y = plan.execute(x_in)
        after, peak = tracemalloc.get_traced_memory()
        del y
    finally:
        if started:
            tracemalloc.stop()
    return max(0, peak - after)


def detect_in_place(plan: Plan, x: np.ndarray) -> tuple[bool, bool]:
    """Run one call and return ``(output_shares_input, input_changed)``.

    ``output_shares_input`` is :func:`numpy.shares_memory` of the output and the prepared
    input; ``input_changed`` compares the prepared input before and after the call (NaN
    equal to NaN). ``x`` itself is never passed to the plan (a copy is).
    """
    x_in = _fresh_input(plan, x)
    before = np.array(x_in, copy=True)
    y = plan.execute(x_in)
    shares = isinstance(y, np.ndarray) and bool(np.shares_memory(y, x_in))
    changed = not np.array_equal(before, x_in, equal_nan=True)
    return shares, changed


def measure_memory(plan: Plan, x: np.ndarray, repeats: int = 3) -> MemoryUse:
    """Measure the peak extra memory of one ``plan.execute`` and whether it works in place.

    Runs the plan once to warm it up (lazy caches are plan state, not per-call memory) and
    to detect in-place operation, then ``repeats`` times under VmHWM (keeping the smallest
    reading, see the module docstring) and once under tracemalloc. Every call gets a fresh
    copy of ``x`` through ``plan.prepare``.

    Returns
    -------
    MemoryUse

    Raises
    ------
    Exception
        Whatever the plan raises.
    """
    with _objects_frozen():
        shares, changed = detect_in_place(plan, x)
        resident = None
        if resident_method_available():
            resident = min(_resident_extra(plan, x) for _ in range(max(1, repeats)))
        traced = _traced_extra(plan, x)
    method = "tracemalloc+vmhwm" if resident is not None else "tracemalloc"
    peak = max(traced, resident or 0)
    return MemoryUse(peak_bytes=int(peak), method=method, traced_bytes=int(traced),
                     resident_bytes=resident, in_place=shares or changed,
                     output_shares_input=shares, input_changed=changed)
