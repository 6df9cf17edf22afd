"""What pyFFTW's 1-D plans (:mod:`fftgauge.backends.pyfftw_plans`) and shaped plans
(:mod:`fftgauge.backends.pyfftw_shaped`) share: the buffers FFTW is planned on (SIMD-aligned,
or deliberately offset from that alignment), the planner flags, the norm factor FFTW's
unscaled output is multiplied by, and the plan that owns its buffers and runs FFTW on them.

A plan owns one input and one output buffer and the FFTW object planned on them.
:meth:`FftwBufferPlan.prepare` copies an input into the plan's own input buffer and returns
that buffer; :meth:`FftwBufferPlan.execute` on that buffer runs FFTW with no copy at all; on
any other array it copies in under the plan's lock and returns a copy of the output. The
caller's array is never written to: FFTW only ever sees the plan's buffers.
"""

from __future__ import annotations

import threading
from typing import Any

import numpy as np
import pyfftw

from fftgauge.backends.base import Plan
from fftgauge.harness.cases import norm_factor

__all__ = ["FftwBufferPlan", "fftw_buffer", "fftw_scale", "planner_flags"]


def fftw_buffer(shape: int | tuple[int, ...], dtype: Any, aligned: bool) -> np.ndarray:
    """Return an uninitialised C-ordered array of ``shape`` and ``dtype`` for FFTW.

    ``aligned`` True: aligned to ``pyfftw.simd_alignment`` bytes. False: deliberately offset
    from that alignment by one real element (still aligned for numpy), so that the cost of
    unaligned data can be measured.
    """
    dtype = np.dtype(dtype)
    if aligned:
        return pyfftw.empty_aligned(shape, dtype=dtype)
    shape = (shape,) if isinstance(shape, (int, np.integer)) else tuple(shape)
    offset = dtype.alignment
    nbytes = int(np.prod(shape, dtype=np.int64)) * dtype.itemsize
    raw = pyfftw.empty_aligned(nbytes + offset, dtype=np.uint8)
    return raw[offset:offset + nbytes].view(dtype).reshape(shape)


def planner_flags(effort_flag: str, aligned: bool, destroy_input: bool = False) -> tuple[str, ...]:
    """Return the FFTW planner flags: the effort's (``FFTW_ESTIMATE``, ...), ``FFTW_UNALIGNED``
    for unaligned buffers, ``FFTW_DESTROY_INPUT`` where the transform cannot keep its input."""
    return (effort_flag,) + (() if aligned else ("FFTW_UNALIGNED",)) + (
        ("FFTW_DESTROY_INPUT",) if destroy_input else ())


def fftw_scale(points: int, norm: str, is_inverse: bool, real_dtype: Any) -> np.floating | None:
    """Return the factor FFTW's unscaled output of ``points`` points (N) is multiplied by, or None when it is 1.

    Which side is scaled, and by what, is :func:`fftgauge.harness.cases.norm_factor`'s rule (the
    array API standard's ``norm``); the factor is evaluated here in the case's own real
    precision ``real_dtype``, so that a long-double transform is not scaled by a double.
    """
    if norm_factor(points, norm, is_inverse) == 1.0:
        return None
    real = np.dtype(real_dtype).type
    if norm == "ortho":
        return real(1) / np.sqrt(real(points))
    return real(1) / real(points)


class FftwBufferPlan(Plan):
    """One FFTW plan on buffers the plan owns.

    Two ways to run it:

    - the fast path, for timing: ``y = plan.execute(plan.prepare(x))`` runs FFTW on the
      prepared buffer with no copy and returns the plan's output buffer, which the next
      call overwrites (as :class:`~fftgauge.backends.base.Plan` allows): copy it to keep it. Not for
      several threads at once (they would share the buffers).
    - any other array: ``plan.execute(x)`` copies ``x`` in, runs under the plan's lock and
      returns a fresh array, so it is safe from several threads at once.

    ``destroys_input`` True (a plan made with ``FFTW_DESTROY_INPUT``): :meth:`prepare` keeps a
    copy of the input, and every run on the prepared buffer first copies it back, so repeated
    runs give the same answer (the copy is part of what the transform costs).
    """

    def __init__(self, case: Any, fftw: Any, input_buffer: np.ndarray, output_buffer: np.ndarray,
                 scale: np.floating | None, destroys_input: bool = False):
        super().__init__(case)
        self._fftw = fftw
        self._input = input_buffer
        self._output = output_buffer
        self._kept = np.empty_like(input_buffer) if destroys_input else None
        self._scale = scale
        self._lock = threading.Lock()

    @property
    def fftw(self) -> Any:
        """The ``pyfftw.FFTW`` object, for inspection (``flags``, ``simd_aligned``, ``N``, ``axes``)."""
        return self._fftw

    def prepare(self, x: np.ndarray) -> np.ndarray:
        """Copy ``x`` into the plan's input buffer and return that buffer.

        The buffer holds the latest input given to :meth:`prepare` or :meth:`execute`.
        """
        with self._lock:
            self._input[...] = x
            if self._kept is not None:
                self._kept[...] = x
        return self._input

    def execute(self, x: np.ndarray) -> np.ndarray:
        """Return the transform of ``x``.

        When ``x`` is the buffer :meth:`prepare` returned, FFTW runs on it in place and the
        plan's output buffer is returned (no copy either way). Any other array (any strides,
        including negative ones) is copied into the input buffer under the plan's lock, and
        a copy of the output is returned.
        """
        if x is self._input:
            if self._kept is not None:
                self._input[...] = self._kept
            return self._run()
        with self._lock:
            self._input[...] = x
            return self._run().copy()

    def _run(self) -> np.ndarray:
        """Execute FFTW on the buffers, apply the norm factor, return the output buffer."""
        self._fftw.execute()
        if self._scale is not None:
            np.multiply(self._output, self._scale, out=self._output)
        return self._output

    def close(self) -> None:
        """Drop the FFTW object and the buffers."""
        self._fftw = None
        self._input = self._output = self._kept = None  # type: ignore[assignment]
