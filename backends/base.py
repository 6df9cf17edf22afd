"""The adapter interface every FFT implementation is wrapped in.

The engine talks to an implementation in two steps, so that plan-based libraries (pyFFTW)
and plain functions (numpy.fft) both fit:

1. ``backend.plan(case)`` prepares one transform and returns a :class:`Plan`. The engine
   times this call: it is the *planning time*. A plain function does nothing here.
2. ``plan.execute(x)`` runs the transform on ``x`` and returns the output; the engine calls
   it many times. ``plan.prepare(x)`` (optional) moves an input into the layout the plan
   runs fastest on (aligned buffer, right dtype); the engine calls it *outside* the timed
   region.

A backend declares what it can do in :class:`Capabilities` (sizes as a :class:`SizeRule`,
output conventions as :class:`Conventions`; both in :mod:`fftgauge.backends.claims`); the engine asks
:meth:`Backend.unsupported_reason` before planning and turns a non-``None`` answer into a
``skip`` row. A new backend is a subclass of :class:`Backend` in one file, registered in
:mod:`fftgauge.backends.registry` or under the entry-point group ``fftgauge.backends``.

Conventions every backend follows (those of numpy and the array API standard):

- ``fft``:   X[k] = sum_n x[n] exp(-2j pi k n / N), complex input of length N;
- ``ifft``:  x[n] = sum_k X[k] exp(+2j pi k n / N), scaled by 1/N under ``backward``;
- ``rfft``:  the first N//2 + 1 outputs of ``fft`` of a real input of length N;
- ``irfft``: the real length-N signal whose ``rfft`` is the N//2 + 1 complex inputs
  (imaginary parts of the DC term, and of the Nyquist term for even N, are ignored);
- ``norm``:  ``backward`` (1/N on the inverse), ``ortho`` (1/sqrt(N) on both),
  ``forward`` (1/N on the forward).
"""

from __future__ import annotations

from abc import ABC, abstractmethod
from dataclasses import dataclass, replace
from typing import Any, Callable, Mapping

import numpy as np

from fftgauge.backends.claims import (BackendClaims, BackendDescription, Capabilities, Conventions,  # noqa: F401
                                      SizeRule)
from fftgauge.harness.cases import Case
from fftgauge.harness.shapes.case import ShapeCase


@dataclass(frozen=True)
class OpCount:
    """Arithmetic performed by one transform, as counted by an instrumented backend.

    ``complex_mults`` and ``complex_adds`` are the complex operations actually executed
    (subtractions count as additions). ``real_mults``/``real_adds`` are their real-operation
    equivalents with the schoolbook complex product (4 real multiplications and 2 real
    additions) and 2 real additions per complex addition, plus any real operations the
    algorithm does directly (scaling, real-input packing).
    """

    complex_mults: int
    complex_adds: int
    real_mults: int
    real_adds: int
    trivial_twiddles_counted: bool = True

    @property
    def real_flops(self) -> int:
        """Real multiplications plus real additions."""
        return self.real_mults + self.real_adds


class Plan(ABC):
    """One planned transform of one case, executed many times.

    Subclasses implement :meth:`execute`; they may override :meth:`prepare` and
    :meth:`close`. The array :meth:`execute` returns may be a buffer the plan reuses on
    the next call: copy it if you keep it.
    """

    def __init__(self, case: Case):
        self.case = case

    def prepare(self, x: np.ndarray) -> np.ndarray:
        """Return the array to pass to :meth:`execute` for input ``x``.

        Called outside the timed region. The default returns a C-contiguous array of the
        case's input dtype (a copy when ``x`` is not one already).
        """
        return np.ascontiguousarray(x, dtype=self.case.input_dtype)

    @abstractmethod
    def execute(self, x: np.ndarray) -> np.ndarray:
        """Transform ``x`` (any layout, the case's input dtype and length) and return the output."""

    def close(self) -> None:
        """Release what the plan holds (buffers, foreign plans). Default: nothing."""

    def time_row_fields(self) -> dict[str, Any]:
        """Return what the plan measured of itself for its ``fftgauge-time/1`` row, by row field
        name (fields of :class:`fftgauge.harness.rows.TimeRow`, e.g. the host-device transfer
        fields); read after the timing, before :meth:`close`. Default: nothing (``{}``)."""
        return {}


class ShapedFunctionPlan(Plan):
    """A plan of a shaped case that is just a function of the input: ``execute(x) = fn(x)``.

    Its :meth:`prepare` keeps the input's memory layout (C, Fortran, strided, negative
    strides), casting only when the dtype differs, so that the layout a case names is the
    layout the library sees.
    """

    def __init__(self, case: ShapeCase, fn: Callable[[np.ndarray], np.ndarray]):
        super().__init__(case)  # type: ignore[arg-type]
        self._fn = fn

    def prepare(self, x: np.ndarray) -> np.ndarray:
        """Return ``x`` itself when it has the case's input dtype, else a cast keeping its layout."""
        return x if x.dtype == self.case.input_dtype else x.astype(self.case.input_dtype, order="K")

    def execute(self, x: np.ndarray) -> np.ndarray:
        return self._fn(x)


class FunctionPlan(Plan):
    """A plan that is just a function of the input: ``execute(x) = fn(x)``."""

    def __init__(self, case: Case, fn: Callable[[np.ndarray], np.ndarray]):
        super().__init__(case)
        self._fn = fn

    def execute(self, x: np.ndarray) -> np.ndarray:
        return self._fn(x)


@dataclass(frozen=True)
class OptionSpec:
    """One option a backend takes in its SPEC (``NAME[key=value]``): type, default, help, and
    the values allowed (``choices``, or a ``minimum``, exclusive when ``exclusive_minimum``),
    which the registry checks once when it parses the SPEC."""

    type: type
    default: Any
    help: str
    choices: tuple[Any, ...] | None = None
    minimum: float | None = None
    exclusive_minimum: bool = False

    def bound_text(self) -> str | None:
        """Return the minimum as a phrase (``'at least 0'``, ``'above 0'``), or None without one."""
        if self.minimum is None:
            return None
        value = int(self.minimum) if float(self.minimum).is_integer() else self.minimum
        return f"above {value}" if self.exclusive_minimum else f"at least {value}"

    def admits(self, value: Any) -> bool:
        """Return True when ``value`` satisfies the minimum (always, without one)."""
        if self.minimum is None:
            return True
        return value > self.minimum if self.exclusive_minimum else value >= self.minimum


class Backend(ABC):
    """An FFT implementation wrapped for fftgauge.

    Class attributes a subclass sets: ``name`` (as used in a SPEC), ``description`` (one
    line), ``options`` (a mapping ``option name -> OptionSpec``), ``thread_option``. Instances are built by the
    registry with validated options in ``self.opts``.
    """

    name: str = "unnamed"
    description: str = ""
    options: Mapping[str, OptionSpec] = {}
    #: The option in ``options`` that sets the thread count, if any (``--threads`` sets it).
    thread_option: str | None = None
    #: True for the engine's synthetic backends (null, busywait), which compute no transform.
    synthetic: bool = False
    #: The label the SPEC gave (``label=``), set by the registry; None: derived (:attr:`label`).
    chosen_label: str | None = None
    #: Conventions the SPEC declared (``sign=``, ``order=``, ...), set by the registry; they
    #: override those of :meth:`capabilities` (see :attr:`conventions`).
    declared_conventions: Conventions | None = None

    def __init__(self, **opts: Any):
        self.opts = {k: spec.default for k, spec in self.options.items()}
        self.opts.update(opts)

    # -- what the backend is --------------------------------------------------------------
    @property
    def version(self) -> str:
        """Version string of the wrapped implementation (library version, or the adapter's)."""
        return "unknown"

    @property
    def label(self) -> str:
        """The label used in rows, tables, plots and files: the SPEC's ``label=`` when given,
        else the name with any non-default options, e.g. ``scipy[workers=2]``."""
        if self.chosen_label:
            return self.chosen_label
        changed = {k: v for k, v in self.opts.items() if k in self.options and v != self.options[k].default}
        if not changed:
            return self.name
        inner = ",".join(f"{k}={v}" for k, v in sorted(changed.items()))
        return f"{self.name}[{inner}]"

    @abstractmethod
    def capabilities(self) -> Capabilities:
        """Return what this backend claims to handle."""

    # -- what the engine calls ------------------------------------------------------------
    def unsupported_reason(self, case: Case) -> str | None:
        """Return why ``case`` is outside this backend's claims, or ``None`` when it is inside."""
        caps = self.capabilities()
        if case.kind not in caps.kinds:
            return f"{self.label} does not compute {case.kind} (it claims {', '.join(caps.kinds)})"
        if case.dtype not in caps.dtypes:
            return f"{self.label} does not compute in {case.dtype} (it claims {', '.join(caps.dtypes)})"
        if case.norm not in caps.norms:
            return f"{self.label} does not take norm={case.norm} (it claims {', '.join(caps.norms)})"
        why = caps.size_rule(case.kind, case.dtype).reason(case.n)
        if why is not None:
            return f"{self.label} handles {why} (n = {case.n})"
        return None

    @property
    def conventions(self) -> Conventions:
        """The conventions its outputs follow: those the SPEC declared over those of its capabilities."""
        base = self.capabilities().conventions
        return self.declared_conventions.over(base) if self.declared_conventions is not None else base

    @abstractmethod
    def plan(self, case: Case) -> Plan:
        """Return a :class:`Plan` for ``case``.

        The engine calls this only for cases :meth:`unsupported_reason` accepts. Raises
        whatever the wrapped library raises; the engine records it as an ``error`` row.
        """

    def shaped_unsupported_reason(self, case: ShapeCase) -> str | None:
        """Return why the shaped ``case`` is outside this backend's claims, or ``None``.

        Checks the capabilities' ``shaped_kinds``, precision, norm, ``max_shaped_points`` and,
        for each transformed axis, the size rule of the 1-D transform along it.
        """
        caps = self.capabilities()
        if not caps.shaped_kinds:
            return f"{self.label} transforms one 1-D array only (it claims no batched or N-D kinds)"
        if case.kind not in caps.shaped_kinds:
            return f"{self.label} does not compute {case.kind} on arrays (it claims {', '.join(caps.shaped_kinds)})"
        if case.dtype not in caps.dtypes:
            return f"{self.label} does not compute in {case.dtype} (it claims {', '.join(caps.dtypes)})"
        if case.norm not in caps.norms:
            return f"{self.label} does not take norm={case.norm} (it claims {', '.join(caps.norms)})"
        total = int(np.prod(case.shape))
        if caps.max_shaped_points is not None and total > caps.max_shaped_points:
            return f"{self.label} takes arrays of at most {caps.max_shaped_points} points ({total} here)"
        for position in range(len(case.axes)):
            line = case.line_case(position)
            why = caps.size_rule(line.kind, line.dtype).reason(line.n)
            if why is not None:
                return f"{self.label} handles {why} (length {line.n} along axis {case.axes[position]})"
        return None

    def plan_shaped(self, case: ShapeCase) -> Plan:
        """Return a :class:`Plan` for the shaped ``case`` (its ``execute`` takes the whole array).

        The engine calls this only for cases :meth:`shaped_unsupported_reason` accepts.

        Raises
        ------
        NotImplementedError
            For backends that claim no shaped kinds.
        """
        raise NotImplementedError(f"{self.name} does not compute batched or N-D transforms")

    def count_operations(self, case: Case, count_trivial: bool = True) -> OpCount:
        """Run the transform once in counting mode and return the arithmetic it performed.

        Only backends whose capabilities say ``counts_operations`` implement this.

        Raises
        ------
        NotImplementedError
            For backends that cannot count.
        """
        raise NotImplementedError(f"{self.name} cannot count its operations")

    def details(self) -> dict[str, Any]:
        """Return what this kind of backend adds to its description (JSON-able values); default none."""
        return {}

    def describe(self) -> BackendDescription:
        """Return name (the label), version, description, options, capabilities (with the
        conventions the SPEC declared) and :meth:`details`, as a :class:`BackendDescription`."""
        caps = self.capabilities()
        if self.declared_conventions is not None:
            caps = replace(caps, conventions=self.conventions)
        return BackendDescription(
            name=self.label, version=self.version, description=self.description,
            options={k: {"default": s.default, "help": s.help} for k, s in self.options.items()},
            capabilities=caps, details=self.details())
