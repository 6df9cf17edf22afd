"""numpy.fft (pocketfft): no planning, no threads, float32/float64/longdouble since numpy 2."""

from __future__ import annotations

import numpy as np

from fftgauge.backends.base import Backend, Capabilities, FunctionPlan, Plan
from fftgauge.harness.cases import Case


class NumpyBackend(Backend):
    """numpy.fft.fft / ifft / rfft / irfft with the array API ``norm`` argument."""

    name = "numpy"
    description = "numpy.fft (pocketfft), the everyday baseline"

    @property
    def version(self) -> str:
        return np.__version__

    def capabilities(self) -> Capabilities:
        return Capabilities(dtypes=("float32", "float64", "longdouble"))

    def plan(self, case: Case) -> Plan:
        fn = getattr(np.fft, case.kind)
        n, norm = case.n, case.norm
        return FunctionPlan(case, lambda x: fn(x, n=n, norm=norm))
