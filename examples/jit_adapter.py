"""A worked adapter for a JIT-compiled FFT library (docs/writing-an-adapter.md).

JIT libraries (Numba, JAX and the like) compile a function the first time it is called with
a new signature (size, precision), and keep the compiled code in a cache. Wrapped naively,
that first call lands in the timed region of the first sample, and every plan recompiles
unless the cache is kept. This adapter shows the two things to do:

1. Keep the compiled functions in a cache keyed by what they were compiled for, owned by the
   adapter, so the battery's several plans of one case compile once.
2. Call the compiled function once inside ``plan()``, on a throw-away input of the case's
   shape: the compile then counts as *planning time*, and the timed region holds the
   transform alone.

The "library" here is :class:`TinyJit`, a stand-in with the same behaviour (compiles on the
first call with a new signature, counts its compilations) whose compiled kernels call
numpy.fft, so the example runs anywhere. For a real library, replace ``TinyJit.compile`` with
its own decorator (``numba.njit``, ``jax.jit``) and keep the adapter as it is.

Check it with::

    fftgauge check --backend examples/jit_adapter.py:JitBackend --sizes 2^4..2^10
"""

from __future__ import annotations

from typing import Callable

import numpy as np

from fftgauge import Backend, Capabilities, FunctionPlan, Plan
from fftgauge.harness.cases import Case


class TinyJit:
    """A stand-in JIT: ``compile(kind, n, dtype)`` returns a function that "compiles" on its
    first call (the expensive part, counted in :attr:`compilations`) and runs fast afterwards."""

    def __init__(self) -> None:
        self.compilations = 0

    def compile(self, kind: str, n: int, dtype: str) -> Callable[[np.ndarray], np.ndarray]:
        """Return a lazily compiled transform of ``kind`` for size ``n`` in precision ``dtype``."""
        jit = self
        compiled: list[Callable[[np.ndarray], np.ndarray]] = []

        def kernel(x: np.ndarray) -> np.ndarray:
            if not compiled:                     # the first call compiles (what a JIT does)
                jit.compilations += 1
                compiled.append(jit.build(kind, n, dtype))
            return compiled[0](x)

        return kernel

    @staticmethod
    def build(kind: str, n: int, dtype: str) -> Callable[[np.ndarray], np.ndarray]:
        """Return the "compiled" kernel: numpy.fft of ``kind`` at size ``n``, output in ``dtype``."""
        fn = getattr(np.fft, kind)
        out = Case(kind, dtype, n).output_dtype
        return lambda x: fn(x, n=n).astype(out, copy=False)


class JitBackend(Backend):
    """The adapter: a compile cache per backend, and a warm-up call inside ``plan()``."""

    name = "tinyjit"
    description = "a JIT-compiled FFT (stand-in library, numpy.fft inside)"

    def __init__(self, **opts):
        super().__init__(**opts)
        self.jit = TinyJit()
        #: (kind, n, dtype) -> compiled function: the battery plans one case several times.
        self.cache: dict[tuple[str, int, str], Callable[[np.ndarray], np.ndarray]] = {}

    @property
    def version(self) -> str:
        return "example"

    def capabilities(self) -> Capabilities:
        return Capabilities(kinds=("fft", "ifft", "rfft", "irfft"), dtypes=("float32", "float64"),
                            norms=("backward",))

    def plan(self, case: Case) -> Plan:
        key = (case.kind, case.n, case.dtype)
        if key not in self.cache:
            kernel = self.jit.compile(case.kind, case.n, case.dtype)
            kernel(np.zeros(case.input_length, dtype=case.input_dtype))   # warm-up: compile now, as planning
            self.cache[key] = kernel
        return FunctionPlan(case, self.cache[key])
