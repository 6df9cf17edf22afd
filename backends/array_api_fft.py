"""Any namespace of the array API standard with its ``fft`` extension: ``array-api[namespace=MODULE]``.

The namespace is a module (``numpy``, ``array_api_strict``, ...) whose ``fft`` attribute
holds the standard's ``fft``, ``ifft``, ``rfft`` and ``irfft`` with the standard's ``n``,
``axis`` and ``norm`` arguments. The adapter converts an input into the namespace's array
in :meth:`ArrayApiPlan.prepare` (outside the timed region) and the output back into a numpy
array inside the timed call (``numpy.asarray``, else DLPack), since the engine judges numpy
arrays; for numpy's own namespace, and for DLPack on the CPU, that costs no copy.

Claims are found by probing, not assumed: a kind counts as claimed when ``xp.fft`` has the
function and it transforms an 8-point input of that precision without raising; a precision
counts when the namespace has its real and complex dtypes (the standard makes float64
optional on some devices). The norms are the standard's three.
"""

from __future__ import annotations

from functools import cached_property
from typing import Any

import numpy as np

from fftgauge.backends.base import Backend, Capabilities, OptionSpec, Plan
from fftgauge.backends.user_code import import_module
from fftgauge.harness.cases import KINDS, Case
from fftgauge.harness.shapes.case import ONE_AXIS_KINDS, SHAPE_KINDS, ShapeCase
from fftgauge.harness.errors import UsageError

#: fftgauge precision -> the array API standard's (real, complex) dtype names.
STANDARD_DTYPES = {"float32": ("float32", "complex64"), "float64": ("float64", "complex128")}
#: The size every claim probe transforms.
PROBE_N = 8


def to_numpy(y: Any) -> np.ndarray:
    """Return ``y`` (an array of any namespace) as a numpy array: ``numpy.asarray`` where the
    array allows it, else ``numpy.from_dlpack``.

    Raises
    ------
    TypeError
        When the array supports neither (the engine records it as an error row).
    """
    try:
        return np.asarray(y)
    except (TypeError, ValueError, RuntimeError):
        return np.from_dlpack(y)


class ArrayApiPlan(Plan):
    """A call of ``xp.fft.<kind>`` on the namespace's array, converted back to numpy."""

    def __init__(self, case: Case, xp: Any, fn: Any, array_type: type):
        super().__init__(case)
        self._xp, self._fn, self._array_type = xp, fn, array_type
        self._kwargs = {"n": case.n, "axis": -1, "norm": case.norm}
        self._dtype = getattr(xp, STANDARD_DTYPES[case.dtype][0 if case.kind == "rfft" else 1])

    def prepare(self, x: np.ndarray) -> Any:
        """Return ``x`` as an array of the namespace, in the case's input dtype (a copy)."""
        return self._xp.asarray(np.array(x, dtype=self.case.input_dtype, copy=True), dtype=self._dtype)

    def execute(self, x: Any) -> np.ndarray:
        """Return the transform of ``x`` (a namespace array, or any numpy array) as a numpy array."""
        if type(x) is not self._array_type:
            x = self.prepare(x)
        return to_numpy(self._fn(x, **self._kwargs))


class ArrayApiShapedPlan(ArrayApiPlan):
    """A call of ``xp.fft.<kind>`` on a whole array: ``n``/``axis`` for a batch, ``s``/``axes`` for
    several axes. The input becomes the namespace's array in :meth:`prepare` (its memory
    layout is then the namespace's business)."""

    def __init__(self, case: ShapeCase, xp: Any, fn: Any, array_type: type):
        Plan.__init__(self, case)  # type: ignore[arg-type]
        self._xp, self._fn, self._array_type = xp, fn, array_type
        if case.kind in ONE_AXIS_KINDS:
            self._kwargs = {"n": case.lengths[0], "axis": case.axes[0], "norm": case.norm}
        else:
            self._kwargs = {"s": tuple(case.lengths), "axes": tuple(case.axes), "norm": case.norm}
        self._dtype = getattr(xp, STANDARD_DTYPES[case.dtype][0 if case.base_kind == "rfft" else 1])


class ArrayApiBackend(Backend):
    """The ``fft`` extension of an array API namespace.

    Options
    -------
    namespace : str, default "numpy"
        The module holding the namespace (numpy 2 is one itself).
    """

    name = "array-api"
    description = "any array API standard namespace with the fft extension"
    options = {"namespace": OptionSpec(str, "numpy", "module of an array API namespace with an fft extension")}

    def __init__(self, **opts: Any):
        super().__init__(**opts)
        module = self.opts["namespace"]
        spec = f"array-api[namespace={module}]"
        self.xp = import_module(spec, module)
        if not hasattr(self.xp, "fft") or not hasattr(self.xp, "asarray"):
            raise UsageError(f"backend {spec!r}: {module!r} is not an array API namespace with the fft "
                             f"extension (it has no {'fft' if hasattr(self.xp, 'asarray') else 'asarray'}); "
                             f"name the namespace module, e.g. namespace=numpy")
        self.array_type = type(self.xp.asarray([0.0]))
        if not self.claimed[0]:
            raise UsageError(f"backend {spec!r}: no fft function of {module!r} transforms an {PROBE_N}-point "
                             f"float32 or float64 input")

    @property
    def label(self) -> str:
        """``array-api[namespace=MODULE]`` (the namespace always shows), or the SPEC's label."""
        return self.chosen_label or f"array-api[namespace={self.opts['namespace']}]"

    @property
    def version(self) -> str:
        """The namespace module's version (``__version__``), with its standard version when it says."""
        version = str(getattr(self.xp, "__version__", "unknown"))
        standard = getattr(self.xp, "__array_api_version__", None)
        return f"{version} (array API {standard})" if standard else version

    def probe(self, kind: str, dtype: str) -> bool:
        """Return True when ``xp.fft.<kind>`` transforms a PROBE_N-point input in ``dtype``."""
        fn = getattr(self.xp.fft, kind, None)
        if fn is None or not all(hasattr(self.xp, name) for name in STANDARD_DTYPES[dtype]):
            return False
        case = Case(kind, dtype, PROBE_N)
        try:
            plan = ArrayApiPlan(case, self.xp, fn, self.array_type)
            y = plan.execute(plan.prepare(np.ones(case.input_length, dtype=case.input_dtype)))
        except Exception:  # noqa: BLE001 - any failure means the kind is not claimed
            return False
        return y.shape == (case.output_length,)

    @cached_property
    def claimed(self) -> tuple[tuple[str, ...], tuple[str, ...]]:
        """Return (kinds, precisions) the probes found; a kind counts when it works in some precision."""
        works = {(k, d) for k in KINDS for d in STANDARD_DTYPES if self.probe(k, d)}
        kinds = tuple(k for k in KINDS if any((k, d) in works for d in STANDARD_DTYPES))
        dtypes = tuple(d for d in STANDARD_DTYPES if any((k, d) in works for k in KINDS))
        return kinds, dtypes

    def probe_shaped(self, kind: str, dtype: str) -> bool:
        """Return True when ``xp.fft.<kind>`` transforms a 4x8 input in ``dtype`` (along axis 0, or over both axes)."""
        fn = getattr(self.xp.fft, kind, None)
        if fn is None or not all(hasattr(self.xp, name) for name in STANDARD_DTYPES[dtype]):
            return False
        case = ShapeCase(kind, dtype, (4, PROBE_N), (0,) if kind in ONE_AXIS_KINDS else (0, 1))
        try:
            plan = ArrayApiShapedPlan(case, self.xp, fn, self.array_type)
            y = plan.execute(plan.prepare(np.ones(case.input_shape, dtype=case.input_dtype)))
        except Exception:  # noqa: BLE001 - any failure means the kind is not claimed on arrays
            return False
        return y.shape == case.output_shape

    @cached_property
    def shaped_claimed(self) -> tuple[str, ...]:
        """Return the shaped kinds that work in every precision the 1-D probes found."""
        dtypes = self.claimed[1]
        return tuple(k for k in SHAPE_KINDS if dtypes and all(self.probe_shaped(k, d) for d in dtypes))

    def capabilities(self) -> Capabilities:
        """The kinds and precisions the probes found (at load time), the standard's three norms, any size;
        the shaped kinds whose probes on a 4x8 array worked."""
        kinds, dtypes = self.claimed
        return Capabilities(kinds=kinds, dtypes=dtypes, shaped_kinds=self.shaped_claimed)

    def details(self) -> dict[str, Any]:
        """The namespace module's name."""
        return {"namespace": self.opts["namespace"]}

    def plan(self, case: Case) -> ArrayApiPlan:
        """Return a plan calling ``xp.fft.<kind>``; nothing to plan."""
        return ArrayApiPlan(case, self.xp, getattr(self.xp.fft, case.kind), self.array_type)

    def plan_shaped(self, case: ShapeCase) -> ArrayApiShapedPlan:
        """Return a plan calling ``xp.fft.<kind>`` on the whole array; nothing to plan."""
        return ArrayApiShapedPlan(case, self.xp, getattr(self.xp.fft, case.kind), self.array_type)
