"""scipy.fft (pocketfft in C++): no planning, threads through ``workers``, float32/float64/longdouble."""

from __future__ import annotations

import scipy
import scipy.fft

from fftgauge.backends.base import Backend, Capabilities, FunctionPlan, OptionSpec, Plan
from fftgauge.harness.cases import Case


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
        """Every kind and norm, any size, float32/float64/longdouble, threads via ``workers``."""
        return Capabilities(dtypes=("float32", "float64", "longdouble"), thread_option="workers")

    def plan(self, case: Case) -> Plan:
        """Return a :class:`~fftgauge.backends.base.FunctionPlan` calling ``scipy.fft.<kind>``; no planning."""
        fn = getattr(scipy.fft, case.kind)
        n, norm, workers = case.n, case.norm, self.opts["workers"]
        return FunctionPlan(case, lambda x: fn(x, n=n, norm=norm, workers=workers))
