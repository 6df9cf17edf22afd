"""pyFFTW's batched and N-D transforms: one FFTW plan on the case's shape, axes and layout.

:meth:`fftgauge.backends.pyfftw_plans.PyfftwBackend.plan_shaped` builds a
:class:`PyfftwShapedPlan` (the timed planning step). FFTW plans on the array it is given,
strides included, so the plan's input buffer lies in memory as the case's layout says (C,
Fortran, every second element, negative strides; :func:`~fftgauge.harness.shapes.case.lay_out`)
and FFTW runs on that layout itself. One FFTW plan covers every transformed axis (FFTW's
rank-d transform, the batch as its "howmany" loop); the real kinds halve the last listed
axis, as numpy's.

FFTW's multi-dimensional complex-to-real transforms cannot keep their input (FFTW's manual:
``FFTW_PRESERVE_INPUT`` is not available for multi-dimensional c2r plans), so for
``irfftn`` the plan is made with ``FFTW_DESTROY_INPUT`` and every execution first copies
the prepared input into FFTW's buffer: the copy is part of what the transform costs.
"""

from __future__ import annotations

import threading
from typing import Any

import numpy as np
import pyfftw

from fftgauge.backends.base import Plan
from fftgauge.harness.cases import norm_factor
from fftgauge.harness.shapes.case import ShapeCase, lay_out

__all__ = ["PyfftwShapedPlan", "plan_shaped_fftw", "shaped_scale"]


def shaped_scale(case: ShapeCase) -> np.floating | None:
    """Return the factor FFTW's unscaled output is multiplied by (N = ``case.points``), or None for 1.

    The array API standard's ``norm`` rule (:func:`fftgauge.harness.cases.norm_factor`),
    evaluated in the case's real precision.
    """
    if norm_factor(case.points, case.norm, case.is_inverse) == 1.0:
        return None
    real = case.real_dtype.type
    if case.norm == "ortho":
        return real(1) / np.sqrt(real(case.points))
    return real(1) / real(case.points)


def _input_buffer(case: ShapeCase, aligned: bool) -> np.ndarray:
    """Return an input array of the case's shape and dtype, lying in memory as its layout."""
    base = pyfftw.empty_aligned(case.input_shape, dtype=case.input_dtype)
    base[...] = 0
    if not aligned:  # shift by one real element off the SIMD alignment
        dtype = np.dtype(case.input_dtype)
        raw = pyfftw.empty_aligned(base.nbytes + dtype.alignment, dtype=np.uint8)
        base = raw[dtype.alignment:dtype.alignment + base.nbytes].view(dtype).reshape(case.input_shape)
        base[...] = 0
    return base if case.layout == "C" else lay_out(base, case.layout)


class PyfftwShapedPlan(Plan):
    """One FFTW plan of a shaped case on buffers the plan owns.

    ``execute(prepare(x))`` runs FFTW on the prepared buffer and returns the plan's output
    buffer (reused by the next call: copy it to keep it); ``execute`` of any other array
    copies it in under the plan's lock and returns a fresh array.
    """

    def __init__(self, case: ShapeCase, fftw: Any, input_buffer: np.ndarray, output_buffer: np.ndarray,
                 destroys_input: bool):
        super().__init__(case)  # type: ignore[arg-type]
        self._fftw = fftw
        self._input = input_buffer
        self._output = output_buffer
        self._kept = np.empty_like(input_buffer) if destroys_input else None
        self._scale = shaped_scale(case)
        self._lock = threading.Lock()

    @property
    def fftw(self) -> Any:
        """The ``pyfftw.FFTW`` object (``flags``, ``simd_aligned``, ``axes``)."""
        return self._fftw

    def prepare(self, x: np.ndarray) -> np.ndarray:
        """Copy ``x`` into the plan's input buffer (the case's layout) and return that buffer."""
        with self._lock:
            self._input[...] = x
            if self._kept is not None:
                self._kept[...] = x
        return self._input

    def execute(self, x: np.ndarray) -> np.ndarray:
        """Return the transform of ``x`` (see the class docstring for which array comes back)."""
        if x is self._input:
            if self._kept is not None:
                self._input[...] = self._kept
            return self._run()
        with self._lock:
            self._input[...] = x
            return self._run().copy()

    def _run(self) -> np.ndarray:
        self._fftw.execute()
        if self._scale is not None:
            np.multiply(self._output, self._scale, out=self._output)
        return self._output

    def close(self) -> None:
        """Drop the FFTW object and the buffers."""
        self._fftw = None
        self._input = self._output = self._kept = None  # type: ignore[assignment]


def plan_shaped_fftw(case: ShapeCase, effort_flag: str, threads: int, aligned: bool) -> PyfftwShapedPlan:
    """Return a :class:`PyfftwShapedPlan` for ``case``: buffers allocated, FFTW planned on them.

    Raises
    ------
    ValueError
        Whatever pyFFTW raises for a plan it cannot build.
    """
    input_buffer = _input_buffer(case, aligned)
    output_buffer = pyfftw.empty_aligned(case.output_shape, dtype=case.output_dtype)
    destroys = case.base_kind == "irfft" and len(case.axes) > 1
    flags = (effort_flag,) + (() if aligned else ("FFTW_UNALIGNED",)) + (("FFTW_DESTROY_INPUT",) if destroys else ())
    fftw = pyfftw.FFTW(input_buffer, output_buffer, axes=case.axes_normalised,
                       direction="FFTW_BACKWARD" if case.is_inverse else "FFTW_FORWARD",
                       flags=flags, threads=threads)
    return PyfftwShapedPlan(case, fftw, input_buffer, output_buffer, destroys)
