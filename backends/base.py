"""The adapter interface every FFT implementation is wrapped in.

The engine talks to an implementation in two steps, so that plan-based libraries (pyFFTW)
and plain functions (numpy.fft) both fit:

1. ``backend.plan(case)`` prepares one transform and returns a :class:`Plan`. The engine
   times this call: it is the *planning time*. A plain function does nothing here.
2. ``plan.execute(x)`` runs the transform on ``x`` and returns the output; the engine calls
   it many times. ``plan.prepare(x)`` (optional) moves an input into the layout the plan
   runs fastest on (aligned buffer, right dtype); the engine calls it *outside* the timed
   region.

A backend declares what it can do in :class:`Capabilities`; the engine asks
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
from dataclasses import dataclass, field, asdict
from typing import Any, Callable, Mapping

import numpy as np

from fftgauge.harness.cases import KINDS, NORMS, Case, is_power_of_two


@dataclass(frozen=True)
class Capabilities:
    """What a backend claims to handle.

    Attributes
    ----------
    kinds : transform kinds it computes (subset of ``fft, ifft, rfft, irfft``).
    dtypes : real precisions it computes (``float32``, ``float64``, ``longdouble``).
    sizes : ``"any"`` or ``"pow2"`` (powers of two only).
    norms : normalisations it takes (subset of ``backward, ortho, forward``).
    max_n : largest size it is practical for, or ``None`` (pure-Python references set one).
    in_place : True when a plan may overwrite its input (the ``input-intact`` check then
        does not count a changed input as a failure).
    thread_option : name of the option that sets its thread count (``workers``,
        ``threads``), or ``None`` when it has none.
    separate_planning : True when :meth:`Backend.plan` does real work (FFTW plans).
    counts_operations : True when it can count the arithmetic it performs
        (:meth:`Backend.count_operations`).
    """

    kinds: tuple[str, ...] = KINDS
    dtypes: tuple[str, ...] = ("float32", "float64")
    sizes: str = "any"
    norms: tuple[str, ...] = NORMS
    max_n: int | None = None
    in_place: bool = False
    thread_option: str | None = None
    separate_planning: bool = False
    counts_operations: bool = False

    def as_dict(self) -> dict[str, Any]:
        """Return the capabilities as plain JSON-able values."""
        d = asdict(self)
        d["kinds"] = list(self.kinds)
        d["dtypes"] = list(self.dtypes)
        d["norms"] = list(self.norms)
        return d


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


class FunctionPlan(Plan):
    """A plan that is just a function of the input: ``execute(x) = fn(x)``."""

    def __init__(self, case: Case, fn: Callable[[np.ndarray], np.ndarray]):
        super().__init__(case)
        self._fn = fn

    def execute(self, x: np.ndarray) -> np.ndarray:
        return self._fn(x)


@dataclass(frozen=True)
class OptionSpec:
    """One option a backend takes in its SPEC (``NAME[key=value]``): type, default, help."""

    type: type
    default: Any
    help: str
    choices: tuple[Any, ...] | None = None


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
        """The name with any non-default options, e.g. ``scipy[workers=2]``; used in rows."""
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
        if caps.sizes == "pow2" and not is_power_of_two(case.n):
            return f"{self.label} handles powers of two only (n = {case.n})"
        if caps.max_n is not None and case.n > caps.max_n:
            return f"{self.label} is limited to n <= {caps.max_n} (n = {case.n})"
        return None

    @abstractmethod
    def plan(self, case: Case) -> Plan:
        """Return a :class:`Plan` for ``case``.

        The engine calls this only for cases :meth:`unsupported_reason` accepts. Raises
        whatever the wrapped library raises; the engine records it as an ``error`` row.
        """

    def count_operations(self, case: Case, count_trivial: bool = True) -> OpCount:
        """Run the transform once in counting mode and return the arithmetic it performed.

        Only backends whose capabilities say ``counts_operations`` implement this.

        Raises
        ------
        NotImplementedError
            For backends that cannot count.
        """
        raise NotImplementedError(f"{self.name} cannot count its operations")

    def describe(self) -> dict[str, Any]:
        """Return name, version, description, options and capabilities as JSON-able values."""
        return {
            "name": self.label,
            "version": self.version,
            "description": self.description,
            "options": {k: {"default": s.default, "help": s.help} for k, s in self.options.items()},
            "capabilities": self.capabilities().as_dict(),
        }
