"""A user's own Python function, wrapped as a backend.

The contract: a plain callable ``f(x) -> X`` computes the forward complex DFT of a 1-D
array with numpy's sign and scaling (X[k] = sum_n x[n] exp(-2j pi k n / N), no scaling).
SPEC options say when it computes something else or claims less:

- ``kind``   which one transform it computes (``fft`` by default; ``ifft``, ``rfft``,
  ``irfft`` with numpy's conventions; for ``irfft`` it is called as ``f(X, n)``);
- ``sizes``  ``any`` (default) or ``pow2``;
- ``dtypes`` precisions it claims, ``+``-separated (default ``float32+float64``);
- ``max_n``  largest size worth trying (0: no limit).
"""

from __future__ import annotations

from typing import Any, Callable

import numpy as np

from fftgauge.backends.base import Backend, Capabilities, FunctionPlan, OptionSpec, Plan
from fftgauge.harness.cases import DTYPES, KINDS, Case


def _dtypes(text: str) -> tuple[str, ...]:
    parts = tuple(p for p in str(text).split("+") if p)
    bad = [p for p in parts if p not in DTYPES]
    if bad or not parts:
        raise ValueError(f"dtypes must be '+'-separated from {', '.join(DTYPES)}, got {text!r}")
    return parts


class FunctionBackend(Backend):
    """Wraps ``fn`` (the callable a SPEC named) as a one-kind, backward-normalised backend."""

    name = "function"
    description = "a user's Python function f(x) -> X"
    options = {
        "kind": OptionSpec(str, "fft", "the transform the function computes", choices=KINDS),
        "sizes": OptionSpec(str, "any", "sizes it handles: any or pow2", choices=("any", "pow2")),
        "dtypes": OptionSpec(str, "float32+float64", "precisions it claims, '+'-separated"),
        "max_n": OptionSpec(int, 0, "largest size worth trying (0: no limit)"),
    }

    def __init__(self, fn: Callable[..., Any], spec: str, **opts: Any):
        super().__init__(**opts)
        self._fn = fn
        self._spec = spec
        self._dtypes = _dtypes(self.opts["dtypes"])
        if self.opts["max_n"] < 0:
            raise ValueError(f"max_n must be 0 (no limit) or a positive size, got {self.opts['max_n']}")
        self.name = spec

    @property
    def version(self) -> str:
        module = getattr(self._fn, "__module__", None) or ""
        return str(getattr(__import__("sys").modules.get(module), "__version__", "user code"))

    def capabilities(self) -> Capabilities:
        return Capabilities(
            kinds=(self.opts["kind"],),
            dtypes=self._dtypes,
            sizes=self.opts["sizes"],
            norms=("backward",),
            max_n=self.opts["max_n"] or None,
        )

    def plan(self, case: Case) -> Plan:
        fn = self._fn
        if case.kind == "irfft":
            n = case.n
            return FunctionPlan(case, lambda x: np.asarray(fn(x, n)))
        return FunctionPlan(case, lambda x: np.asarray(fn(x)))
