"""JAX: ``jax.numpy.fft`` compiled with ``jax.jit`` on the CPU device.

Precision: JAX computes float64 inputs in float32 unless its x64 switch is on. This adapter
turns the switch on when its module is imported (``jax.config.update("jax_enable_x64",
True)``, for the whole worker process), and says so in its description and version; with
``x64=false`` it leaves the switch alone and claims float32 only. JAX has no long double.

Planning is compiling: :meth:`JaxBackend.plan` builds ``jax.jit`` of the transform for the
case's size, kind, precision and norm, and calls it once on a throw-away input (the
warm-up), so the compile is counted as planning time and never lands in a timed sample.
Compiled functions are cached in the adapter, keyed by what they depend on, so the
battery's several plans of a case compile once. The timed call runs the compiled function
and waits for its result (``block_until_ready``: JAX dispatches asynchronously, and a
call that returned before the work was done would time nothing), then hands the engine a
numpy view of the CPU buffer.

Threads: XLA's CPU backend picks its thread pool when JAX starts (from ``XLA_FLAGS``), not
per call, so the adapter has no thread option.
"""

from __future__ import annotations

import threading
from typing import Any, Callable

import jax
import jax.numpy as jnp
import numpy as np

from fftgauge.backends.base import Backend, Capabilities, OptionSpec, Plan
from fftgauge.harness.cases import Case

jax.config.update("jax_enable_x64", True)


class JaxPlan(Plan):
    """One compiled transform on the CPU device."""

    def __init__(self, case: Case, compiled: Callable[[Any], Any], device: Any):
        super().__init__(case)
        self._compiled, self._device = compiled, device

    def prepare(self, x: np.ndarray) -> Any:
        """Return ``x`` as a JAX array on the CPU device, in the case's input dtype (outside the timed region)."""
        return jax.device_put(np.asarray(x, dtype=self.case.input_dtype), self._device).block_until_ready()

    def execute(self, x: Any) -> np.ndarray:
        """Return the transform of ``x`` (a prepared JAX array or any numpy array), once it is computed."""
        if not isinstance(x, jax.Array):
            x = self.prepare(x)
        return np.asarray(self._compiled(x).block_until_ready())


class JaxBackend(Backend):
    """jax.numpy.fft.fft / ifft / rfft / irfft, jit-compiled for the CPU device.

    Options
    -------
    x64 : bool, default true
        Claim float64 (the adapter has switched JAX's x64 mode on). False: claim float32 only,
        as a JAX user who never switches it on would get.
    """

    name = "jax"
    description = "jax.numpy.fft, jit-compiled on the CPU (x64 switched on by this adapter); compile = planning"
    options = {"x64": OptionSpec(bool, True, "claim float64 (JAX's x64 mode, switched on by this adapter)")}

    def __init__(self, **opts: Any):
        super().__init__(**opts)
        self.device = jax.devices("cpu")[0]
        self.compiled: dict[tuple, Callable[[Any], Any]] = {}
        self.lock = threading.Lock()

    @property
    def version(self) -> str:
        """jax's version with jaxlib's and the x64 state, e.g. ``0.10.2 (jaxlib 0.10.2, x64 on)``."""
        import jaxlib

        x64 = "on" if jax.config.read("jax_enable_x64") else "off"
        return f"{jax.__version__} (jaxlib {jaxlib.__version__}, x64 {x64})"

    def capabilities(self) -> Capabilities:
        """Every kind and norm, any size; float32, and float64 when x64 is claimed; compiles in planning."""
        dtypes = ("float32", "float64") if self.opts["x64"] else ("float32",)
        return Capabilities(dtypes=dtypes, separate_planning=True)

    def compile(self, case: Case) -> Callable[[Any], Any]:
        """Return the jit-compiled transform of the case, compiled and warmed up on first use."""
        key = (case.kind, case.n, case.dtype, case.norm)
        with self.lock:
            if key not in self.compiled:
                fn = getattr(jnp.fft, case.kind)
                n, norm = case.n, case.norm
                compiled = jax.jit(lambda a: fn(a, n=n, norm=norm))
                warm = jax.device_put(np.zeros(case.input_length, dtype=case.input_dtype), self.device)
                compiled(warm).block_until_ready()          # the compile happens here, in planning
                self.compiled[key] = compiled
            return self.compiled[key]

    def plan(self, case: Case) -> JaxPlan:
        """Return a plan running the compiled transform (compiling it first if this case is new)."""
        return JaxPlan(case, self.compile(case), self.device)
