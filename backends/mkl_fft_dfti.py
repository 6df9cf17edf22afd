"""Intel MKL's FFT (DFTI) through ``mkl_fft``, its thread count set through ``mkl-service``.

``mkl_fft.fft``/``ifft``/``rfft``/``irfft`` take numpy's arguments (``n``, ``norm``); MKL
plans (its "descriptors") inside each call, so there is no planning step to time apart.
The thread count is MKL's thread-local setting (``mkl.set_num_threads_local``): it holds
only in the thread that sets it, so a plan called from another thread (the battery's
``concurrent`` check) must set it there too, or MKL runs with its default thread count. A
plan sets it in each thread the first time it runs there (a thread-local note of the count
set, about 0.1 us per call to read, where setting it around every call costs 0.6 us).

MKL's results depend bitwise on its thread count (its summation order does), and MKL
promises run-to-run bitwise equality only under its conditional numerical reproducibility
mode (its documentation names the data's alignment and the thread count among what changes
results without it), which ``mkl_fft`` does not switch on: the capabilities say
``bitwise_reproducible=False``, so the battery judges repeated and concurrent calls by the
accuracy limit, not by bitwise equality. (On the development machine the battery on
``@default`` also passes with the capability left True, at 1 and 2 threads, because each
thread sets its own count; the declaration is for what MKL does not promise.) MKL has no long-double FFT (``mkl_fft``'s numpy
interface downcasts long double to double), so the adapter claims float32 and float64 only.
"""

from __future__ import annotations

import threading

import mkl
import mkl_fft

from fftgauge.backends.base import Backend, Capabilities, FunctionPlan, OptionSpec, Plan, ShapedFunctionPlan
from fftgauge.harness.cases import Case
from fftgauge.harness.shapes.case import ONE_AXIS_KINDS, SHAPE_KINDS, ShapeCase


def mkl_version() -> str:
    """Return MKL's own version as ``YYYY.minor.update`` (from ``mkl.get_version()``), or ``''``."""
    try:
        v = mkl.get_version()
    except Exception:  # an MKL runtime without the query: the version is merely unknown
        return ""
    return f"{v['MajorVersion']}.{v['MinorVersion']}.{v['UpdateVersion']}"


#: The MKL thread count this adapter last set in each thread (attribute ``threads``).
THREAD_SETTING = threading.local()


def set_thread_count(threads: int) -> None:
    """Set MKL's thread count for the calling thread and note it in :data:`THREAD_SETTING`."""
    mkl.set_num_threads_local(threads)
    THREAD_SETTING.threads = threads


class MklFftBackend(Backend):
    """mkl_fft.fft / ifft / rfft / irfft, with MKL's thread count as an option.

    Options
    -------
    threads : int, default 1
        Threads MKL uses for one transform, set thread-locally around each call.
    """

    name = "mkl_fft"
    description = "Intel MKL's FFT (DFTI) via mkl_fft, threads via mkl-service"
    options = {"threads": OptionSpec(int, 1, "threads MKL uses for one transform", minimum=1)}
    thread_option = "threads"

    @property
    def version(self) -> str:
        """mkl_fft's version with MKL's, e.g. ``2.3.2 (MKL 2026.2.1)``."""
        mkl_v = mkl_version()
        return f"{mkl_fft.__version__} (MKL {mkl_v})" if mkl_v else str(mkl_fft.__version__)

    def capabilities(self) -> Capabilities:
        """Every kind and norm, any size, float32 and float64; results not bitwise reproducible."""
        return Capabilities(dtypes=("float32", "float64"), thread_option="threads",
                            bitwise_reproducible=False, shaped_kinds=SHAPE_KINDS)

    def plan(self, case: Case) -> Plan:
        """Return a plan calling ``mkl_fft.<kind>`` under the thread count; nothing to plan."""
        fn = getattr(mkl_fft, case.kind)
        n, norm, threads = case.n, case.norm, self.opts["threads"]

        def run(x):
            if getattr(THREAD_SETTING, "threads", None) != threads:
                set_thread_count(threads)
            return fn(x, n=n, norm=norm)

        set_thread_count(threads)
        return FunctionPlan(case, run)

    def plan_shaped(self, case: ShapeCase) -> Plan:
        """Return a plan calling ``mkl_fft.<kind>`` over the case's axes (``n``/``axis`` for one
        axis, ``s``/``axes`` for several) under the thread count; nothing to plan."""
        fn = getattr(mkl_fft, case.kind)
        norm, threads = case.norm, self.opts["threads"]
        if case.kind in ONE_AXIS_KINDS:
            where = {"n": case.lengths[0], "axis": case.axes[0]}
        else:
            where = {"s": case.lengths, "axes": case.axes}

        def run(x):
            if getattr(THREAD_SETTING, "threads", None) != threads:
                set_thread_count(threads)
            return fn(x, norm=norm, **where)

        set_thread_count(threads)
        return ShapedFunctionPlan(case, run)
