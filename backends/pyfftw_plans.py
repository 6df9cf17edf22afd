"""pyFFTW: FFTW 3 plans, built in :meth:`PyfftwBackend.plan` so that planning is timed apart.

A plan owns one input and one output buffer (SIMD-aligned by default) and the FFTW object
planned on them (the buffers, flags, norm factor and plan shared with the shaped plans are
:mod:`fftgauge.backends.pyfftw_buffers`). :meth:`PyfftwPlan.prepare` copies an input into the
plan's own input buffer and returns that buffer; :meth:`PyfftwPlan.execute` on that buffer
runs FFTW with no copy at all; on any other array it copies in, and returns a copy of the
output. ``FFTW.execute()`` computes the unscaled sums, so the plan applies the ``norm``
factor itself, in the case's own precision.

The caller's array is never written to: FFTW only ever sees the plan's buffers. FFTW's
one-dimensional complex-to-real (``irfft``) plans may destroy their input unless asked not
to; pyFFTW plans with input preservation unless ``FFTW_DESTROY_INPUT`` is passed, and this
adapter never passes it, so repeated :meth:`~PyfftwPlan.execute` calls on the prepared
buffer keep giving the same answer.
"""

from __future__ import annotations

from functools import lru_cache
from typing import Any

import numpy as np
import pyfftw

from fftgauge.backends.base import Backend, Capabilities, OptionSpec
from fftgauge.backends.pyfftw_buffers import FftwBufferPlan, fftw_buffer, fftw_scale, planner_flags
from fftgauge.backends.pyfftw_shaped import PyfftwShapedPlan, plan_shaped_fftw
from fftgauge.harness.cases import Case
from fftgauge.harness.shapes.case import SHAPE_KINDS, ShapeCase

#: The ``effort`` option's values and the FFTW planner flag each one stands for.
EFFORT_FLAGS = {"estimate": "FFTW_ESTIMATE", "measure": "FFTW_MEASURE", "patient": "FFTW_PATIENT"}

#: fftgauge precision -> pyFFTW's key for the FFTW library of that precision.
_PRECISION_KEYS = {"float32": "32", "float64": "64", "longdouble": "ld"}


def _probe_precision(dtype: str) -> bool:
    """Return True when a tiny FFTW plan in precision ``dtype`` can be built and run."""
    complex_dtype = Case("fft", dtype, 2).complex_dtype
    try:
        a = pyfftw.empty_aligned(2, dtype=complex_dtype)
        b = pyfftw.empty_aligned(2, dtype=complex_dtype)
        pyfftw.FFTW(a, b, flags=("FFTW_ESTIMATE",)).execute()
    except (ValueError, TypeError, NotImplementedError):
        return False
    return True


@lru_cache(maxsize=None)
def available_dtypes() -> tuple[str, ...]:
    """Return the precisions whose FFTW library this pyFFTW build carries.

    Uses pyFFTW's ``_supported_types`` list where it has one, and otherwise builds a
    two-point plan in each precision to find out.
    """
    supported = getattr(pyfftw, "_supported_types", None)
    if supported is not None:
        return tuple(d for d, key in _PRECISION_KEYS.items() if key in supported)
    return tuple(d for d in _PRECISION_KEYS if _probe_precision(d))


def _scale(case: Case) -> np.floating | None:
    """Return the factor FFTW's unscaled output is multiplied by, or None when it is 1
    (:func:`fftgauge.backends.pyfftw_buffers.fftw_scale` of the case's N, in its precision)."""
    return fftw_scale(case.n, case.norm, case.is_inverse, case.real_dtype)


class PyfftwPlan(FftwBufferPlan):
    """One FFTW plan of a 1-D case on buffers the plan owns
    (:class:`~fftgauge.backends.pyfftw_buffers.FftwBufferPlan`: ``execute(prepare(x))`` runs
    with no copy and returns the reused output buffer; ``execute(x)`` of any other array
    copies in under the plan's lock and returns a fresh array, safe from several threads)."""

    def __init__(self, case: Case, fftw: Any, input_buffer: np.ndarray, output_buffer: np.ndarray):
        super().__init__(case, fftw, input_buffer, output_buffer, _scale(case))


class PyfftwBackend(Backend):
    """FFTW 3 through pyFFTW, with planning separate from execution.

    Options
    -------
    threads : int, default 1
        Threads FFTW uses for one transform.
    effort : {"estimate", "measure", "patient"}, default "estimate"
        The planner flag (FFTW_ESTIMATE, FFTW_MEASURE, FFTW_PATIENT). The default is
        ``estimate`` because ``measure`` and ``patient`` time candidate algorithms while
        planning, which takes seconds per size at large N (longer for ``patient``; on the
        development machine a double-precision complex plan took 2.3 s at N = 2^16 and
        6.9 s at N = 2^20 with ``measure``, 0.003 s with ``estimate``): a battery over many
        sizes would spend its time planning. Ask for ``measure`` when
        timing the plans FFTW users deploy; its planning time is reported apart. FFTW keeps
        what it learnt (its "wisdom") for the life of the process, so a second plan of the
        same case plans faster.
    aligned : bool, default true
        True: buffers aligned for SIMD (``pyfftw.simd_alignment`` bytes). False: buffers
        offset from that alignment and planned with FFTW_UNALIGNED, to show what alignment
        buys.
    """

    name = "pyfftw"
    description = "FFTW 3 via pyFFTW; plans built (and timed) apart from execution"
    options = {
        "threads": OptionSpec(int, 1, "threads FFTW uses for one transform", minimum=1),
        "effort": OptionSpec(str, "estimate", "planner effort: estimate, measure or patient",
                             choices=tuple(EFFORT_FLAGS)),
        "aligned": OptionSpec(bool, True, "SIMD-aligned buffers (false: deliberately unaligned)"),
    }
    thread_option = "threads"

    @property
    def version(self) -> str:
        """pyFFTW's version, with the FFTW library version it reports, e.g. ``0.15.1 (FFTW 3.3.5)``."""
        fftw = getattr(pyfftw, "fftw_version", None)
        return f"{pyfftw.__version__} (FFTW {fftw})" if fftw else str(pyfftw.__version__)

    def capabilities(self) -> Capabilities:
        """Every kind and norm, any size, the precisions this pyFFTW build carries, real planning."""
        return Capabilities(dtypes=available_dtypes(), thread_option="threads", separate_planning=True,
                            in_place=False, shaped_kinds=SHAPE_KINDS)

    def plan(self, case: Case) -> PyfftwPlan:
        """Allocate the buffers and plan FFTW on them (the timed planning step).

        Raises
        ------
        ValueError
            Whatever pyFFTW raises for a plan it cannot build.
        """
        aligned = self.opts["aligned"]
        input_buffer = fftw_buffer(case.input_length, case.input_dtype, aligned)
        output_buffer = fftw_buffer(case.output_length, case.output_dtype, aligned)
        flags = planner_flags(EFFORT_FLAGS[self.opts["effort"]], aligned)
        fftw = pyfftw.FFTW(input_buffer, output_buffer, axes=(0,),
                           direction="FFTW_BACKWARD" if case.is_inverse else "FFTW_FORWARD",
                           flags=flags, threads=self.opts["threads"])
        return PyfftwPlan(case, fftw, input_buffer, output_buffer)

    def plan_shaped(self, case: ShapeCase) -> PyfftwShapedPlan:
        """Allocate buffers of the case's shape and layout and plan FFTW over its axes (timed
        as planning): :func:`fftgauge.backends.pyfftw_shaped.plan_shaped_fftw`.

        Raises
        ------
        ValueError
            Whatever pyFFTW raises for a plan it cannot build.
        """
        return plan_shaped_fftw(case, EFFORT_FLAGS[self.opts["effort"]], self.opts["threads"], self.opts["aligned"])
