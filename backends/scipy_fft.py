"""scipy.fft (pocketfft in C++): no planning, threads through ``workers``, float32/float64/longdouble."""

from __future__ import annotations

import scipy
import scipy.fft

from fftgauge.backends.base import Backend, Capabilities, FunctionPlan, OptionSpec, Plan, ShapedFunctionPlan
from fftgauge.harness.cases import Case
from fftgauge.harness.shapes.case import ONE_AXIS_KINDS, SHAPE_KINDS, ShapeCase


class ScipyBackend(Backend):
    """scipy.fft.fft / ifft / rfft / irfft with the array API ``norm`` argument.

    Options
    -------
    workers : int, default 1
        Threads scipy.fft may use for one call (its own ``workers`` argument). Whether a
        single 1-D transform gains anything from more workers is for the timing runner to
        show, not for this adapter to promise.
    """

    name = "scipy"
    description = "scipy.fft (pocketfft, C++), with a workers option"
    options = {
        "workers": OptionSpec(int, 1, "threads scipy.fft may use (its workers argument)", minimum=1),
    }
    thread_option = "workers"

    @property
    def version(self) -> str:
        """scipy's version string."""
        return scipy.__version__

    def capabilities(self) -> Capabilities:
        """Every kind and norm, any size, float32/float64/longdouble, threads via ``workers``;
        batched and N-D transforms of every kind."""
        return Capabilities(dtypes=("float32", "float64", "longdouble"), thread_option="workers",
                            shaped_kinds=SHAPE_KINDS)

    def plan(self, case: Case) -> Plan:
        """Return a :class:`~fftgauge.backends.base.FunctionPlan` calling ``scipy.fft.<kind>``; no planning."""
        fn = getattr(scipy.fft, case.kind)
        n, norm, workers = case.n, case.norm, self.opts["workers"]
        return FunctionPlan(case, lambda x: fn(x, n=n, norm=norm, workers=workers))

    def plan_shaped(self, case: ShapeCase) -> Plan:
        """Return ``scipy.fft.<kind>`` over ``case.axes`` (``n``/``axis`` for one axis, ``s``/``axes``
        for several, so the real inverse knows its lengths), with ``workers``; no planning."""
        fn = getattr(scipy.fft, case.kind)
        norm, workers = case.norm, self.opts["workers"]
        if case.kind in ONE_AXIS_KINDS:
            n, axis = case.lengths[0], case.axes[0]
            return ShapedFunctionPlan(case, lambda x: fn(x, n=n, axis=axis, norm=norm, workers=workers))
        s, axes = case.lengths, case.axes
        return ShapedFunctionPlan(case, lambda x: fn(x, s=s, axes=axes, norm=norm, workers=workers))
