"""A user's own Python function, wrapped as a backend.

The contract: a plain callable ``f(x) -> X`` computes the forward complex DFT of a 1-D
array with numpy's sign and scaling (X[k] = sum_n x[n] exp(-2j pi k n / N), no scaling).
A file SPEC may name a companion inverse, ``myfft.py:fft+ifft``: the second function
computes the inverse of the first one's kind (``ifft`` for ``fft``, ``irfft`` for ``rfft``,
and the other way round), so the round-trip check pairs them. SPEC options say when it
computes something else or claims less:

- ``kind``   which transform the (first) function computes (``fft`` by default; ``ifft``,
  ``rfft``, ``irfft`` with numpy's conventions; an ``irfft`` is called as ``f(X, n)``).
  ``fftn``, ``ifftn``, ``rfftn``, ``irfftn``: a function of a whole array, called as
  ``f(x, axes)`` (``axes`` a tuple of axis indices as the case lists them, negative ones
  included; the real kinds halve the last one listed, as numpy), an ``irfftn`` as
  ``f(X, axes, s)`` with ``s`` the output's lengths along ``axes``. Such a function serves the
  shaped cases of its family, several axes (``fftn``) and batches along one axis (``fft``,
  called with a one-axis tuple), and the 1-D cases too (called with ``axes = (0,)``);
- ``sizes``  ``any`` (default) or ``pow2``;
- ``dtypes`` precisions it claims, ``+``-separated (default ``float32+float64``);
- ``min_n``  smallest size it takes (default 1);
- ``max_n``  largest size worth trying (0: no limit).

Every SPEC also takes the common options of the registry (``label``, declared conventions).
"""

from __future__ import annotations

import os
import sys
from typing import Any, Callable

import numpy as np

from fftgauge.backends.base import (Backend, Capabilities, FunctionPlan, OptionSpec, Plan, ShapedFunctionPlan,
                                    SizeRule)
from fftgauge.harness.cases import DTYPES, KINDS, Case
from fftgauge.harness.shapes.case import MANY_AXIS_KINDS, SHAPE_KINDS, ShapeCase, family_kind

#: The inverse of each kind: what a companion function computes.
INVERSE_KIND = {"fft": "ifft", "ifft": "fft", "rfft": "irfft", "irfft": "rfft",
                "fftn": "ifftn", "ifftn": "fftn", "rfftn": "irfftn", "irfftn": "rfftn"}


def _dtypes(text: str) -> tuple[str, ...]:
    parts = tuple(p for p in str(text).split("+") if p)
    bad = [p for p in parts if p not in DTYPES]
    if bad or not parts:
        raise ValueError(f"dtypes must be '+'-separated from {', '.join(DTYPES)}, got {text!r}")
    return parts


def derived_label(form: str, target: str, attr: str, companion: str | None = None) -> str:
    """Return the short label of a plain callable: the file's stem or the module's name, a
    colon, the attribute (``+companion`` when there is one); never a path.

    Examples
    --------
    >>> derived_label("file", "path/to/myfft.py", "fft")
    'myfft:fft'
    >>> derived_label("module", "my_pkg.fast", "fft", "ifft")
    'my_pkg.fast:fft+ifft'
    """
    where = os.path.splitext(os.path.basename(target.rstrip("/\\")))[0] if form == "file" else target
    return f"{where}:{attr}" + (f"+{companion}" if companion else "")


class FunctionBackend(Backend):
    """Wraps ``fn`` (the callable a SPEC named), and its inverse ``companion`` when given, as a
    backend of one kind (or of a kind and its inverse), backward-normalised."""

    name = "function"
    description = "a user's Python function f(x) -> X"
    options = {
        "kind": OptionSpec(str, "fft", "the transform the function computes (fftn...: f(x, axes) of an array)",
                           choices=KINDS + MANY_AXIS_KINDS),
        "sizes": OptionSpec(str, "any", "sizes it handles: any or pow2", choices=("any", "pow2")),
        "dtypes": OptionSpec(str, "float32+float64", "precisions it claims, '+'-separated"),
        "min_n": OptionSpec(int, 1, "smallest size it takes", minimum=1),
        "max_n": OptionSpec(int, 0, "largest size worth trying (0: no limit)", minimum=0),
    }

    def __init__(self, fn: Callable[..., Any], name: str, companion: Callable[..., Any] | None = None,
                 **opts: Any):
        super().__init__(**opts)
        self._fn = fn
        self._companion = companion
        self._dtypes = _dtypes(self.opts["dtypes"])
        self._rule = SizeRule(self.opts["sizes"], self.opts["min_n"], self.opts["max_n"] or None)
        self.name = name
        kind = self.opts["kind"]
        self._functions = {kind: fn} if companion is None else {kind: fn, INVERSE_KIND[kind]: companion}

    @property
    def version(self) -> str:
        module = getattr(self._fn, "__module__", None) or ""
        return str(getattr(sys.modules.get(module), "__version__", "user code"))

    def capabilities(self) -> Capabilities:
        """The kinds its functions compute (an ``fftn`` function: its family's 1-D and shaped kinds),
        the SPEC's precisions and sizes (per axis for shaped cases), backward norm only."""
        kinds = tuple(k for k in KINDS if k in self._functions or family_kind(k, 2) in self._functions)
        shaped = tuple(k for k in SHAPE_KINDS if family_kind(k, 2) in self._functions)
        return Capabilities(kinds=kinds, dtypes=self._dtypes, sizes=self._rule, norms=("backward",),
                            shaped_kinds=shaped)

    def plan(self, case: Case) -> Plan:
        """Return a plan calling the function of ``case.kind`` (an array function with ``axes = (0,)``)."""
        fn = self._functions.get(case.kind)
        if fn is None:
            whole = self._functions[family_kind(case.kind, 2)]
            n = case.n
            if case.kind == "irfft":
                return FunctionPlan(case, lambda x: np.asarray(whole(x, (0,), (n,))))
            return FunctionPlan(case, lambda x: np.asarray(whole(x, (0,))))
        if case.kind == "irfft":
            n = case.n
            return FunctionPlan(case, lambda x: np.asarray(fn(x, n)))
        return FunctionPlan(case, lambda x: np.asarray(fn(x)))

    def plan_shaped(self, case: ShapeCase) -> Plan:
        """Return a plan calling the array function as ``f(x, axes)`` (``f(X, axes, s)`` for the
        real inverse); whatever it returns is passed on as it is (a wrong shape is the checks' to
        judge)."""
        fn = self._functions[family_kind(case.kind, 2)]
        axes, s = tuple(case.axes), tuple(case.lengths)
        if case.base_kind == "irfft":
            return ShapedFunctionPlan(case, lambda x: np.asarray(fn(x, axes, s)))
        return ShapedFunctionPlan(case, lambda x: np.asarray(fn(x, axes)))
