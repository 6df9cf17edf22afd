"""numpy.fft (pocketfft): no planning, no threads, float32/float64/longdouble since numpy 2."""

from __future__ import annotations

import numpy as np

from fftgauge.backends.base import Backend, Capabilities, FunctionPlan, Plan, ShapedFunctionPlan
from fftgauge.harness.cases import Case
from fftgauge.harness.shapes.case import SHAPE_KINDS, ShapeCase


class NumpyBackend(Backend):
    """numpy.fft.fft / ifft / rfft / irfft with the array API ``norm`` argument."""

    name = "numpy"
    description = "numpy.fft (pocketfft), the everyday baseline"

    @property
    def version(self) -> str:
        return np.__version__

    def capabilities(self) -> Capabilities:
        return Capabilities(dtypes=("float32", "float64", "longdouble"), shaped_kinds=SHAPE_KINDS)

    def plan(self, case: Case) -> Plan:
        fn = getattr(np.fft, case.kind)
        n, norm = case.n, case.norm
        return FunctionPlan(case, lambda x: fn(x, n=n, norm=norm))

    def plan_shaped(self, case: ShapeCase) -> Plan:
        """Return numpy.fft's ``kind`` over ``case.axes`` (``s`` given, so the real inverse knows its lengths)."""
        fn = getattr(np.fft, case.kind)
        norm = case.norm
        if case.kind in ("fft", "ifft", "rfft", "irfft"):
            n, axis = case.lengths[0], case.axes[0]
            return ShapedFunctionPlan(case, lambda x: fn(x, n=n, axis=axis, norm=norm))
        s, axes = case.lengths, case.axes
        return ShapedFunctionPlan(case, lambda x: fn(x, s=s, axes=axes, norm=norm))
