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

from typing import Any

import numpy as np
import pyfftw

from fftgauge.backends.pyfftw_buffers import FftwBufferPlan, fftw_buffer, fftw_scale, planner_flags
from fftgauge.harness.shapes.case import ShapeCase, lay_out

__all__ = ["PyfftwShapedPlan", "plan_shaped_fftw", "shaped_scale"]


def shaped_scale(case: ShapeCase) -> np.floating | None:
    """Return the factor FFTW's unscaled output is multiplied by (N = ``case.points``), or None for 1
    (:func:`fftgauge.backends.pyfftw_buffers.fftw_scale`, in the case's real precision)."""
    return fftw_scale(case.points, case.norm, case.is_inverse, case.real_dtype)


def _input_buffer(case: ShapeCase, aligned: bool) -> np.ndarray:
    """Return a zeroed input array of the case's shape and dtype, lying in memory as its layout."""
    base = fftw_buffer(case.input_shape, case.input_dtype, aligned)
    base[...] = 0
    return base if case.layout == "C" else lay_out(base, case.layout)


class PyfftwShapedPlan(FftwBufferPlan):
    """One FFTW plan of a shaped case on buffers the plan owns
    (:class:`~fftgauge.backends.pyfftw_buffers.FftwBufferPlan`).

    ``execute(prepare(x))`` runs FFTW on the prepared buffer and returns the plan's output
    buffer (reused by the next call: copy it to keep it); ``execute`` of any other array
    copies it in under the plan's lock and returns a fresh array. ``destroys_input``: the
    prepared input is kept and copied back before every run (``irfftn``).
    """

    def __init__(self, case: ShapeCase, fftw: Any, input_buffer: np.ndarray, output_buffer: np.ndarray,
                 destroys_input: bool):
        super().__init__(case, fftw, input_buffer, output_buffer, shaped_scale(case),  # type: ignore[arg-type]
                         destroys_input=destroys_input)


def plan_shaped_fftw(case: ShapeCase, effort_flag: str, threads: int, aligned: bool) -> PyfftwShapedPlan:
    """Return a :class:`PyfftwShapedPlan` for ``case``: buffers allocated, FFTW planned on them.

    Raises
    ------
    ValueError
        Whatever pyFFTW raises for a plan it cannot build.
    """
    input_buffer = _input_buffer(case, aligned)
    output_buffer = fftw_buffer(case.output_shape, case.output_dtype, aligned=True)
    destroys = case.base_kind == "irfft" and len(case.axes) > 1
    flags = planner_flags(effort_flag, aligned, destroy_input=destroys)
    fftw = pyfftw.FFTW(input_buffer, output_buffer, axes=case.axes_normalised,
                       direction="FFTW_BACKWARD" if case.is_inverse else "FFTW_FORWARD",
                       flags=flags, threads=threads)
    return PyfftwShapedPlan(case, fftw, input_buffer, output_buffer, destroys)
