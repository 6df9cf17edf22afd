"""pyFFTW: FFTW 3 plans, built in :meth:`PyfftwBackend.plan` so that planning is timed apart.

A plan owns one input and one output buffer (SIMD-aligned by default) and the FFTW object
planned on them. :meth:`PyfftwPlan.prepare` copies an input into the plan's own input
buffer and returns that buffer; :meth:`PyfftwPlan.execute` on that buffer runs FFTW with no
copy at all; on any other array it copies in, and returns a copy of the output. ``FFTW.execute()`` computes the unscaled
sums, so the plan applies the ``norm`` factor itself, in the case's own precision.

The caller's array is never written to: FFTW only ever sees the plan's buffers. FFTW's
one-dimensional complex-to-real (``irfft``) plans may destroy their input unless asked not
to; pyFFTW plans with input preservation unless ``FFTW_DESTROY_INPUT`` is passed, and this
adapter never passes it, so repeated :meth:`~PyfftwPlan.execute` calls on the prepared
buffer keep giving the same answer.
"""

from __future__ import annotations

import threading
from functools import lru_cache
from typing import Any

import numpy as np
import pyfftw

from fftgauge.backends.base import Backend, Capabilities, OptionSpec, Plan
from fftgauge.backends.pyfftw_shaped import PyfftwShapedPlan, plan_shaped_fftw
from fftgauge.harness.cases import Case, norm_factor
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


def _buffer(length: int, dtype: np.dtype, aligned: bool) -> np.ndarray:
    """Return an uninitialised 1-D array for FFTW.

    ``aligned`` True: aligned to ``pyfftw.simd_alignment`` bytes. False: deliberately
    offset from that alignment by one real element (still aligned for numpy), so that the
    cost of unaligned data can be measured.
    """
    dtype = np.dtype(dtype)
    if aligned:
        return pyfftw.empty_aligned(length, dtype=dtype)
    offset = dtype.alignment
    nbytes = length * dtype.itemsize
    raw = pyfftw.empty_aligned(nbytes + offset, dtype=np.uint8)
    return raw[offset:offset + nbytes].view(dtype)


def _scale(case: Case) -> np.floating | None:
    """Return the factor FFTW's unscaled output is multiplied by, or None when it is 1.

    Which side is scaled, and by what, is :func:`fftgauge.harness.cases.norm_factor`'s rule (the
    array API standard's ``norm``); the factor is evaluated here in the case's own real
    precision, so that a long-double transform is not scaled by a double.
    """
    if norm_factor(case.n, case.norm, case.is_inverse) == 1.0:
        return None
    real = case.real_dtype.type
    if case.norm == "ortho":
        return real(1) / np.sqrt(real(case.n))
    return real(1) / real(case.n)


class PyfftwPlan(Plan):
    """One FFTW plan on buffers the plan owns.

    Two ways to run it:

    - the fast path, for timing: ``y = plan.execute(plan.prepare(x))`` runs FFTW on the
      prepared buffer with no copy and returns the plan's output buffer, which the next
      call overwrites (as :class:`~fftgauge.backends.base.Plan` allows): copy it to keep it. Not for
      several threads at once (they would share the buffers).
    - any other array: ``plan.execute(x)`` copies ``x`` in, runs under the plan's lock and
      returns a fresh array, so it is safe from several threads at once.
    """

    def __init__(self, case: Case, fftw: Any, input_buffer: np.ndarray, output_buffer: np.ndarray):
        super().__init__(case)
        self._fftw = fftw
        self._input = input_buffer
        self._output = output_buffer
        self._scale = _scale(case)
        self._lock = threading.Lock()

    @property
    def fftw(self) -> Any:
        """The ``pyfftw.FFTW`` object, for inspection (``flags``, ``simd_aligned``, ``N``)."""
        return self._fftw

    def prepare(self, x: np.ndarray) -> np.ndarray:
        """Copy ``x`` into the plan's input buffer and return that buffer.

        The buffer holds the latest input given to :meth:`prepare` or :meth:`execute`.
        """
        with self._lock:
            self._input[...] = x
        return self._input

    def execute(self, x: np.ndarray) -> np.ndarray:
        """Return the transform of ``x``.

        When ``x`` is the buffer :meth:`prepare` returned, FFTW runs on it in place and the
        plan's output buffer is returned (no copy either way). Any other array (any strides,
        including negative ones) is copied into the input buffer under the plan's lock, and
        a copy of the output is returned.
        """
        if x is self._input:
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
        self._input = self._output = None  # type: ignore[assignment]


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
        input_buffer = _buffer(case.input_length, case.input_dtype, aligned)
        output_buffer = _buffer(case.output_length, case.output_dtype, aligned)
        flags = (EFFORT_FLAGS[self.opts["effort"]],) + (() if aligned else ("FFTW_UNALIGNED",))
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
